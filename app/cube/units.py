"""Unit parsing and conversion with pint, through cf-xarray's CF-aware unit registry.

Only linear conversions occur between files (scale and offset: K and degC, kg m-2 s-1 and
mm day-1, ...), so a conversion is reduced to two numbers and applied to plain arrays.
Water fluxes given as mass per area per time convert to depth per time through the density of
liquid water, 1000 kg m-3 (common practice for precipitation and evaporation).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pint
from cf_xarray.units import units as ureg
from numpy.typing import NDArray

from app.errors import InputError

WATER_DENSITY = ureg.Quantity(1000.0, "kg m-3")


@dataclass(frozen=True)
class Conversion:
    """``target = offset + scale * source``."""

    scale: float = 1.0
    offset: float = 0.0

    @property
    def identity(self) -> bool:
        return self.scale == 1.0 and self.offset == 0.0

    def apply(self, values: NDArray[np.floating]) -> NDArray[np.float64]:
        out = np.asarray(values, dtype=np.float64)
        return out if self.identity else self.offset + self.scale * out


def parse_units(text: object, *, file: str, variable: str) -> pint.Unit:
    """The pint unit of a ``units`` attribute; InputError if missing or unknown."""
    if text is None or (isinstance(text, str) and not text.strip()):
        raise InputError("has no 'units' attribute; add CF units such as 'K'", file=file, variable=variable)
    try:
        return ureg.Unit(str(text))
    except Exception as exc:  # pint's parser also raises TokenError, AssertionError, ZeroDivisionError
        raise InputError(
            f"units {text!r} are not understood ({exc}); give CF units such as 'K' or 'kg m-2 s-1'",
            file=file,
            variable=variable,
        ) from exc


def conversion(
    source: pint.Unit, target: pint.Unit, *, file: str, variable: str, target_file: str
) -> Conversion:
    """The linear map from ``source`` units to ``target`` units; InputError if incompatible."""
    if source == target:
        return Conversion()
    try:
        return _linear(source, target, via=None)
    except pint.DimensionalityError:
        pass
    for via in (WATER_DENSITY, 1.0 / WATER_DENSITY):
        try:
            return _linear(source, target, via=via)
        except pint.DimensionalityError:
            continue
    raise InputError(
        f"units {source:~} do not convert to {target:~} used by {target_file}",
        file=file,
        variable=variable,
    )


def _linear(source: pint.Unit, target: pint.Unit, *, via: pint.Quantity | None) -> Conversion:
    def convert(x: float) -> float:
        q = ureg.Quantity(x, source)
        if via is not None:
            q = q / via
        return float(q.to(target).magnitude)

    zero, one = convert(0.0), convert(1.0)
    return Conversion(scale=one - zero, offset=zero)

