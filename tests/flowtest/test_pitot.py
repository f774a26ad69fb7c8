"""Pitot discharge and outlet coefficients against NFPA 291 / AWWA M17 and worked arithmetic.

Worked values are the arithmetic of ../shared/reference/check-values.md ("Worked arithmetic", computed
from Q = 29.83 c d^2 sqrt(p), NFPA 291; AWWA M17), printed to 0.01 gpm: tolerance 0.005 gpm.
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from calib.errors import FlowTestError
from calib.flowtest import (OUTLET_COEFFICIENTS, PITOT_CONSTANT_SI, outlet_coefficient, pitot_discharge,
                            pitot_discharge_gpm, pumper_factor, total_flow)
from calib.units import GPM, INCH, PSI, Q_

PRINTED = 0.005  # gpm: worked values are printed to 0.01 gpm


@pytest.mark.parametrize("c, d_in, p_psi, expected_gpm", [
    (0.90, 2.5, 40.0, 1061.22),  # check-values.md worked arithmetic [C] from NFPA 291 formula
    (0.80, 2.5, 28.0, 789.23),   # idem
    (0.90, 2.5, 22.0, 787.02),   # idem (the 22 psi example)
    (0.90, 2.5, 18.0, 711.89),   # idem (two-outlet example, first outlet)
    (0.90, 2.5, 20.0, 750.40),   # idem (second outlet)
])
def test_pitot_formula_worked_arithmetic(c, d_in, p_psi, expected_gpm):
    assert pitot_discharge_gpm(p_psi, d_in, c) == pytest.approx(expected_gpm, abs=PRINTED)


def test_pitot_formula_against_the_us_equation_written_out():
    # NFPA 291 / AWWA M17: Q = 29.83 c d^2 sqrt(p) [gpm, in, psi], written here independently.
    for c, d, p in [(0.7, 1.5, 5.0), (0.8, 4.5, 12.0), (0.9, 6.0, 64.0)]:
        assert pitot_discharge(p * PSI, d * INCH, c) / GPM == pytest.approx(29.83 * c * d**2 * math.sqrt(p), rel=1e-12)


def test_si_constant_derived_from_29_83():
    # NFPA 291 SI form Q = 0.0666 c d^2 sqrt(p) [L/min, mm, kPa] (check-values.md, from memory).
    # Converting 29.83 exactly gives 0.066656; the printed 0.0666 is 0.08 % lower (truncated), so the
    # two forms agree to 0.1 %, not to the last printed digit.
    k_lmin_mm_kpa = PITOT_CONSTANT_SI * 60_000.0 / 1e6 * math.sqrt(1000.0)
    assert k_lmin_mm_kpa == pytest.approx(0.066656, abs=5e-7)
    assert k_lmin_mm_kpa == pytest.approx(0.0666, rel=1e-3)


def test_us_and_si_forms_give_the_same_flow():
    # 2.5 in = 63.5 mm; 40 psi = 275.79 kPa (NIST SP 811: 1 psi = 6.894757 kPa).
    q_si_lmin = 0.0666 * 0.9 * 63.5**2 * math.sqrt(40 * 6.894757)  # NFPA 291 SI form, written out
    ours_lmin = pitot_discharge("275.79029 kPa", "63.5 mm", 0.9) * 60_000.0
    assert ours_lmin == pytest.approx(q_si_lmin, rel=1e-3)  # printed SI constant 0.0666, see above
    assert pitot_discharge("40 psi", "2.5 in", 0.9) == pytest.approx(pitot_discharge("275.79029 kPa", "63.5 mm", 0.9), rel=1e-7)


def test_quantities_strings_and_arrays_at_the_edge():
    q1 = pitot_discharge("18 psi", "2.5 in", 0.9)
    q2 = pitot_discharge(Q_(18, "psi"), Q_(2.5, "in"), 0.9)
    q3 = pitot_discharge(np.array([18.0, 20.0]) * PSI, 2.5 * INCH, 0.9)
    assert isinstance(q1, float) and q1 == pytest.approx(q2, rel=1e-12)
    assert q3.shape == (2,) and q3[0] == pytest.approx(q1, rel=1e-12)


def test_outlet_coefficients_nfpa_291_figure():
    # NFPA 291 outlet figure (check-values.md [S]): smooth 0.90, square and sharp 0.80, projecting 0.70.
    assert outlet_coefficient("smooth") == 0.90
    assert outlet_coefficient("Square") == 0.80
    assert outlet_coefficient(" projecting ") == 0.70
    assert set(OUTLET_COEFFICIENTS) == {"smooth", "square", "projecting"}
    with pytest.raises(FlowTestError, match="outlet shape.*unknown outlet shape 'oval'.*smooth"):
        outlet_coefficient("oval")


def test_pumper_factor_table_and_worked_value():
    # NFPA 291 pumper-outlet table (check-values.md: from memory, medium confidence).
    table = {2: 0.97, 3: 0.92, 4: 0.89, 5: 0.86, 6: 0.84, 7: 0.83, 10: 0.83, 40: 0.83}
    for p, f in table.items():
        assert pumper_factor(p * PSI) == pytest.approx(f, abs=1e-12)
    assert pumper_factor("4.5 psi") == pytest.approx(0.875, abs=1e-12)  # linear between rows (our choice)
    # worked arithmetic [C]: c 0.90, 4 in, 10 psi, factor 0.83 -> 1127.44 gpm
    q = pitot_discharge_gpm(10, 4, 0.9) * pumper_factor("10 psi")
    assert q == pytest.approx(1127.44, abs=PRINTED)


def test_two_outlets_sum_flows_never_average_pitots():
    # check-values.md: 711.89 + 750.40 = 1462.29 gpm (NFPA 291 sums outlet discharges).
    flows = [pitot_discharge(f"{p} psi", "2.5 in", 0.9) for p in (18, 20)]
    assert total_flow(flows) / GPM == pytest.approx(1462.29, abs=PRINTED)
    averaged = 2 * pitot_discharge("19 psi", "2.5 in", 0.9)  # the mistake: sqrt of a mean != mean of sqrt
    assert abs(averaged - total_flow(flows)) / GPM > 0.1


@pytest.mark.parametrize("args, field", [
    (("-1 psi", "2.5 in", 0.9), "pitot"),
    (("3 ft", "2.5 in", 0.9), "pitot"),
    (("abc", "2.5 in", 0.9), "pitot"),
    (("18 psi", "0 in", 0.9), "outlet diameter"),
    (("18 psi", "18 psi", 0.9), "outlet diameter"),
    (("18 psi", "2.5 in", 1.2), "coefficient"),
    (("18 psi", "2.5 in", 0.0), "coefficient"),
    (("18 psi", "2.5 in", "abc"), "coefficient"),
])
def test_bad_inputs_raise_flowtesterror_naming_the_argument(args, field):
    with pytest.raises(FlowTestError, match=f"field '{field}'.*expected"):
        pitot_discharge(*args)


@settings(deadline=None)  # no timed assertions in this suite
@given(p=st.floats(0.1, 200.0), dp=st.floats(0.01, 50.0), d=st.floats(1.0, 6.0), c=st.floats(0.6, 1.0))
def test_more_pitot_pressure_gives_more_flow(p, dp, d, c):
    # Property of Q = 29.83 c d^2 sqrt(p) (NFPA 291): strictly increasing in p.
    assert pitot_discharge_gpm(p + dp, d, c) > pitot_discharge_gpm(p, d, c)


@settings(deadline=None)  # no timed assertions in this suite
@given(p=st.floats(1.0, 100.0), d=st.floats(1.0, 6.0), k=st.floats(1.1, 4.0))
def test_flow_scales_with_square_root_of_pitot_and_square_of_diameter(p, d, k):
    # Closed form of the NFPA 291 formula: Q(k p) = sqrt(k) Q(p); Q(k d) = k^2 Q(d).
    q = pitot_discharge_gpm(p, d)
    assert pitot_discharge_gpm(k * p, d) == pytest.approx(math.sqrt(k) * q, rel=1e-12)
    assert pitot_discharge_gpm(p, k * d) == pytest.approx(k**2 * q, rel=1e-12)


def _orifice_constant_us(rho):
    """Q = c (pi/4) d^2 sqrt(2 p / rho) (free jet, Bernoulli) expressed in gpm, in, psi."""
    return math.pi / 4 * math.sqrt(2 / rho) * INCH**2 * math.sqrt(PSI) / GPM


def test_29_83_is_the_orifice_equation_for_water():
    # Closed form: the pitot formula is Bernoulli's free jet, Q = c A sqrt(2 p / rho). With the
    # 62.4 lb/ft3 water of NFPA 291 (999.552 kg/m3; 1 lb = 0.45359237 kg, 1 ft = 0.3048 m) it gives
    # 29.83; with water at 60 degF from IAPWS-95 (iapws.IAPWS95) it gives the also-printed 29.84
    # (check-values.md). Tolerance: the printed 0.01.
    from iapws import IAPWS95

    assert _orifice_constant_us(62.4 * 0.45359237 / 0.3048**3) == pytest.approx(29.83, abs=0.005)
    rho_60f = IAPWS95(T=(60 - 32) / 1.8 + 273.15, P=0.101325).rho
    assert _orifice_constant_us(rho_60f) == pytest.approx(29.84, abs=0.005)
    assert PITOT_CONSTANT_SI == pytest.approx(math.pi / 4 * math.sqrt(2 / 999.5521), rel=1e-4)
