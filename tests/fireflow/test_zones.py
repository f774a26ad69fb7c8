"""The system minimum is taken over the hydrant's hydraulic zone (the solver's SolveResult.zone: split at
the demo town's reducing valves), checked against direct solves; the junctions.csv zone column on request."""

import numpy as np
import pytest
from scipy.optimize import brentq

from calib.errors import InputError
from calib.fireflow import FireFlowScan, ScanOptions
from calib.hydraulics import Snapshot
from calib.units import PSI

LOW, HIGH = "J144", "J113"  # demo town: Mereside (behind PRV-1/PRV-2) and the main zone


@pytest.fixture(scope="module")
def scan(town):
    return FireFlowScan(town, options=ScanOptions(system_search="always"))


def _pressures(scan, node, draw):
    snap = Snapshot(extra_demand={node: draw})
    return scan.solver.solve(snap).pressure[: scan.network.n_junctions]


@pytest.mark.parametrize("node", [LOW, HIGH])
def test_limited_by_a_junction_of_its_own_hydraulic_zone(scan, node):
    net = scan.network
    zone = np.asarray(scan.solver.solve().zone, dtype=str)  # a direct static solve, not the scan's
    assert set(zone) == {"PRV-2", "PLANT+HILLTANK"}  # the low zone fed by the active PRV-2
    i = net.node_index[node]
    members = np.flatnonzero(zone == zone[i])
    members = members[members != i]
    got = scan.hydrant(node)
    assert got.zone == zone[i] and (got.zone == "PRV-2") == (node == LOW)
    # reference: scipy.optimize.brentq on the lowest pressure of the hydrant's hydraulic zone
    ref = brentq(lambda q: _pressures(scan, node, q)[members].min() - 20 * PSI, 0.0, 3.0,
                 xtol=1e-10)
    assert got.flow_system == pytest.approx(ref, rel=1e-3)
    p = _pressures(scan, node, ref)
    assert got.limiting_node == str(net.node_ids[members[np.argmin(p[members])]])
    assert zone[net.node_index[got.limiting_node]] == zone[i]
    # the other zone is not what limits: at that draw it stays above the minimum
    other = np.flatnonzero((zone != zone[i]) & (zone != ""))
    assert p[other].min() > 20 * PSI


def test_the_low_zone_is_not_checked_against_the_main_zone(scan):
    # with the junctions.csv column the main zone is split into four areas (north, old town, south,
    # hill); the hydraulic zones keep it one zone, so a main-zone hydrant sees more junctions
    net = scan.network
    column = FireFlowScan(net, options=ScanOptions(zones="column", system_search="always"))
    i = net.node_index[HIGH]
    assert column.hydrant(HIGH).zone == "south" and scan.hydrant(HIGH).zone == "PLANT+HILLTANK"
    assert set(column.zone_of(i)) < set(scan.zone_of(i))
    low = net.node_index[LOW]
    assert column.hydrant(LOW).zone == "mereside"
    # Mereside drawn in the column sense is the same set of junctions as the PRV-2 zone here
    assert set(column.zone_of(low)) == set(scan.zone_of(low))
    assert "column" in column.zone_source and "hydraulic" in scan.zone_source
    with pytest.raises(InputError):
        ScanOptions(zones="areas").check()
