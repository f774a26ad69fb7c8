"""Unit conventions at the package edge, checked against published conversion factors."""

import math

import pytest

from calib import units


def test_psi_in_pascal_is_exact():
    # NIST SP 811 (2008), appendix B.8: 1 psi = 6.894757293 E+03 Pa (from memory).
    assert units.PSI == pytest.approx(6894.757293168, rel=1e-12)


def test_pressure_head_uses_60F_water():
    # NIST SP 811 appendix B.8: 1 ftH2O (39.2 F) = 2.98898 E+03 Pa; pint's ft_H2O_60F gives
    # 1 psi = 2.308965 ft (check-values.md, from memory). Printed precision: 7 digits.
    head_ft = units.pressure_to_head(units.PSI) / units.FT
    assert head_ft == pytest.approx(2.308965, abs=5e-7)
    # and it differs from the conventional 1000 kg/m3 column (2.306659 ft) by about 0.1 %
    assert head_ft / 2.306659 - 1 == pytest.approx(0.001, abs=2e-4)


def test_gpm_is_us_gallon_per_minute():
    # US gallon = 231 in^3 exactly (NIST Handbook 44, appendix C, from memory).
    gallon_m3 = 231 * 0.0254**3
    assert units.GPM == pytest.approx(gallon_m3 / 60, rel=1e-12)


@pytest.mark.parametrize("header, name, unit", [
    ("elevation [ft]", "elevation", "ft"),
    ("  Demand [gpm] ", "demand", "gpm"),
    ("diameter [mm]", "diameter", "mm"),
    ("id", "id", None),
])
def test_parse_header(header, name, unit):
    assert units.parse_header(header) == (name, unit)


def test_to_si_accepts_strings_quantities_and_bare_numbers():
    assert units.to_si("72 psi", "pressure") == pytest.approx(72 * units.PSI)
    assert units.to_si(units.Q_(496, "kPa"), "pressure") == pytest.approx(496e3)
    assert units.to_si(2.5, "diameter", "in") == pytest.approx(0.0635)
    assert units.to_si("10", "length", "ft") == pytest.approx(3.048)


@pytest.mark.parametrize("value, kind", [("3 ft", "pressure"), ("abc", "flow"), ("12 psi", "length")])
def test_to_si_names_the_problem(value, kind):
    with pytest.raises(ValueError, match="not a|unit"):
        units.to_si(value, kind)


def test_unit_factor_rejects_wrong_dimension():
    with pytest.raises(ValueError, match="not a length unit"):
        units.unit_factor("psi", "length")
    assert units.unit_factor("L/s", "flow") == pytest.approx(1e-3)
    assert math.isclose(units.from_si(1e-3, "flow", "L/s"), 1.0)
