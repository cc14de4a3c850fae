"""Run options for tests: the bootstrap settings as keywords beside the other options.

``run_options(resamples=50, seed=7, regions=[...])`` is ``RunOptions`` with ``bootstrap =
{"resamples": 50, "seed": 7}``, validated by the model exactly as a request body is.
"""

from __future__ import annotations

from typing import Any

from app.runs.options import ComparisonOptions, RunOptions, validated

BOOTSTRAP_KEYS = ("resamples", "seed", "confidence", "interval")


def _split(kwargs: dict[str, Any]) -> dict[str, Any]:
    boot = {k: kwargs.pop(k) for k in BOOTSTRAP_KEYS if k in kwargs}
    return {**kwargs, "bootstrap": boot}


def run_options(**kwargs: Any) -> RunOptions:
    return validated(RunOptions, _split(dict(kwargs)))  # type: ignore[no-any-return]


def comparison_options(**kwargs: Any) -> ComparisonOptions:
    return validated(ComparisonOptions, _split(dict(kwargs)))  # type: ignore[no-any-return]
