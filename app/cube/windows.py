"""Lead windows: the default weekly set and the check against a hindcast's lead days.

Windows arrive here already validated (labels, day bounds: :mod:`app.runs.options`); this module
only lays them out on a hindcast's lead axis.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
from numpy.typing import NDArray

from app.errors import InputError, ParameterError


@dataclass(frozen=True)
class LeadWindow:
    """Lead days ``first_day..last_day`` inclusive (lead day 1 = the first day after init)."""

    label: str
    first_day: int
    last_day: int

    @property
    def days(self) -> int:
        return self.last_day - self.first_day + 1

    def to_dict(self) -> dict[str, object]:
        return asdict(self)


def default_windows(max_lead_day: int) -> list[LeadWindow]:
    """Week 1-4 and weeks 3-4 (DESIGN 3.2), then further weeks while the hindcast reaches them."""
    wanted = [LeadWindow(f"week {k}", 7 * k - 6, 7 * k) for k in (1, 2, 3, 4)]
    wanted.append(LeadWindow("weeks 3-4", 15, 28))
    k = 5
    while 7 * k <= max_lead_day:
        wanted.append(LeadWindow(f"week {k}", 7 * k - 6, 7 * k))
        k += 1
    reachable = [w for w in wanted if w.last_day <= max_lead_day]
    if not reachable:
        raise ParameterError(
            f"the hindcast reaches lead day {max_lead_day} only; the default windows need 7 days: "
            "give windows explicitly"
        )
    return reachable


def lead_indices(
    windows: list[LeadWindow], lead_days: NDArray[np.int64], *, file: str, variable: str | None = None
) -> list[NDArray[np.int64]]:
    """Positions on the lead axis of each window's days; InputError if the hindcast lacks any."""
    days = np.asarray(lead_days, dtype=np.int64)
    out = []
    for w in windows:
        # the hindcast's own lead days bound the work, whatever the window asks for
        inside = np.flatnonzero((days >= w.first_day) & (days <= w.last_day))
        if inside.size != w.days:
            have = set(days[inside].tolist())
            first_missing = next(d for d in range(w.first_day, w.last_day + 1) if d not in have)
            raise InputError(
                f"lead window {w.label!r} ({w.first_day}-{w.last_day}) goes beyond the hindcast, "
                f"which has lead days {int(days[0])}-{int(days[-1])} (missing {first_missing}"
                f"{'...' if w.days - inside.size > 1 else ''})",
                file=file,
                variable=variable,
            )
        out.append(inside.astype(np.int64))
    return out
