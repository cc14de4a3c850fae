"""The JSON form of a version comparison (DESIGN 3.9), from :class:`VersionComparison` arrays."""

from __future__ import annotations

from typing import Any

from app.cube.versions import VersionComparison
from app.cube.windows import LeadWindow
from app.results.curves import _num


def comparison_json(
    cmp: VersionComparison,
    windows: list[LeadWindow],
    *,
    header: dict[str, Any],
) -> dict[str, Any]:
    """``header`` (experiments, variable, region, bootstrap settings, layout) plus per window
    the gains, the realistic ACCs, both differences with intervals, and the sign test."""
    entries = []
    for w, win in enumerate(windows):
        st = cmp.sign_tests[w]
        entries.append(
            {
                **win.to_dict(),
                "n_samples": int(cmp.n_samples[w]),
                "n_years": int(cmp.n_years[w]),
                "gain_baseline": _num(cmp.gain_baseline[w]),
                "gain_candidate": _num(cmp.gain_candidate[w]),
                "gain_difference": {
                    "value": _num(cmp.gain_candidate[w] - cmp.gain_baseline[w]),
                    "low": _num(cmp.gain_difference.low[w]),
                    "high": _num(cmp.gain_difference.high[w]),
                    "p_value": _num(cmp.gain_difference.p_value[w]),
                },
                "acc_realistic_baseline": _num(cmp.acc_realistic_baseline[w]),
                "acc_realistic_candidate": _num(cmp.acc_realistic_candidate[w]),
                "acc_realistic_difference": {
                    "value": _num(cmp.acc_realistic_candidate[w] - cmp.acc_realistic_baseline[w]),
                    "low": _num(cmp.acc_realistic_difference.low[w]),
                    "high": _num(cmp.acc_realistic_difference.high[w]),
                    "p_value": _num(cmp.acc_realistic_difference.p_value[w]),
                },
                "gain_difference_corrected": {
                    "value": _num(cmp.gain_difference_corrected_value[w]),
                    "low": _num(cmp.gain_difference_corrected.low[w]),
                    "high": _num(cmp.gain_difference_corrected.high[w]),
                    "p_value": _num(cmp.gain_difference_corrected.p_value[w]),
                },
                "sign_test": {
                    "unit": "year",
                    "candidate_better": st.candidate_better,
                    "baseline_better": st.baseline_better,
                    "ties": st.ties,
                    "missing_years": st.missing_years,
                    "walk": st.final,
                    "bound": _num(st.bound),
                    "p_value": _num(st.p_value),
                    "significant": st.significant,
                },
            }
        )
    return {**header, "windows": entries}
