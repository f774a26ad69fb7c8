"""Outlet / FlowTest / evaluate: a whole test as the app and the CLI use it.

Numbers from ../shared/reference/check-values.md "Worked arithmetic" [C] (NFPA 291 formulas).
"""

import json
import math

import pytest

from calib.errors import FlowTestError
from calib.flowtest import CAUTIONS, FlowTest, Outlet, evaluate, pitot_discharge
from calib.units import FT, GPM, INCH, PSI, Q_

PRINTED = 0.005


def test_22_psi_example_end_to_end():
    r = evaluate(FlowTest("72 psi", "58 psi", [Outlet("2.5 in", pitot="22 psi", shape="smooth")]))
    assert r.flow / GPM == pytest.approx(787.02, abs=PRINTED)
    assert r.rated_flow / GPM == pytest.approx(1598.53, abs=PRINTED)
    assert r.hydrant_class.label == "AA"
    assert r.drop_fraction == pytest.approx(0.194, abs=5e-4)
    assert r.curve.flows[2] == r.rated_flow
    assert "drop-below-25pct" in [f.code for f in r.findings]  # 19.4 % < 25 % (NFPA 291 4.3.6)


def test_several_outlets_and_hydrants_sum_their_flows():
    # check-values.md: 711.89 + 750.40 = 1462.29 gpm; a third outlet on a second hydrant with a
    # meter reading of 500 gpm is taken as it is.
    outlets = [Outlet("2.5 in", pitot="18 psi", hydrant="H-1"), Outlet("2.5 in", pitot="20 psi", hydrant="H-1")]
    r = evaluate(FlowTest("72 psi", "50 psi", outlets))
    assert r.flow / GPM == pytest.approx(1462.29, abs=PRINTED)
    r2 = evaluate(FlowTest("72 psi", "50 psi", outlets + [Outlet(flow="500 gpm", hydrant="H-2")]))
    assert r2.flow / GPM == pytest.approx(1962.29, abs=PRINTED)
    assert r2.outlet_flows[2] == pytest.approx(500 * GPM, rel=1e-12)


def test_coefficient_entered_overrides_shape_and_shape_gives_coefficient():
    assert Outlet("2.5 in", pitot="20 psi", shape="projecting").coefficient == 0.70
    o = Outlet("2.5 in", pitot="20 psi", shape="projecting", coefficient=0.85)
    assert o.discharge == pytest.approx(pitot_discharge("20 psi", "2.5 in", 0.85), rel=1e-12)


def test_pumper_outlet_factor():
    # check-values.md: c 0.90, 4 in, 10 psi, pumper factor 0.83 -> 1127.44 gpm (table from memory).
    o = Outlet(Q_(4, "in"), pitot=Q_(10, "psi"), pumper=True)
    assert o.factor == pytest.approx(0.83)
    assert o.discharge / GPM == pytest.approx(1127.44, abs=PRINTED)
    assert Outlet(flow="100 gpm", pumper=True).factor == 1.0  # a measured flow is taken as it is


def test_residual_above_static_gives_findings_not_an_exception():
    r = evaluate(FlowTest("55 psi", "58 psi", [Outlet("2.5 in", pitot="20 psi")]))
    assert math.isnan(r.rated_flow) and r.hydrant_class is None and r.curve is None
    assert r.worst == "error"
    json.dumps(r.to_dict())  # still serialisable for the app


def test_grades_when_elevation_is_given():
    r = evaluate(FlowTest("60 psi", "45 psi", [Outlet("2.5 in", pitot="20 psi")], elevation="100 ft",
                          gauge_height="2 ft"))
    # H = p / gamma + z + h_g with 1 psi = 2.308965 ft (60 degF water, NIST SP 811 via pint)
    assert r.static_grade / FT == pytest.approx(60 * 2.308965 + 102, abs=5e-4)
    assert r.residual_grade / FT == pytest.approx(45 * 2.308965 + 102, abs=5e-4)


def test_to_dict_in_us_and_si_units():
    t = FlowTest("72 psi", "58 psi", [Outlet("2.5 in", pitot="22 psi")])
    us = evaluate(t).to_dict("us")
    si = evaluate(t, "si").to_dict("si")
    assert us["units"]["flow"] == "gpm" and si["units"]["flow"] == "L/s"
    assert us["rated_flow"] == pytest.approx(1598.53, abs=PRINTED)
    assert si["rated_flow"] == pytest.approx(1598.53 * 3.785411784 / 60, abs=PRINTED * 0.0631)
    assert si["static"] == pytest.approx(72 * 6.894757293, rel=1e-9)  # kPa, NIST SP 811
    assert si["outlets"][0]["diameter"] == pytest.approx(63.5)
    assert us["hydrant_class"]["label"] == "AA" and "local codes" in us["hydrant_class"]["note"]


@pytest.mark.parametrize("make, field", [
    (lambda: Outlet("2.5 in"), "pitot"),
    (lambda: Outlet(pitot="20 psi"), "outlet diameter"),
    (lambda: Outlet("2.5 in", pitot="20 ft"), "pitot"),
    (lambda: Outlet(flow="-3 gpm"), "flow"),
    (lambda: FlowTest("72 psi", "58 psi", []), "outlets"),
    (lambda: FlowTest("72 ft", "58 psi", [Outlet(flow="500 gpm")]), "static"),
    (lambda: Outlet("2.5 in", pitot="20 psi", shape="oval"), "outlet shape"),
    (lambda: Outlet("2.5 in", pitot="20 psi", coefficient="x"), "coefficient"),
])
def test_unreadable_input_raises(make, field):
    with pytest.raises(FlowTestError, match=f"field '{field}'"):
        make()


def test_cautions_cover_the_usual_hazards():
    text = " ".join(CAUTIONS).lower()
    for word in ("slowly", "water hammer", "traffic", "discoloured", "20 psi", "licensed engineer",
                 "authority having jurisdiction"):
        assert word in text


def test_class_is_by_the_flow_at_20_psi_whatever_the_target():
    # NFPA 291 marking: classes by rated flow at 20 psi. The 22 psi example rated at 40 psi gives
    # 1229.87 gpm (class A by itself) but its 20 psi flow 1598.53 gpm is class AA (check-values.md).
    r = evaluate(FlowTest("72 psi", "58 psi", [Outlet("2.5 in", pitot="22 psi")], target="40 psi"))
    assert r.rated_flow / GPM == pytest.approx(1229.87, abs=PRINTED)
    assert r.rated_flow_20psi / GPM == pytest.approx(1598.53, abs=PRINTED)
    assert r.hydrant_class.label == "AA"
    low = evaluate(FlowTest("18 psi", "12 psi", [Outlet("2.5 in", pitot="10 psi")], target="5 psi"))
    assert low.rated_flow_20psi == 0.0 and low.hydrant_class.label == "C"
