"""Lead windows: the default weekly set, parsing, and checks against a hindcast's lead days."""

from __future__ import annotations

import re
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

    def __post_init__(self) -> None:
        if not self.label or not self.label.strip():
            raise ParameterError("a lead window needs a non-empty label")
        if not (1 <= self.first_day <= self.last_day):
            raise ParameterError(
                f"lead window {self.label!r} has days {self.first_day}-{self.last_day}; "
                "need 1 <= first_day <= last_day"
            )

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


_WINDOW_TEXT = re.compile(r"^\s*(?P<label>[^=]+?)\s*=\s*(?P<first>\d+)\s*-\s*(?P<last>\d+)\s*$")


def parse_window(text: str) -> LeadWindow:
    """``"LABEL=FIRST-LAST"`` (CLI form), e.g. ``"week 2=8-14"``."""
    m = _WINDOW_TEXT.match(text)
    if not m:
        raise ParameterError(f"lead window {text!r} is not of the form LABEL=FIRST-LAST, e.g. 'week 2=8-14'")
    return LeadWindow(m["label"], int(m["first"]), int(m["last"]))


def windows_from_dicts(items: list[dict[str, object]] | None) -> list[LeadWindow] | None:
    """Windows from ``{"label", "first_day", "last_day"}`` dicts (API form)."""
    if items is None:
        return None
    out = []
    for item in items:
        try:
            out.append(LeadWindow(str(item["label"]), int(item["first_day"]), int(item["last_day"])))  # type: ignore[call-overload]
        except (KeyError, TypeError, ValueError) as exc:
            raise ParameterError(f"lead window {item!r} needs label, first_day and last_day ({exc})") from exc
    labels = [w.label for w in out]
    if len(set(labels)) != len(labels):
        raise ParameterError(f"lead window labels must be unique, got {labels}")
    if not out:
        raise ParameterError("the list of lead windows is empty")
    return out


def lead_indices(
    windows: list[LeadWindow], lead_days: NDArray[np.int64], *, file: str, variable: str | None = None
) -> list[NDArray[np.int64]]:
    """Positions on the lead axis of each window's days; InputError if the hindcast lacks any."""
    position = {int(d): i for i, d in enumerate(lead_days)}
    out = []
    for w in windows:
        missing = [d for d in range(w.first_day, w.last_day + 1) if d not in position]
        if missing:
            raise InputError(
                f"lead window {w.label!r} ({w.first_day}-{w.last_day}) goes beyond the hindcast, "
                f"which has lead days {int(lead_days[0])}-{int(lead_days[-1])} (missing {missing[0]}"
                f"{'...' if len(missing) > 1 else ''})",
                file=file,
                variable=variable,
            )
        out.append(np.array([position[d] for d in range(w.first_day, w.last_day + 1)], dtype=np.int64))
    return out
