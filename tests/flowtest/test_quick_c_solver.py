"""Quick C and the network solver mean the same C: a two-gauge reading taken from a solved network
recovers the C the network was built with (same Hazen-Williams form, calib.hydraulics.headloss).

Cross-check (common practice): the solver's grades at the two ends of a main carrying a known flow,
turned into gauge pressures and back into grades through calib.flowtest, give that main's C.
"""

import numpy as np
import pytest

from calib.flowtest import hydraulic_grade, quick_c
from calib.hydraulics import NetworkSolver, Snapshot, hazen_williams_headloss
from calib.network import Network
from calib.units import GAMMA_WATER, GPM, INCH


def test_solver_headloss_round_trip():
    for c in (60.0, 100.0, 140.0):
        h = float(hazen_williams_headloss(1000 * GPM, 600.0, 8 * INCH, c))
        est = quick_c(1000 * GPM, 600.0, 8 * INCH, 100.0 + h, 100.0, upstream_error=0.0, downstream_error=0.0)
        assert est.c == pytest.approx(c, rel=1e-12)


@pytest.mark.parametrize("c_main", [75.0, 120.0])
def test_two_gauges_on_a_solved_network_recover_the_c(c_main):
    # Fictional line: reservoir R (grade 80 m) - P1 (300 m, 12 in, C 130) - J1 - P2 (450 m, 8 in,
    # C = c_main) - J2, where a hydrant flows 900 gpm; gauges at J1 and J2.
    net = Network(
        node_ids=["J1", "J2", "R"], n_junctions=2, elevation=[20.0, 18.0, 80.0], demand=[0.0, 0.0],
        source_head=[80.0], pipe_ids=["P1", "P2"], pipe_from=[2, 0], pipe_to=[0, 1],
        length=[300.0, 450.0], diameter=[12 * INCH, 8 * INCH], roughness=[130.0, c_main])
    res = NetworkSolver(net).solve(Snapshot(extra_demand={"J2": 900 * GPM}))
    assert res.flow[1] == pytest.approx(900 * GPM, rel=1e-6)
    gauge_height = 0.6  # gauge on the hydrant outlet, 0.6 m above the node elevation (fictional)
    readings = res.pressure[:2] - gauge_height * GAMMA_WATER  # what the gauges would read [Pa]
    grades = hydraulic_grade(readings, np.array([20.0, 18.0]), gauge_height)
    np.testing.assert_allclose(grades, res.head[:2], atol=1e-9)
    est = quick_c(900 * GPM, 450.0, 8 * INCH, grades[0], grades[1])
    assert est.c == pytest.approx(c_main, rel=1e-5)  # solver tolerance
    assert est.low < c_main < est.high
