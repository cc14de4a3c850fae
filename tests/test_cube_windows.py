"""Lead windows: the default weekly set, the CLI form LABEL=FIRST-LAST, and the hindcast's reach.

Source: DESIGN section 3.2 (week k = lead days 7k-6 .. 7k, weeks 3-4 = days 15-28, then further
weeks while the hindcast reaches them); weekly means and the fortnight 3-4 are the common
practice of sub-seasonal verification.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest
from cf_factory import CasePaths
from run_support import run_options

from app.cube.inputs import prepare
from app.cube.windows import LeadWindow, default_windows, lead_indices
from app.errors import InputError, ParameterError
from app.runs.options import window_from_text
from app.runs.scoring import run_engine

BASE = [("week 1", 1, 7), ("week 2", 8, 14), ("week 3", 15, 21), ("week 4", 22, 28), ("weeks 3-4", 15, 28)]


def _triples(ws: list[LeadWindow]) -> list[tuple[str, int, int]]:
    return [(w.label, w.first_day, w.last_day) for w in ws]


@pytest.mark.parametrize(
    ("max_lead", "expected"),
    [
        (28, BASE),
        (30, BASE),
        (34, BASE),
        (35, BASE + [("week 5", 29, 35)]),
        (46, BASE + [("week 5", 29, 35), ("week 6", 36, 42)]),
        (14, BASE[:2]),
        (7, BASE[:1]),
    ],
)
def test_default_windows(max_lead: int, expected: list[tuple[str, int, int]]) -> None:
    assert _triples(default_windows(max_lead)) == expected


def test_default_windows_need_a_week() -> None:
    with pytest.raises(ParameterError, match="lead day 6 only"):
        default_windows(6)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("week 2=8-14", ("week 2", 8, 14)),
        ("  wk34 = 15 - 28 ", ("wk34", 15, 28)),
        ("days 3-10=3-10", ("days 3-10", 3, 10)),
        ("d1=1-1", ("d1", 1, 1)),
    ],
)
def test_parse_window(text: str, expected: tuple[str, int, int]) -> None:
    options = run_options(lead_windows=[window_from_text(text)])
    assert options.lead_windows is not None
    w = options.lead_windows[0].window()
    assert (w.label, w.first_day, w.last_day) == expected
    assert w.days == expected[2] - expected[1] + 1


@pytest.mark.parametrize("text", ["week 2", "=8-14", "w=8", "w=8-", "w=a-b", "w=-3-5", "w=14-8", "w=0-7"])
def test_parse_window_rejects(text: str) -> None:
    with pytest.raises(ParameterError) as err:
        run_options(lead_windows=[window_from_text(text)])
    assert "window" in err.value.message


def test_lead_window_options_are_checked() -> None:
    assert run_options().lead_windows is None
    ws = run_options(lead_windows=[{"label": "a", "first_day": 2, "last_day": 5}]).scoring().lead_windows
    assert ws is not None and _triples(list(ws)) == [("a", 2, 5)]
    with pytest.raises(ParameterError, match="unique"):
        run_options(lead_windows=[{"label": "a", "first_day": 1, "last_day": 2}] * 2)
    with pytest.raises(ParameterError, match="at least 1 item"):
        run_options(lead_windows=[])
    with pytest.raises(ParameterError, match="last_day: Field required"):
        run_options(lead_windows=[{"label": "a", "first_day": 1}])


def test_lead_indices_positions_and_reach() -> None:
    lead_days = np.arange(1, 29)
    idx = lead_indices([LeadWindow("w2", 8, 14)], lead_days, file="h.nc")
    np.testing.assert_array_equal(idx[0], np.arange(7, 14))
    with pytest.raises(InputError) as err:
        lead_indices([LeadWindow("late", 20, 40)], lead_days, file="h.nc")
    msg = err.value.message
    assert "h.nc" in msg and "'late'" in msg and "20-40" in msg and "beyond the hindcast" in msg
    assert "1-28" in msg


@pytest.mark.parametrize(
    ("n_leads", "labels"),
    [(28, [w[0] for w in BASE]), (35, [w[0] for w in BASE] + ["week 5"]), (14, ["week 1", "week 2"])],
)
def test_engine_uses_the_default_windows_the_hindcast_reaches(
    make_cf_case: Callable[..., CasePaths], n_leads: int, labels: list[str]
) -> None:
    case = make_cf_case(n_leads=n_leads)
    prep = prepare(*case.engine_args())
    try:
        assert [w.label for w in prep.windows] == labels
    finally:
        prep.close()


@pytest.mark.parametrize("encoding", ["days_from_zero", "hours"])
def test_lead_day_encodings_give_the_same_windows(make_cf_case: Callable[..., CasePaths], encoding: str) -> None:
    """Lead day d is the d-th day after init whether stored as 1..N days, 0..N-1 days or 24d hours."""
    options = run_options(resamples=20)
    plain = run_engine(*make_cf_case().engine_args(), options=options)
    other = run_engine(*make_cf_case(lead_encoding=encoding).engine_args(), options=options)
    np.testing.assert_array_equal(other.cube.realistic, plain.cube.realistic)
    np.testing.assert_array_equal(other.cells.acc_realistic, plain.cells.acc_realistic)


def test_window_beyond_the_hindcast_is_an_input_error(cf_case: CasePaths) -> None:
    options = run_options(lead_windows=[{"label": "late", "first_day": 22, "last_day": 35}], resamples=10)
    with pytest.raises(InputError) as err:
        run_engine(*cf_case.engine_args(), options=options)
    assert "realistic.nc" in err.value.message and "'late'" in err.value.message
    assert "beyond the hindcast" in err.value.message
