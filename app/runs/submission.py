"""Submitting runs: an experiment (its datasets must fit together) or a version comparison.

An experiment is admitted only when its datasets have the roles of their slots and fit together
(variable, units, grid, start dates, lead windows: the engine's ``check_inputs``) and its region
names resolve on the grid; then it is stored with its score job in one transaction. The service
and ``landlift demo`` both submit through here.
"""

from __future__ import annotations

from typing import Any

from app.cube.pipeline import check_inputs
from app.cube.regions import resolve_region
from app.errors import LandliftError, ParameterError
from app.runs.options import ComparisonOptions, RunOptions
from app.store import Store, comparison_rows, dataset_rows, experiment_rows

SLOTS: tuple[str, ...] = ("realistic", "scrambled", "observations", "land_state")


def submit_experiment(
    store: Store,
    *,
    name: str,
    datasets: dict[str, str | None],
    options: RunOptions,
    parameters: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Check the slots and the fit of the datasets, then queue the experiment's score job.

    ``parameters`` is the request as the client sent it (shown back by GET).
    """
    scoring = options.scoring()  # resolves region names: 404 for an unknown id
    paths: dict[str, Any] = {}
    names: dict[str, str] = {}
    for slot, dataset_id in datasets.items():
        if dataset_id is None:
            continue
        dataset = dataset_rows.get_dataset(store, dataset_id)  # 404 for an unknown id
        expected = dataset_rows.SLOT_ROLES[slot]
        if dataset["role"] != expected:
            raise ParameterError(
                f"{slot} dataset {dataset_id!r} has role {dataset['role']!r}; the {slot} slot "
                f"needs a {expected!r} dataset",
                slot=slot,
                dataset=dataset_id,
                role=dataset["role"],
                expected=expected,
            )
        paths[slot] = dataset_rows.dataset_path(store, dataset_id)
        shown = dataset.get("filename") or dataset_id
        names[paths[slot].name] = f"{shown} (dataset {dataset_id}, {slot})"
    if datasets.get("realistic") == datasets.get("scrambled"):
        raise ParameterError(
            f"realistic and scrambled are the same dataset {datasets.get('realistic')!r}: the gain "
            "needs two different hindcasts",
            realistic=datasets.get("realistic"), scrambled=datasets.get("scrambled"),
        )
    try:
        check_inputs(
            paths["realistic"],
            paths["scrambled"],
            paths["observations"],
            paths.get("land_state"),
            variable=scoring.variable,
            lead_windows=scoring.lead_windows,
            regions=scoring.regions,
            min_coverage=scoring.min_coverage,
        )
    except LandliftError as exc:
        raise _renamed(exc, names) from None
    return experiment_rows.create_experiment(
        store,
        name=name,
        realistic=datasets["realistic"] or "",
        scrambled=datasets["scrambled"] or "",
        observations=datasets["observations"] or "",
        land_state=datasets.get("land_state"),
        options=options.dump(),
        parameters=parameters,
    )


def submit_comparison(
    store: Store, *, baseline: str, candidate: str, options: ComparisonOptions
) -> dict[str, Any]:
    """Queue the comparison of ``candidate`` against ``baseline`` (both finished)."""
    resolve_region(options.region)  # 404 for an unknown region id, before anything is queued
    return comparison_rows.create_comparison(
        store, baseline=baseline, candidate=candidate, options=options.dump()
    )


def _renamed(exc: LandliftError, names: dict[str, str]) -> LandliftError:
    """The engine names stored files by their content address: name the datasets instead."""

    def fix(value: Any) -> Any:
        if isinstance(value, str):
            for stored, shown in names.items():
                value = value.replace(stored, shown)
        return value

    exc.message = fix(exc.message)
    exc.detail = {k: fix(v) for k, v in exc.detail.items()}
    exc.args = (exc.message,)
    return exc
