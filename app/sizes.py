"""Byte sizes written as text: ``"512MiB"``, ``"2GiB"``, ``"1.5GB"``, ``1048576``."""

from __future__ import annotations

import re

_UNITS = {
    "": 1,
    "b": 1,
    "k": 1000,
    "kb": 1000,
    "m": 1000**2,
    "mb": 1000**2,
    "g": 1000**3,
    "gb": 1000**3,
    "t": 1000**4,
    "tb": 1000**4,
    "kib": 1024,
    "mib": 1024**2,
    "gib": 1024**3,
    "tib": 1024**4,
}
_SIZE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*([a-zA-Z]*)\s*$")


def parse_size(value: str | int | float) -> int:
    """Parse a byte size such as ``"512MiB"``, ``"2GiB"``, ``"1.5GB"`` or ``1048576`` to bytes.

    Binary units (KiB, MiB, GiB, TiB) are powers of 1024, decimal ones (kB, MB, GB, TB) powers of
    1000; a bare number is bytes. Raises ``ValueError`` naming the value and the accepted units.
    """
    if isinstance(value, bool):
        raise ValueError(f"size {value!r} is not a number of bytes")
    if isinstance(value, int | float):
        number, unit = float(value), ""
    else:
        match = _SIZE.match(value)
        if match is None:
            raise ValueError(
                f"size {value!r} is not understood: give a number with an optional unit "
                f"({', '.join(u for u in ('B', 'kB', 'MB', 'GB', 'TB', 'KiB', 'MiB', 'GiB', 'TiB'))})"
            )
        number, unit = float(match.group(1)), match.group(2).lower()
    if unit not in _UNITS:
        raise ValueError(
            f"size {value!r} has unknown unit {unit!r}: use B, kB, MB, GB, TB, KiB, MiB, GiB or TiB"
        )
    size = int(number * _UNITS[unit])
    if size <= 0:
        raise ValueError(f"size {value!r} must be positive")
    return size


#: smallest memory budget a run accepts (the interpreter and libraries alone are ~250 MB, but
#: tile planning stays meaningful down to this)
MIN_MEMORY_BUDGET = 16 * 1024**2
