"""The report's figures and fire-flow section made before the leave-one-out refits (``fit``'s
``on_result``, ``report.prepare``) are the ones made after the fit: the page is the same.

Why it holds: the leave-one-out refits only add notes to ``FitResult.influence``, which no figure and
no fire-flow number uses. The check compares the pages made both ways on the demo town (its fit
makes two leave-one-out refits), so a change that lets those refits touch anything drawn fails here.
"""

import dataclasses
import re

import numpy as np
import pytest

from calib.calibration import fit, report


@pytest.fixture(scope="module")
def demo(demo_day):
    net, tests = demo_day
    stages, seen, early, counts = [], [], [], set()

    def on_result(result):
        seen.append((result, list(stages)))
        early.append(report.prepare(result, "us"))  # no worker: the data only, drawn at render

    def progress(n, stage):
        stages.append(stage)
        counts.add(n)  # a phase's start repeats the count so far

    result = fit(net, tests, progress=progress, on_result=on_result)
    return result, stages, seen, early, counts


def _refits(stages):
    """The stages of the leave-one-out refits (each names its reading after a colon)."""
    return [s for s in stages if "leave-one-out" in s.split(":")[0] and ":" in s]


def _page(html: str) -> str:
    return re.sub(r"Generated \d{4}-\d\d-\d\d \d\d:\d\d", "Generated <time>", html)


def test_on_result_comes_once_before_the_leave_one_out_refits_with_the_returned_result(demo):
    result, stages, seen, _, counts = demo
    assert len(seen) == 1 and seen[0][0] is result
    before = seen[0][1]
    assert before and not _refits(before)  # on one core (the demo town) the refits come after
    # the solves counted in the result include those after the call
    assert result.n_solves >= len(counts) and len(stages) > len(before)


def test_a_page_from_parts_made_before_the_refits_is_the_page_made_after(demo):
    result, stages, _, early, _ = demo
    assert _refits(stages)  # the case does refit after the call
    assert any(result.influence)  # and the refits added their notes after it
    late = report.prepare(result, "us")
    assert early[0].fire_flow == late.fire_flow
    assert _page(report.render(result, "us", parts=early[0])) == _page(
        report.render(result, "us", parts=late))


@pytest.mark.parametrize("workers", ["1", "2"])
def test_a_page_from_solves_run_beside_the_checks_is_the_page_made_after(demo, monkeypatch,
                                                                          workers):
    # the report's curves and fire-flow rows solved as the fit's jobs (``on_fitted``: in one run
    # of tasks with the interval checks and the leave-one-out refits, on one core and on two)
    # give the page made from the returned result, byte for byte but the time stamp
    from calib import parallel
    monkeypatch.setenv(parallel.WORKERS_ENV, workers)
    net, tests = demo[0].network, demo[0].tests
    solves, parts = [], []

    def on_fitted(fitted):
        solves.append(report.Solves(fitted, "us"))
        return solves[-1].jobs

    result = fit(net, tests, on_fitted=on_fitted,
                 on_result=lambda r: parts.append(report.prepare(r, "us", solves=solves[0])))
    assert len(solves) == 1 and len(solves[0].jobs) == 2  # the curves and the fire-flow rows
    assert parts[0].solves is solves[0]  # nothing solved in ``prepare``
    assert solves[0].curve_data is not None and solves[0].fire_rows  # done when fit returns
    assert result.influence == demo[0].influence and result.n_solves == demo[0].n_solves
    ours = _page(report.render(result, "us", parts=parts[0]))
    assert ours == _page(report.render(result, "us"))  # solved afresh after the fit
    assert ours == _page(report.render(demo[0], "us"))  # and the fit without jobs


def test_parts_for_other_units_are_made_again(demo):
    result, _, _, early, _ = demo
    page = report.render(result, "si", curves=False, parts=early[0])  # early[0]: US units, curves
    assert "kPa" in page and "Hydrant curves" not in page


def test_curve_start_is_exact_for_flows_linear_in_the_scale(series_case):
    # Closed form: two pipes in series, the draw at J2 (conftest): both pipes carry the draw, so
    # the flows are linear in the scale and the start (interpolated, or extrapolated along the
    # tangent) is exact at any scale
    from calib.hydraulics import NetworkSolver, Snapshot
    case = series_case(110.0, [20.0])
    solver = NetworkSolver(case.net)
    draw = 0.02  # m3/s at J2
    column = np.zeros((solver.nj, 1))
    column[case.net.node_index["J2"], 0] = -draw
    solved = {s: solver.solve(Snapshot(extra_demand={"J2": draw * s})) for s in (0.0, 1.0)}
    rates = {s: report._slope(solver, r, column, 1)[1] for s, r in solved.items()}
    for s in (0.25, 0.6, 1.6):
        start = report._hermite_start(solved, rates, s)
        assert start.flow == pytest.approx([draw * s, draw * s], abs=1e-12)
    one = {1.0: solved[1.0]}
    assert report._hermite_start(one, rates, 0.5).flow == pytest.approx([draw / 2] * 2, abs=1e-12)


