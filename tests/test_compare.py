"""Version comparison (DESIGN 3.9) and the random-walk sign test."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from run_support import comparison_options, run_options
from scipy import stats as sps

from app.errors import ParameterError
from app.runs.compare import compare_experiments
from app.runs.scoring import score_files
from app.stats.signtest import random_walk_sign_test

SAMPLE = Path(__file__).resolve().parent.parent / "sample_data"


@pytest.fixture(scope="module")
def results() -> dict[str, object]:
    opts = run_options(resamples=400, seed=7)
    f = {r: SAMPLE / f"{r}.nc" for r in ("realistic", "scrambled", "observations")}
    # baseline: a "land scheme" whose realistic starts are no better than scrambled ones
    baseline = score_files(f["scrambled"], f["scrambled"], f["observations"], options=opts, experiment="scheme A")
    candidate = score_files(f["realistic"], f["scrambled"], f["observations"], options=opts, experiment="scheme B")
    return {"a": baseline, "b": candidate}


def test_candidate_with_real_land_starts_beats_baseline(results: dict) -> None:
    cmp = compare_experiments(results["a"], results["b"], options=comparison_options(region="box:34,58,17,31", resamples=400, seed=7))
    assert cmp["baseline"] == "scheme A" and cmp["candidate"] == "scheme B"
    week3 = next(w for w in cmp["windows"] if w["label"] == "week 3")
    assert week3["gain_baseline"] == pytest.approx(0.0, abs=1e-9)
    assert week3["gain_difference"]["value"] > 0.15
    assert week3["gain_difference"]["low"] > 0 and week3["gain_difference"]["p_value"] < 0.05
    st = week3["sign_test"]
    assert st["candidate_better"] > st["baseline_better"]
    assert week3["n_samples"] == 80
    assert st["candidate_better"] + st["baseline_better"] + st["ties"] + st["missing_years"] == cmp["n_years"] == 20
    # the exact two-sided binomial p-value (scipy.stats.binomtest) of the same counts
    n = st["candidate_better"] + st["baseline_better"]
    assert st["p_value"] == pytest.approx(sps.binomtest(st["candidate_better"], n, 0.5).pvalue, abs=1e-6)


def test_self_comparison_is_zero(results: dict) -> None:
    cmp = compare_experiments(results["b"], results["b"], options=comparison_options(resamples=200))
    assert [w["label"] for w in cmp["windows"]] == ["week 1", "week 2", "week 3", "week 4", "weeks 3-4"]
    for w in cmp["windows"]:
        assert w["gain_difference"]["value"] == 0.0
        assert w["gain_difference"]["low"] == 0.0 and w["gain_difference"]["high"] == 0.0
        assert w["sign_test"]["ties"] == cmp["n_years"]
        assert not w["sign_test"]["significant"]


def test_interval_and_p_value_agree(results: dict) -> None:
    cmp = compare_experiments(results["a"], results["b"], options=comparison_options(resamples=400, confidence=0.9))
    assert len(cmp["windows"]) == 5
    for w in cmp["windows"]:
        for key in ("gain_difference", "acc_realistic_difference"):
            d = w[key]
            excludes = d["low"] > 0 or d["high"] < 0
            assert excludes == (d["p_value"] < 0.1)


def test_different_observations_are_refused(results: dict, tmp_path: Path) -> None:
    other = results["b"].meta.copy()
    other["provenance"] = {**other["provenance"], "inputs_sha256": {"observations": "0" * 64}}
    b = results["b"]
    saved, b.meta = b.meta, other
    try:
        with pytest.raises(ParameterError, match="different observation files"):
            compare_experiments(results["a"], b, options=comparison_options())
    finally:
        b.meta = saved


def test_sign_test_counts_and_bound() -> None:
    # one start per year: (n_years, n_per_year) = (6, 1); the NaN year is missing, not a tie
    a = np.array([1.0, 2.0, 3.0, 1.0, np.nan, 2.0]).reshape(6, 1)
    b = np.array([0.5, 2.5, 1.0, 1.0, 1.0, 1.0]).reshape(6, 1)
    st = random_walk_sign_test(a, b, confidence=0.95)
    assert (st.candidate_better, st.baseline_better, st.ties, st.missing_years) == (3, 1, 1, 1)
    assert list(st.walk) == [1, 0, 1, 2]
    # exact binomial bound: no walk of 4 steps reaches p < 0.05 (scipy.stats.binomtest(4, 4) = 0.125)
    assert np.isinf(st.bound) and sps.binomtest(4, 4, 0.5).pvalue > 0.05
    assert st.p_value == pytest.approx(sps.binomtest(3, 4, 0.5).pvalue)
    assert not st.significant


def test_sign_test_detects_a_consistently_better_forecast() -> None:
    rng = np.random.default_rng(3)
    err_a = np.abs(rng.standard_normal(200)).reshape(40, 5)  # 40 years of 5 starts
    err_b = err_a * 0.7
    st = random_walk_sign_test(err_a, err_b)
    assert st.candidate_better == 40 and st.significant and st.p_value < 1e-10
