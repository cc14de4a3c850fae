"""The names of the output contract (DESIGN sections 5 and 6) that clients rely on.

Fields are only ever added: a name here is never renamed or removed.
"""

from __future__ import annotations

#: the two regional aggregations every region is reported under
AGGREGATIONS: tuple[str, ...] = ("acc_of_region_mean", "region_mean_of_acc")
DEFAULT_AGGREGATION = "acc_of_region_mean"
#: the per-cell map fields of ``maps.nc`` and ``GET .../maps/{window}?field=``
MAP_FIELDS: tuple[str, ...] = (
    "gain",
    "gain_low",
    "gain_high",
    "acc_realistic",
    "acc_scrambled",
    "p_value",
    "significant",
    # with scramble "other_years" (fields are only ever added)
    "gain_corrected",
    "gain_corrected_low",
    "gain_corrected_high",
    "acc_scrambled_corrected",
)
#: the files of a saved score result (``ScoreResult.save`` / ``ScoreResult.load``)
RESULT_FILES: tuple[str, ...] = ("skill.json", "maps.nc", "anomalies.nc", "result.json")
#: what the CLI and the service print beside every result
CAUTION = (
    "These are statistical results about hindcasts, not a guarantee of forecast quality, and not "
    "for life-safety warnings; decisions rest with the forecasters and their centre's practice."
)