def _curves_twice(result, monkeypatch, change):
    """The demo's curve data as report makes it, then again after ``change(monkeypatch)``: both,
    with the Newton iterations each took; asserts the same points, pressures within 1e-4 psi."""
    from calib.hydraulics import NetworkSolver
    iterations, real = [], NetworkSolver.solve

    def counted(self, *args, **kw):
        res = real(self, *args, **kw)
        iterations.append(res.iterations)
        return res

    monkeypatch.setattr(NetworkSolver, "solve", counted)
    monkeypatch.setenv("CALIB_WORKERS", "1")  # counted here: a worker's solves would not be
    ours = report._curves_data(result, "us")
    n_ours = sum(iterations)
    iterations.clear()
    change(monkeypatch)
    other = report._curves_data(result, "us")
    for a, b in zip(ours["panels"], other["panels"]):
        assert (a is None) == (b is None)
        if a is not None:
            assert list(a["flow"]) == list(b["flow"])  # the same points chosen
            assert a["pressure"] == pytest.approx(b["pressure"], abs=1e-4)  # [psi]
    return ours, n_ours, other, sum(iterations)


def test_curves_from_interpolated_starts_match_with_fewer_newton_iterations(demo, monkeypatch):
    # the same points and pressures (to the solver's tolerance) as warm starts from the nearest
    # solved point alone, in fewer Newton iterations (counts, not times)
    def nearest(mp):
        mp.setattr(report, "_hermite_start", lambda solved, rates, s: (
            solved[min(solved, key=lambda v: abs(v - s))]))

    _, n_ours, _, n_nearest = _curves_twice(demo[0], monkeypatch, nearest)
    assert n_ours < 0.9 * n_nearest, (n_ours, n_nearest)


def test_curve_points_at_the_drawing_tolerance_draw_the_same_figure(demo, monkeypatch):
    # report.CURVE_SOLVER: the curve points solved to heads within 1e-3 m (not the default 1e-6 m)
    # are the same points, their pressures within 1e-4 psi of tightly solved ones (a pixel of a
    # panel is about 0.4 psi), the PNG byte for byte the same, in fewer Newton iterations
    from calib.calibration import figures
    ours, n_ours, tight, n_tight = _curves_twice(
        demo[0], monkeypatch, lambda mp: mp.setattr(report, "CURVE_SOLVER", {}))  # solver default
    assert figures.draw("hydrant curves", ours) == figures.draw("hydrant curves", tight)
    assert n_ours < 0.9 * n_tight, (n_ours, n_tight)


def test_hermite_start_balances_the_draw_and_lies_closer_than_the_straight_line():
    # closed-form property: Hermite interpolation reproduces functions linear in the scale, and the
    # junctions' mass balance is linear in the flows, so the start balances every junction's demand
    # at its scale exactly (a draw at one junction of a generated looped grid); reference for the
    # accuracy: a tight solve at that scale (the Hermite flows' error is fourth order in the gap:
    # measured 20 times below the straight line's between 0.6 and 1, 2 times between 0.2 and 1;
    # near zero flow, where the regularized law bends, it is no better)
    import numpy as np

    from calib.calibration.synthetic import grid_network
    from calib.hydraulics import NetworkSolver, Snapshot
    from calib.hydraulics.snapshot import resolve
    from calib.units import GPM

    net = grid_network(8, 7, n_groups=2, seed=2, demand=0.1e-3)
    at = str(net.node_ids[30])
    solver = NetworkSolver(net, head_tol=1e-10, flow_tol=1e-12)
    column = np.zeros((net.n_junctions, 1))
    column[net.node_index[at], 0] = -1200 * GPM

    def loading(s):
        return Snapshot(extra_demand={at: 1200 * GPM * s})

    solved, rates = {}, {}
    for s in (0.6, 1.0):
        solved[s] = solver.solve(loading(s))
        rates[s] = report._slope(solver, solved[s], column, 31)[1]
    for s in (0.8, 1.6):
        start = report._hermite_start(solved, rates, s)
        demand = resolve(loading(s), net).demand
        imbalance = solver.pattern.inflow(start.link_flow)[: net.n_junctions] - demand
        assert np.max(np.abs(imbalance)) <= 1e-9 * np.sum(np.abs(demand))
    s = 0.8
    exact = solver.solve(loading(s)).link_flow
    hermite = report._hermite_start(solved, rates, s).link_flow
    w = (s - 0.6) / 0.4
    line = solved[0.6].link_flow + w * (solved[1.0].link_flow - solved[0.6].link_flow)
    assert np.max(np.abs(hermite - exact)) < 0.1 * np.max(np.abs(line - exact))


def test_curves_from_hermite_starts_match_with_fewer_newton_iterations(demo, monkeypatch):
    # the same points and pressures (to the solver's tolerance) as from straight-line starts
    # (the Hermite start without the rates' terms, which is that line between two points and the
    # nearest point outside them), in fewer Newton iterations (counts, not times)
    hermite = report._hermite_start

    def straight(mp):
        def line(solved, rates, s):
            below, above = [v for v in solved if v < s], [v for v in solved if v > s]
            if below and above:
                a, b = max(below), min(above)
                t = (s - a) / (b - a)  # Hermite with zero rates is not the line: interpolate here
                near = min(solved, key=lambda v: abs(v - s))
                mix = solved[a].link_flow + t * (solved[b].link_flow - solved[a].link_flow)
                n_p, n_u = len(solved[near].flow), len(solved[near].pump_flow)
                return dataclasses.replace(solved[near], flow=mix[:n_p],
                                           pump_flow=mix[n_p:n_p + n_u], valve_flow=mix[n_p + n_u:])
            return hermite(solved, {v: 0.0 * r for v, r in rates.items()}, s)
        mp.setattr(report, "_hermite_start", line)

    _, n_ours, _, n_straight = _curves_twice(demo[0], monkeypatch, straight)
    assert n_ours < n_straight, (n_ours, n_straight)
