"""Unit parsing and conversion (app.cube.units) against pint through cf-xarray's unit registry.

The references are pint itself (``cf_xarray.units.units``, the registry DESIGN section 2 names)
and the definitions of the units: 0 degC = 273.15 K (SI definition of the Celsius scale), and
1 kg m-2 of liquid water is a 1 mm layer (density 1000 kg m-3; common practice), so
1 mm day-1 = 1 / 86400 kg m-2 s-1.
"""

from __future__ import annotations

import numpy as np
import pytest
from cf_xarray.units import units as cf_ureg

from app.cube.units import Conversion, conversion, parse_units
from app.errors import InputError


def _conv(source: str, target: str) -> Conversion:
    return conversion(
        parse_units(source, file="src.nc", variable="v"),
        parse_units(target, file="dst.nc", variable="v"),
        file="src.nc",
        variable="v",
        target_file="dst.nc",
    )


@pytest.mark.parametrize(
    ("source", "target"),
    [("degC", "K"), ("K", "degC"), ("degree_Celsius", "K"), ("mm day-1", "mm s-1"), ("g kg-1", "1"),
     ("hPa", "Pa"), ("W m-2", "mW m-2")],
)
def test_linear_conversion_equals_pint(source: str, target: str) -> None:
    values = np.array([-40.0, 0.0, 1.5, 300.0])
    expected = cf_ureg.Quantity(values, source).to(target).magnitude  # pint, cf-xarray registry
    np.testing.assert_allclose(_conv(source, target).apply(values), expected, rtol=1e-12, atol=1e-9)


def test_celsius_to_kelvin_is_the_si_offset() -> None:
    c = _conv("degC", "K")
    assert c.scale == pytest.approx(1.0, abs=1e-12)
    assert c.offset == pytest.approx(273.15, abs=1e-9)  # SI: T/K = t/degC + 273.15


@pytest.mark.parametrize("flux", ["kg m-2 s-1", "kg/m2/s"])
def test_water_flux_mass_to_depth(flux: str) -> None:
    # 1 kg m-2 of water = 1 mm (density 1000 kg m-3, common practice): 1 kg m-2 s-1 = 86400 mm/day
    assert _conv(flux, "mm day-1").apply(np.array([1.0]))[0] == pytest.approx(86400.0, rel=1e-12)
    assert _conv("mm day-1", flux).apply(np.array([86400.0]))[0] == pytest.approx(1.0, rel=1e-12)
    # and the same through pint with an explicit density
    density = cf_ureg.Quantity(1000.0, "kg m-3")
    via_pint = (cf_ureg.Quantity(2.5, "mm day-1") * density).to(flux).magnitude
    assert _conv("mm day-1", flux).apply(np.array([2.5]))[0] == pytest.approx(via_pint, rel=1e-12)


def test_identity_and_equal_spellings() -> None:
    assert _conv("K", "K").identity
    assert _conv("kg m-2 s-1", "kg/m2/s").apply(np.array([3e-5]))[0] == pytest.approx(3e-5, rel=1e-12)


@pytest.mark.parametrize(("source", "target"), [("m", "K"), ("K", "kg m-2 s-1"), ("W m-2", "degC")])
def test_incompatible_units_name_file_variable_and_both_units(source: str, target: str) -> None:
    with pytest.raises(InputError) as err:
        _conv(source, target)
    msg = err.value.message
    assert "src.nc" in msg and "'v'" in msg and "dst.nc" in msg
    assert f"{cf_ureg.Unit(source):~}" in msg
    assert f"{cf_ureg.Unit(target):~}" in msg
    assert "do not convert" in msg
    assert err.value.detail == {"file": "src.nc", "variable": "v"}


@pytest.mark.parametrize("text", [None, "", "   "])
def test_missing_units(text: object) -> None:
    with pytest.raises(InputError, match=r"file a\.nc, variable 'tas': has no 'units' attribute"):
        parse_units(text, file="a.nc", variable="tas")


@pytest.mark.parametrize("text", ["bogus_unit", "degrees of fun", "2 K"])
def test_unknown_units(text: str) -> None:
    with pytest.raises(InputError) as err:
        parse_units(text, file="a.nc", variable="tas")
    assert "a.nc" in err.value.message and "'tas'" in err.value.message
    assert repr(text) in err.value.message and "not understood" in err.value.message


@pytest.mark.parametrize("text", ["(K", "kg m-2 s-1)", "m/", "K/0"])
def test_malformed_units_are_an_input_error(text: str) -> None:
    """pint's parser raises TokenError, AssertionError or ZeroDivisionError on malformed text
    (checked against the installed pint); the file's units are still just 'not understood'."""
    with pytest.raises(InputError) as err:
        parse_units(text, file="a.nc", variable="tas")
    assert "a.nc" in err.value.message and "'tas'" in err.value.message
    assert repr(text) in err.value.message
