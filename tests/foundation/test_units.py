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


def test_the_written_out_factors_are_pints_to_the_last_bit():
    # units._FACTORS and the constants spare a run pint's import; each must be what pint itself
    # gives (so that outputs stay byte for byte those made through pint)
    _, ureg, _ = units._registry()
    for dimension, table in units._FACTORS.items():
        kinds = [k for k, d in units._DIMENSION_OF.items() if d == dimension]
        for unit, factor in table.items():
            for kind in kinds:
                assert factor == float(ureg.Quantity(1.0, unit).to(units.SI_UNIT[kind]).magnitude), unit
    assert units.PSI == float((1 * ureg.psi).to("Pa").magnitude)
    assert units.GPM == float((1 * ureg.gpm).to("m**3/s").magnitude)
    assert units.GAMMA_WATER == float((1 * ureg.ft_H2O_60F).to("Pa").magnitude / 0.3048)


def test_units_outside_the_written_out_ones_still_go_to_pint():
    # a yard (0.9144 m exactly, NIST SP 811 appendix B, from memory) is not written out
    assert units.to_si("2 yd", "length") == pytest.approx(1.8288, rel=1e-12)
    # a written-out unit of another dimension is refused as before, with pint's dimension check
    with pytest.raises(ValueError, match="unit 'psi' is not a length unit"):
        units.unit_factor("psi", "length")
    with pytest.raises(ValueError, match="unknown unit 'furlongz'"):
        units.to_si("1 furlongz", "length")
    assert units.to_si(units.Q_(3.0, "ft"), "length") == pytest.approx(0.9144, rel=1e-12)
