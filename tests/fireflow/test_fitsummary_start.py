"""The fit report's fire-flow rows: the scan's static solve starts from a fit's static solution
(``fitsummary.static_start``) and each flowed hydrant's held solve from the flow change its flow
test made (``fitsummary.held_start``); both give what cold starts give."""

from pathlib import Path

import numpy as np
import pytest

from calib.hydraulics import NetworkSolver, Snapshot
from calib.units import GAMMA_WATER, GPM

TESTS = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere" / "tests"


@pytest.fixture(scope="module")
def demo_fit(town):
    from calib.calibration import fit, read_tests
    return fit(town, read_tests(TESTS, town), influence=False)


def _scan(result):
    from calib.fireflow.fitsummary import covariance_of
    from calib.fireflow.scan import FireFlowScan
    return FireFlowScan(result.network, roughness=result.roughness(),
                        covariance=covariance_of(result))


def test_held_solves_from_the_tests_flow_change_match_tight_cold_solves(demo_fit):
    # reference: the same held snapshot solved cold by a fresh solver to heads within 1e-9 m
    # (the draw at the held junction is the flow at the residual); the warm start changes where
    # Newton begins, not where it ends. Flows to 1e-9 of the reference flow: with SuperLU (no
    # CHOLMOD) round-off keeps the links at the demo town's reducing valves moving by ~1e-10 m3/s,
    # so a tighter flow_tol never stops there
    from calib.fireflow.fitsummary import flowed_hydrants, held_start
    scan = _scan(demo_fit)
    net = demo_fit.network
    iterations = {"warm": 0, "cold": 0}
    seen = 0
    for node in flowed_hydrants(demo_fit):
        start = held_start(demo_fit, scan, node)
        assert start is not None
        i = net.node_index[node]
        grade = net.elevation[i] + scan.options.residual / GAMMA_WATER
        snap = Snapshot(held_head={node: grade})
        tight = NetworkSolver(net, head_tol=1e-9, flow_tol=1e-9).solve(
            snap, roughness=demo_fit.roughness())
        for kind, warm in (("warm", start), ("cold", None)):
            scan.solver.forget()
            res = scan.solver.solve(snap, roughness=scan.roughness, warm_start=warm)
            iterations[kind] += res.iterations
            q, ref = res.held_flow[node], tight.held_flow[node]
            assert q == pytest.approx(ref, abs=0.01 * GPM), (node, kind)
        seen += 1
    assert seen >= 10
    assert iterations["warm"] < 0.8 * iterations["cold"], iterations  # counts, not times


def test_the_static_solve_from_a_fits_static_solution_matches_a_tight_cold_solve(demo_fit):
    # reference: the scan's loading solved cold by a fresh solver to heads within 1e-9 m (flows
    # to 1e-9 of the reference flow, which SuperLU reaches too: see the test above)
    from calib.fireflow.fitsummary import static_start
    from calib.fireflow.scan import FireFlowScan
    start = static_start(demo_fit)
    assert start is not None and start.snapshot.label.endswith("static")
    warm = FireFlowScan(demo_fit.network, roughness=demo_fit.roughness(), static_start=start)
    cold = FireFlowScan(demo_fit.network, roughness=demo_fit.roughness())
    tight = NetworkSolver(demo_fit.network, head_tol=1e-9, flow_tol=1e-9).solve(
        warm.base, roughness=demo_fit.roughness())
    nj = demo_fit.network.n_junctions
    np.testing.assert_allclose(warm.static.head[:nj], tight.head[:nj], atol=1e-4)  # its head_tol
    assert warm.static.iterations < cold.static.iterations


def test_the_fire_flow_section_is_the_one_cold_starts_give(demo_fit, monkeypatch):
    # every printed figure (static, available flow, interval, what limits it, class) the same
    # with and without the starts from the fit's solutions
    from calib.fireflow import fitsummary
    ours = fitsummary.html_section(demo_fit, "us")
    monkeypatch.setattr(fitsummary, "static_start", lambda result: None)
    monkeypatch.setattr(fitsummary, "held_start", lambda result, scan, node: None)
    cold = fitsummary.html_section(demo_fit, "us")
    assert ours.count("<tr>") >= 10
    assert ours == cold


def test_no_start_for_a_hydrant_no_test_flowed(demo_fit):
    from calib.fireflow.fitsummary import flowed_hydrants, held_start
    scan = _scan(demo_fit)
    flowed = set(flowed_hydrants(demo_fit))
    ids = [str(n) for n in demo_fit.network.node_ids[:demo_fit.network.n_junctions]]
    other = next(n for n in ids if n not in flowed)
    assert held_start(demo_fit, scan, other) is None
    start = held_start(demo_fit, scan, sorted(flowed)[0])
    # the start keeps the scan's static statuses and moves only the flows
    assert np.array_equal(start._active, scan.static._active)
    assert not np.array_equal(start.flow, scan.static.flow)


@pytest.mark.parametrize("workers", ["1", "2"])
def test_a_row_that_fails_says_so_as_the_first_failure_in_order(demo_fit, monkeypatch, workers):
    # the fire-flow rows run as a job (``fire_flow_job``, beside other work in ``calib fit``):
    # where hydrants fail, the section names the first failing hydrant in the table's order, as a
    # loop over the hydrants that stops at its first error would; the same section from the job's
    # rows and from ``html_section`` alone, on one process and on two
    from calib import parallel
    from calib.errors import CalibrationError
    from calib.fireflow import fitsummary
    from calib.fireflow.scan import FireFlowScan

    monkeypatch.setenv(parallel.WORKERS_ENV, workers)
    nodes = fitsummary.flowed_hydrants(demo_fit)[:12]
    bad = {nodes[2], nodes[5]}
    real = FireFlowScan.hydrant

    def hydrant(self, node, start=None):
        if node in bad:
            raise CalibrationError(f"the solver did not converge at {node}")
        return real(self, node, start)

    monkeypatch.setattr(FireFlowScan, "hydrant", hydrant)
    alone = fitsummary.html_section(demo_fit, "us")
    assert f"Not computed: the solver did not converge at {nodes[2]}</p>" in alone
    rows = []
    job = fitsummary.fire_flow_job(demo_fit, finished=rows.extend)
    parallel.run_jobs([job, parallel.Job(lambda k: k, range(3))])
    assert fitsummary.html_section(demo_fit, "us", rows=rows) == alone
    monkeypatch.setattr(FireFlowScan, "hydrant", real)
    assert "<table>" in fitsummary.html_section(demo_fit, "us")  # without the failures: the table
