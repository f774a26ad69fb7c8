"""``report.html``: one self-contained page describing a calibration fit, with its plots embedded as PNG.

Sections, in the order a modeler reads them: the cautions; the result at a glance; the groups (table,
and C with its interval against the prior, the model's C before and the C bounds); the flagged
(suspect) readings; the influential readings, apart; the findings in words; the fit statistics and the calibration accuracy criteria; how well
the readings fit (observed vs simulated, residuals by test); hydrant curves; parameter correlation;
the tests; the method and its sources. This module builds each figure's data (the hydrant curves from
few warm-started solves); ``figures.py`` draws them, each once, here or in a worker process that
``calib fit`` starts before the fit. ``Solves`` holds the report's solves (the hydrant curves and
the fire-flow rows) as jobs that ``calib fit`` hands to the fit (``on_fitted``), to run with its
interval checks and leave-one-out refits; ``prepare`` makes the figures' data (and, without
``Solves``, those solves too); ``calib fit`` calls it from the fit's ``on_result``, as soon as the
intervals are known, so the worker draws beside the rest. The page is written atomically through
``calib.fileio``.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import html
from pathlib import Path

import numpy as np

from calib import fileio, units

CAUTIONS = [
    "A calibrated model supports, never replaces, field verification and review by a licensed "
    "engineer. Do not use these C-factors for fire-protection design without that review; follow "
    "local codes and the authority having jurisdiction.",
    "C-factors fitted here describe the tests' conditions (valve positions, tank levels, demands at "
    "the hour of the test). A closed or throttled valve unknown to the model shows up as a low C.",
    "Flowing hydrants: open and close them slowly, one at a time (water hammer can break mains); "
    "control traffic; see where the water goes (flooding, erosion, drains; dechlorinate where "
    "required); warn customers of discoloured water; avoid freezing weather; tell the fire service "
    "before and after, since fire protection is reduced while the test runs; keep every residual "
    "pressure at or above 20 psi (NFPA 291).",
]


# the hydrant curve's points: the fewest that draw it within this share of its drop (about two
# pixels of a panel at 100 dpi), on the N^1.85 axis, on which matplotlib draws each segment
# straight. Where a segment's line misses the curve by more, its midpoint on that axis is solved
# and drawn too. How far a segment's line misses the curve is judged before anything is solved
# between its ends, on the cubic Hermite interpolant in the scale through the ends' pressures and
# their slopes dp/ds (``_slope``: implicit differentiation at each solved point, one factorization,
# kept beside the point; the next point's solve starts from the last one kept). Near zero flow the
# curve is steep on that axis (the base demand's losses grow linearly there), hence a point at 0.2.
CURVE_TOLERANCE = 0.01
CURVE_SCALES = (0.0, 0.2, 1.0, 1.6)  # shares of the test's flow always solved; 0 and 1 the fit's
# The curve points' solver tolerances: a point is drawn, never printed, and a pixel of a panel is
# about 0.4 psi (0.3 m of head) on the demo town; heads to 1e-3 m (0.0014 psi) instead of the
# solver's default 1e-6 m change no pixel and no point chosen (tests/calibration/
# test_report_parts.py), in a quarter fewer Newton iterations (demo 335 -> 274, 7,938-pipe grid
# 787 -> 591). Each point still balances mass to 1e-6 of the demand.
CURVE_SOLVER = dict(flow_tol=1e-5, head_tol=1e-3, energy_tol=1e-4, mass_tol=1e-6)


def _same_loading(a, b) -> bool:
    """Two snapshots load the network alike (labels and zero extra demands aside)."""
    extra = lambda s: {k: v for k, v in s.extra_demand.items() if v != 0}  # noqa: E731
    return (a.demand_factor == b.demand_factor and a.source_head == b.source_head
            and extra(a) == extra(b))


def _hermite(t, h, ya, yb, da, db):
    """The cubic Hermite interpolant at ``t`` (0-1 across a gap ``h`` wide) through values ``ya``,
    ``yb`` with derivatives ``da``, ``db`` at its ends (the cubic Hermite basis functions, e.g.
    Burden and Faires, Numerical Analysis, ch. 3; from memory)."""
    return ((2 * t ** 3 - 3 * t ** 2 + 1) * ya + (t ** 3 - 2 * t ** 2 + t) * h * da
            + (3 * t ** 2 - 2 * t ** 3) * yb + (t ** 3 - t ** 2) * h * db)


def _hermite_start(solved: dict, rates: dict, s: float):
    """Warm start for the curve point at scale ``s`` from the points ``solved`` {scale: result}
    and their flows' rates dQ/ds (``rates`` {scale: every link's}): between two solved points the
    cubic Hermite interpolant of the flows, outside them the tangent at the nearest; statuses of
    the nearest. Both are exact for flows linear in s, and the mass balance is linear in the flows
    and the test's draw linear in s, so the start balances the point's demands exactly. Its error
    is fourth order in the gap (a straight line through two points: second order); measured on
    the 7,938-pipe grid's curves: 307 Newton iterations against 341 from that line (the same
    points, pressures within 1.4e-7 psi)."""
    near = min(solved, key=lambda v: abs(v - s))
    below, above = [v for v in solved if v < s], [v for v in solved if v > s]
    if below and above:
        a, b = max(below), min(above)
        flows = _hermite((s - a) / (b - a), b - a, solved[a].link_flow, solved[b].link_flow,
                         rates[a], rates[b])
    else:
        flows = solved[near].link_flow + (s - near) * rates[near]
    r = solved[near]
    n_p, n_u = len(r.flow), len(r.pump_flow)
    return dataclasses.replace(r, flow=flows[:n_p], pump_flow=flows[n_p:n_p + n_u],
                               valve_flow=flows[n_p + n_u:])


def _slope(solver, result, column, gauge):
    """(dp/ds [Pa per unit scale] of the gauge's pressure, dQ/ds of every link's flow) at a solved
    curve point, as the test's flows grow with the scale s: implicit differentiation at the
    solution (``NetworkSolver.sensitivities``) with dF2/ds = ``column`` (minus the test's flow at
    each flowed junction: F2 = inflow - demand), p = gamma (H - z)."""
    import scipy.sparse as sp

    dH, dQ = solver.sensitivities(result, sp.csr_matrix((len(solver.link_from), 1)), column)
    return units.GAMMA_WATER * float(np.ravel(dH)[gauge]), np.ravel(dQ)


#: Points inside a segment where its line is compared with the Hermite interpolant.
_SEGMENT_SAMPLES = np.linspace(0.0, 1.0, 41)[1:-1]


def _line_miss(a, b, pa, pb, da, db) -> float:
    """Largest distance [Pa] between the straight line from (a, pa) to (b, pb) on the N^1.85 axis
    and the cubic Hermite interpolant in the scale through those points with slopes ``da``, ``db``
    [Pa per unit scale] (``_hermite``), sampled at 39 points inside the segment."""
    t = _SEGMENT_SAMPLES
    cubic = _hermite(t, b - a, pa, pb, da, db)
    ua, ub = a ** 1.85, b ** 1.85
    line = pa + ((a + t * (b - a)) ** 1.85 - ua) / (ub - ua) * (pb - pa)
    return float(np.max(np.abs(cubic - line)))


def _curve(solver, rough, flows, heads, gauge, known=(), start=None):
    """Pressure at ``gauge`` [Pa] as the test's ``flows`` are scaled: (scales, pressures).

    ``known``: the fit's converged solutions; one with the same loading as a point of the curve is
    that point (these are taken first). Every other point is solved warm-started from the points
    solved (``_hermite_start``; the first from ``start``, the fit's solution of this test). A segment
    between two points is split at its midpoint on the N^1.85 axis where its line misses the
    curve's Hermite interpolant by more than ``CURVE_TOLERANCE`` of the drop (``_line_miss``)."""
    from calib.hydraulics import Snapshot

    solved, slope, rates = {}, {}, {}
    column = np.zeros((solver.nj, 1))
    for n, q in flows.items():
        column[solver.network.node_index[n], 0] -= q

    def loading(s):
        return Snapshot(extra_demand={n: q * s for n, q in flows.items()}, source_head=heads)

    def same(s):
        snap = loading(s)
        return [r for r in known if _same_loading(r.snapshot, snap)]

    given = {s: same(s) for s in CURVE_SCALES}  # the fit's solutions among the curve's points

    def at(s):
        found = given[s] if s in given else same(s)
        if found:
            solved[s] = found[0]
        else:
            warm = _hermite_start(solved, rates, s) if solved else start
            solved[s] = solver.solve(loading(s), roughness=rough, warm_start=warm)
        slope[s], rates[s] = _slope(solver, solved[s], column, gauge)
        return float(solved[s].pressure[gauge])

    p = {s: at(s) for s in sorted(CURVE_SCALES, key=lambda v: (not given[v], -v))}
    tol = CURVE_TOLERANCE * max(abs(p[CURVE_SCALES[0]] - p[CURVE_SCALES[-1]]), 1e-3 * units.PSI)
    todo = list(zip(CURVE_SCALES[:-1], CURVE_SCALES[1:]))
    while todo and len(p) < 33:
        a, b = todo.pop()
        if _line_miss(a, b, p[a], p[b], slope[a], slope[b]) <= tol:
            continue
        m = ((a ** 1.85 + b ** 1.85) / 2.0) ** (1.0 / 1.85)  # midpoint on the N^1.85 axis
        p[m] = at(m)
        todo += [(a, m), (m, b)]
    scales = np.array(sorted(p))
    return scales, np.array([p[s] for s in scales])


def _readings_data(tests, simulated, z, flag, threshold, system: str) -> dict[str, dict]:
    """The data of the two figures of the readings (observed against simulated, residuals by
    test), in display units: from a ``FitResult`` or, before its interval checks, from the fit's
    ``FitReadings`` (the same values)."""
    t = tests
    pu = units.display_unit("pressure", system)
    conv = lambda v: units.from_si(np.asarray(v, float), "pressure", pu)  # noqa: E731
    flagged = np.array([bool(f) for f in flag])
    kind = np.asarray(t.kind).astype(str)
    out = {}
    out["observed vs simulated"] = dict(
        sim=conv(simulated), obs=conv(t.pressure), kind=kind, flagged=flagged, pu=pu,
        band=units.from_si(2.0 * units.PSI, "pressure", pu))  # AWWA ECAC (1999) +/-2 psi, as in the criteria
    out["residuals by test"] = dict(
        x=t.test + np.where(t.kind == "static", -0.12, 0.12), z=np.asarray(z, float),
        kind=kind, flagged=flagged, threshold=threshold, test_ids=[str(i) for i in t.test_ids])
    return out


def submit_readings(worker, readings, system: str = "us") -> None:
    """Hand the readings' two figures to ``worker`` (a ``figure_worker.FigureWorker``) as soon as
    the fit knows them (``fit``'s ``on_readings``, a ``FitReadings``): drawn there during the
    interval checks. ``prepare`` submits the same data again, which the worker does not draw twice."""
    r = readings
    for name, data in _readings_data(r.tests, r.simulated, r.z, r.flag, r.threshold,
                                     system).items():
        worker.submit(name, data)


def _figure_data(result, system: str) -> dict[str, dict]:
    """The data of the three figures of the fit itself (no solves), in display units."""
    out = _readings_data(result.tests, result.simulated, result.z, result.flag,
                         result.options.get("threshold", 3.0), system)
    c_lo, c_hi = result.options.get("c_bounds", (40.0, 160.0))
    out["C by group"] = dict(
        c=np.asarray(result.c, float), low=np.where(np.isfinite(result.c_low), result.c_low, c_lo),
        high=np.where(np.isfinite(result.c_high), result.c_high, c_hi),
        determined=np.asarray(result.c_determined, bool),
        model_c=result.grouping.length_weighted(result.network, result.network.roughness),
        prior=None if result.prior is None else (np.asarray(result.prior.c, float),
                                                 np.asarray(result.prior.spread, float)),
        c_bounds=(c_lo, c_hi), names=[str(n) for n in result.grouping.names])
    return out


#: Hydrant-curve panels drawn at most (the first tests').
CURVE_PANELS = 12


def announce(worker, tests, curves: bool = True) -> None:
    """Have ``worker`` (a ``figure_worker.FigureWorker``) make the figures' empty canvases now,
    from what the tests alone decide (the number of curve panels), while the fit runs."""
    for name in ("observed vs simulated", "residuals by test", "C by group"):
        worker.layout(name)
    if curves and tests.n_tests:
        worker.layout("hydrant curves", min(tests.n_tests, CURVE_PANELS))


def _curves_data(result, system: str, on_panel=None) -> dict | None:
    """The hydrant-curve panels (at most ``CURVE_PANELS`` tests), each from ``_curve``'s solves;
    None without tests. ``on_panel(k, panel, flow unit, pressure unit)`` is called with each panel
    as soon as it is known (``None`` for a test without flows or gauges)."""
    from calib import parallel
    data: list = []  # the job's ``finished`` puts the curves' data here
    job = _curves_job(result, system, on_panel, data.append)
    if job is None:
        return None
    parallel.run_jobs([job], workers=parallel.workers_for(result.network))
    return data[0]


def _curves_job(result, system: str, on_panel=None, finished=None):
    """``_curves_data`` as a ``calib.parallel.Job`` (None without tests): one task per curve, each
    from a solver holding no kept factorization, so the curves come out the same on one core or
    several, beside any other work; ``finished(data)`` once the last is in. ``result``: a
    ``FitResult`` or the fit's ``FittedModel`` (the same C, flags and solutions)."""
    t, net = result.tests, result.network
    if not t.n_tests:
        return None
    from calib import parallel
    from calib.hydraulics import NetworkSolver
    # one set-up for every curve point
    solver = NetworkSolver(net, headloss="hazen-williams", **CURVE_SOLVER)
    pu, fu = units.display_unit("pressure", system), units.display_unit("flow", system)
    rough = result.roughness()
    solutions = getattr(result, "solutions", {})
    known = list(solutions.values())
    n_panels = min(t.n_tests, CURVE_PANELS)
    shown = [k for k in range(n_panels) if t.flows[k] and (t.test == k).any()]
    panels = [None] * n_panels
    if on_panel is not None:
        for k in range(n_panels):
            if k not in shown:  # a test without flows or gauges
                on_panel(k, None, fu, pu)

    def loading(k):
        """Test ``k``'s hydrant flows by id, its readings and the gauge its curve is drawn at."""
        flows = {str(net.node_ids[n]): q for n, q in t.flows[k].items()}
        sel = np.flatnonzero(t.test == k)
        return flows, sel, int(t.node[sel[0]])

    def curve(k):
        flows, _sel, gauge = loading(k)
        heads = {str(net.node_ids[s]): h for s, h in t.source_head[k].items()}
        return _curve(solver, rough, flows, heads, gauge, known,
                      solutions.get(f"{t.test_ids[k]} residual"))

    def panel(j, curve_points):
        k = shown[j]
        flows, sel, gauge = loading(k)
        total = sum(flows.values())
        scales, p = curve_points
        gh = units.head_to_pressure(t.gauge_height[sel[0]])
        readings = [(units.from_si(0.0 if t.kind[i] == "static" else total, "flow", fu),
                     float(units.from_si(t.pressure[i], "pressure", pu)), bool(result.flag[i]))
                    for i in sel[t.node[sel] == gauge]]
        panels[k] = dict(
            flow=units.from_si(total * scales, "flow", fu),
            pressure=units.from_si(np.array(p) - gh, "pressure", pu), readings=readings,
            tested=units.from_si(total, "flow", fu),
            title=(f"{t.test_ids[k]}: gauge {net.node_ids[gauge]}, "
                   f"{units.from_si(total, 'flow', fu):.0f} {fu} flowed"))
        if on_panel is not None:
            on_panel(k, panels[k], fu, pu)

    def whole(_values):
        if finished is not None:
            finished(dict(panels=panels, fu=fu, pu=pu))

    # each panel is made (and handed on) as its curve arrives
    # drawn while the rest is solved: first in ``fit``'s run of tasks (``fit.RANK_COLUMN``)
    return parallel.Job(curve, shown, reset=solver.forget, done=panel, finished=whole, rank=0)


class Solves:
    """The report's solves, the hydrant curves and the fire-flow rows, as ``calib.parallel.Job``s
    (``jobs``) that ``fit`` runs beside its interval checks and leave-one-out refits as soon as
    the fitted C are final (``fit``'s ``on_fitted``, which gives ``fitted``): each curve panel goes
    to ``worker`` as it is solved, the whole figure when the last is in, so that it is drawn
    while the rest is solved. ``prepare(..., solves=)`` takes their results from here."""

    def __init__(self, fitted, system: str = "us", curves: bool = True, worker=None):
        from calib.fireflow.fitsummary import fire_flow_job
        self.fitted, self.system, self.curves = fitted, system, curves
        self.curve_data = None  # the hydrant curves' data (None without tests)
        self.fire_rows = None  # the fire-flow rows (``fitsummary.fire_flow_job``)
        jobs = []
        if curves:
            on_panel = None if worker is None else (
                lambda *panel: worker.submit_part("hydrant curves", panel))

            def curves_done(data):
                self.curve_data = data
                if worker is not None:
                    worker.submit("hydrant curves", data)
            jobs.append(_curves_job(fitted, system, on_panel, curves_done))
        jobs.append(fire_flow_job(fitted, finished=lambda rows: setattr(self, "fire_rows", rows)))
        self.jobs = [j for j in jobs if j is not None]

    def fire_flow(self) -> str:
        """The fire-flow section from the rows solved (``fitsummary.html_section``)."""
        from calib.fireflow.fitsummary import html_section
        return html_section(self.fitted, self.system, rows=self.fire_rows)


def _plot_specs(result, system: str, curves: bool = True, worker=None) -> dict[str, dict]:
    """Every figure's data, each handed to ``worker`` (a ``figure_worker.FigureWorker``) as soon as it is
    known: the fit's figures are drawn there while the curves are solved here."""
    specs = _figure_data(result, system)
    if worker is not None:
        for name, data in specs.items():
            worker.submit(name, data)
    if curves:
        # each panel to the worker as soon as it is solved: it renders it while the next are solved
        on_panel = None if worker is None else (
            lambda *panel: worker.submit_part("hydrant curves", panel))
        data = _curves_data(result, system, on_panel)
        if data is not None:
            specs["hydrant curves"] = data
            if worker is not None:
                worker.submit("hydrant curves", data)
    return specs


def _table(headers, rows) -> str:
    head = "".join(f"<th>{html.escape(str(h))}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in r) + "</tr>"
                   for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _fmt(v, digits=1) -> str:
    return f"{v:.{digits}f}" if np.isfinite(v) else "undetermined"


def _glance(result, pu: str) -> str:
    """One paragraph: how many groups the tests inform, the flagged readings, the fit's RMSE."""
    t, est = result.tests, result.estimate
    status = list(result.status)
    counts = {k: status.count(k) for k in ("informed", "weakly informed", "undetermined")}
    words = ", ".join(f"{n} {k}" for k, n in counts.items() if n)
    n_flag = sum(1 for f in result.flag if f)
    n_lean = sum(1 for f in result.influence if f)
    n_out = int((~est.used).sum())
    rmse = units.from_si(result.rmse, "pressure", pu)
    at_bound = [name for name, b in zip(result.grouping.names, result.c_at_bound) if b]
    text = (f"{t.n_tests} tests, {t.n_readings} readings; {result.grouping.n_groups} pipe groups: "
            f"{words}. {n_flag} suspect reading(s) flagged"
            + (f", {n_out} left out of the final fit" if n_out else "")
            + (f"; {n_lean} influential reading(s), listed apart (not suspect)" if n_lean else "")
            + f". RMSE of pressures {rmse:.2f} {pu}.")
    if at_bound:
        text += (f" Fit goes to a C bound (no fitted value; the exports keep the model's C): "
                 f"{', '.join(at_bound)}.")
    return text


def _info_rows(info):
    """The tests table (``tests_io.TextTable``, or a DataFrame), with ISO dates shown as a person
    writes them (2026-05-14 08:00)."""
    if hasattr(info, "rows"):  # a TextTable: text cells, nothing missing
        rows = [list(r) for r in info.rows]
    else:
        rows = info.astype(object).where(info.notna(), "").values.tolist()
    cols = list(info.columns)
    if "date" in cols:
        j = cols.index("date")
        for r in rows:
            # no-break space and hyphens: a date and its hour stay on one line
            r[j] = str(r[j]).replace("T", "\u00a0", 1).replace("-", "\u2011")
    return cols, rows


@dataclasses.dataclass
class ReportParts:
    """What the page needs beyond the fit's tables, made by ``prepare``: each figure's data (already
    handed to the worker) and the fire-flow section; where they come from ``Solves`` still at
    work, taken from there when the page is made (``complete``)."""
    system: str
    curves: bool
    specs: dict
    fire_flow: str | None
    solves: Solves | None = None

    def complete(self) -> None:
        """The hydrant curves' data and the fire-flow section from ``solves``, now done."""
        if self.solves is None:
            return
        if self.solves.curve_data is not None:
            self.specs["hydrant curves"] = self.solves.curve_data
        self.fire_flow = self.solves.fire_flow()
        self.solves = None


def prepare(result, system: str = "us", curves: bool = True, worker=None,
            solves: Solves | None = None) -> ReportParts:
    """The figures' data, each handed to ``worker`` as soon as it is known, then the fire-flow
    section (its solves while the worker draws). Needs nothing the leave-one-out refits add, so
    ``calib fit`` calls it from the fit's ``on_result``: the figures are drawn beside those refits.
    ``solves``: the report's ``Solves`` for the same units and curves, run by the fit (the
    curves and fire-flow rows are then not solved here)."""
    if solves is not None and (solves.system, solves.curves) == (system, curves):
        specs = _figure_data(result, system)
        if worker is not None:
            for name, data in specs.items():
                worker.submit(name, data)
        return ReportParts(system, curves, specs, None, solves)
    from calib.fireflow.fitsummary import html_section  # fire flow with the fitted C
    specs = _plot_specs(result, system, curves, worker)
    return ReportParts(system, curves, specs, html_section(result, system))


def render(result, system: str = "us", curves: bool = True, worker=None,
           parts: ReportParts | None = None) -> str:
    """The report as one HTML string; ``worker``: a ``figure_worker.FigureWorker`` to draw the figures in
    (else they are drawn here); ``parts``: ``prepare``'s, made earlier with the same ``worker``."""
    from calib.calibration.export import OTHER_PARAMETERS, groups_columns, other_parameters_rows
    t, net, est = result.tests, result.network, result.estimate
    pu = units.display_unit("pressure", system)
    e = html.escape
    c_bounds = result.options.get("c_bounds")
    bounds = (f"{c_bounds[0]:g} - {c_bounds[1]:g}" if c_bounds is not None else "-")
    group_by = result.options.get("group_by")
    if parts is None or (parts.system, parts.curves) != (system, curves):
        parts = prepare(result, system, curves, worker)
    parts.complete()
    specs, fire_flow = parts.specs, parts.fire_flow
    if worker is None:
        from calib.calibration import figures  # loaded only where no worker draws them
        plots = {name: figures.draw(name, data) for name, data in specs.items()}
    else:
        plots = {name: worker.result(name) for name in specs}

    def img(key, alt):
        return (f"<figure><img alt='{e(alt)}' src='data:image/png;base64,{plots[key]}'></figure>"
                if key in plots else "")

    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        f"<title>C-factor calibration - {e(str(net.name))}</title><style>"
        "body{font-family:sans-serif;max-width:1100px;margin:1em auto;padding:0 1em;color:#222;"
        "line-height:1.4}"
        "table{border-collapse:collapse;margin:.5em 0;font-size:90%}"
        "td,th{border:1px solid #bbb;padding:3px 7px;text-align:left;vertical-align:top}"
        "th{background:#f2f2f2}td.n{text-align:right;font-variant-numeric:tabular-nums}"
        ".caution{border-left:4px solid #c60;background:#fff4e8;padding:.4em 1em}"
        ".glance{border-left:4px solid #36c;background:#eef3fb;padding:.5em 1em}"
        "figure{margin:.5em 0}img{max-width:100%}.note{color:#555;font-size:90%}</style></head><body>",
        f"<h1>C-factor calibration: {e(str(net.name))}</h1>",
        f"<p>Generated {e(_dt.datetime.now().strftime('%Y-%m-%d %H:%M'))} from "
        f"<code>{e(str(t.folder))}</code>. Pipe groups from "
        f"{e('the group column of pipes.csv' if group_by in (None, '', 'group column') else str(group_by))}; "
        f"prior: {e(str(result.options.get('prior')))}; C bounds {e(bounds)}; "
        f"least-squares loss: {e(str(result.options.get('loss')))}; pressures in {e(pu)} (gauge).</p>",
        "<div class='caution'><b>Cautions.</b><ul>" + "".join(f"<li>{e(c)}</li>" for c in CAUTIONS)
        + "</ul></div>",
        f"<h2>At a glance</h2><p class='glance'>{e(_glance(result, pu))}</p>",
        "<h2>Groups</h2>",
    ]
    gf = groups_columns(result)
    rows = []
    for i in range(result.grouping.n_groups):
        r = {k: v if np.ndim(v) == 0 else v[i] for k, v in gf.items()}  # a scalar: every row's
        if result.c_determined[i]:
            status = r["status"] + (f" ({result.informed[i]:.0%})" if result.prior is not None else "")
            c_text = _fmt(r["c_factor"])
            interval = (f"{_fmt(r['c_low'])} - {_fmt(r['c_high'])}"
                        if np.isfinite(r["c_low"]) and np.isfinite(r["c_high"]) else r["interval_text"])
        else:
            limited = not (result.c_low_open[i] and result.c_high_open[i])
            status = "undetermined" + (", fit goes to a C bound" if bool(r["at_bound"]) and limited
                                       else "") \
                + f"; the exports keep the model's C {r['model_c']:.0f}"
            c_text, interval = "-", r["interval_text"]
        if r["interval_method"] != "linearized":
            interval += " (profile likelihood)"
        rows.append([r["group"], c_text, interval,
                     "-" if result.prior is None else f"{r['prior_c']:.0f} +/- {r['prior_spread']:.0f}",
                     _fmt(r["model_c"]), int(r["n_pipes"]), status,
                     _fmt(r["c_all_readings"]) if "c_all_readings" in gf else "-"])
    parts.append(_table(["group", "fitted C", "95 % interval", "prior C +/- 1 sd", "model C before",
                         "pipes", "informed by the tests (share of precision)",
                         "C with every reading kept"], rows))
    parts.append("<p class='note'>C is the Hazen-Williams coefficient [-]. The share says how much of "
                 "a group's precision comes from the readings rather than the prior: above 50 % "
                 "informed, 10 - 50 % weakly informed, below undetermined. A group the tests do not "
                 "determine (or whose fit goes to a C bound) shows no fitted C: only what the tests "
                 "say (a one-sided limit, or nothing within the C bounds); roughness.csv and "
                 "pipes.geojson keep the model's C for its pipes. Intervals are linearized where that "
                 "can be trusted, else profile likelihood (Venzon and Moolgavkar 1988; Bates and Watts "
                 "1988), never outside the C bounds. \"C with every reading kept\" is the fit before "
                 "flagged readings were left out; it shows how much they pull.</p>")
    other = other_parameters_rows(result)
    if other:
        parts.append(_table(list(OTHER_PARAMETERS), other))
    parts.append(img("C by group", "C by group against the prior and the C bounds"))
    if result.prior is not None:
        parts.append(f"<p class='note'>Prior: {e(result.prior.source)}.</p>")
    flagged = [i for i, f in enumerate(result.flag) if f]
    parts.append("<h2>Flagged readings (suspect)</h2>")
    if flagged:
        parts.append(_table(["test", "node", "kind", f"observed [{pu}]", f"simulated [{pu}]",
                             "left out", "standardized residual, final fit [-]", "reason"],
                            [[t.test_ids[t.test[i]], net.node_ids[t.node[i]], t.kind[i],
                              f"{units.from_si(t.pressure[i], 'pressure', pu):.1f}",
                              f"{units.from_si(result.simulated[i], 'pressure', pu):.1f}",
                              "no" if est.used[i] else "yes",
                              f"{result.z[i]:+.1f}", result.flag[i]] for i in flagged]))
        parts.append("<p class='note'>Simulated and standardized values are from the final fit; a "
                     "reading left out is measured against the fit made without it, so its value "
                     "can differ from the one quoted in the reason (measured against the fit with "
                     "it). Check a flagged reading in the field notes (gauge, gauge height, a valve) "
                     "before discarding it.</p>")
    else:
        parts.append("<p>None.</p>")
    leaning = [i for i, f in enumerate(result.influence) if f]
    if leaning:
        parts.append("<h2>Influential readings</h2>")
        parts.append(_table(["test", "node", "kind", "Cook's distance [-]", "why the fit leans on it"],
                            [[t.test_ids[t.test[i]], net.node_ids[t.node[i]], t.kind[i],
                              _fmt(result.cook[i], 2), result.influence[i]] for i in leaning]))
        parts.append("<p class='note'>Not suspect: these readings weigh much on the fit because of "
                     "where the tests were made (often the only reading that loads a group). Keep "
                     "them; a further test that loads the same groups would share their weight.</p>")
    parts.append("<h2>Findings</h2><ul>" + "".join(f"<li>{e(f)}</li>" for f in result.findings)
                 + "</ul>")
    rmse = units.from_si(result.rmse, "pressure", pu)
    parts.append(f"<h2>Fit statistics</h2><p>RMSE of pressures {rmse:.2f} {pu} over "
                 f"{int(est.used.sum())} readings used (of {t.n_readings}); weighted sum of squares "
                 f"{est.chi2:.1f} on {est.dof:.1f} degrees of freedom. Scale of the readings: "
                 + e(est.scale_note) + f"; quantile of the 95 % intervals {est.t:.3f}. Largest head loss across the system in a static "
                 f"snapshot {units.from_si(result.max_headloss, 'head', units.display_unit('head', system)):.1f} "
                 f"{units.display_unit('head', system)}.</p>")
    parts.append(_table(["criterion", "source", "required", "achieved", "met"],
                        [[c.label, c.source, f"{c.required:.0%}", f"{c.achieved:.0%}",
                          "yes" if c.passed else "no"] for c in result.criteria]))
    parts.append("<h2>How well the readings fit</h2>")
    parts.append(img("observed vs simulated", "observed against simulated pressure, every reading"))
    parts.append(img("residuals by test", "standardized residuals by test"))
    if "hydrant curves" in plots:
        parts.append("<h2>Hydrant curves</h2>" + img("hydrant curves", "hydrant curves per test"))
        parts.append("<p class='note'>The curve is the calibrated model's pressure at the gauge as the "
                     "test's flows are scaled from 0 to 1.6 times what was flowed; beyond the dotted "
                     "line it is an extrapolation, not a measurement.</p>")
    names = [q.name for q in result.params]
    if len(names) > 1:
        corr_rows = [[names[i]] + [("-" if not np.isfinite(v) else f"{v:+.2f}") for v in result.corr[i]]
                     for i in range(len(names))]
        parts.append("<h2>Parameter correlation</h2>" + _table([""] + names, corr_rows))
        parts.append("<p class='note'>Near +1 or -1: the tests cannot tell the two apart; a test "
                     "that loads one group and not the other separates them.</p>")
    if result.move_together:
        parts.append("<p>Parameters that move together (|r| &gt; 0.9): " + e(", ".join(
            f"{a} / {b} ({r:+.2f})" for a, b, r in result.move_together)) + ".</p>")
    if not t.info.empty:
        cols, rows = _info_rows(t.info)
        parts.append("<h2>Tests</h2>" + _table(cols, rows))
    parts.append(fire_flow)
    parts.append(
        "<h2>Method</h2><p>Each test gives a static snapshot (normal demand) and a residual snapshot "
        "(normal demand plus the test's flows); both kinds of reading are fitted (static readings "
        "inform source grades and demand more than C). Readings become hydraulic grades: HGL = "
        "pressure head + node elevation + gauge height (water at 60 degF, 1 psi = 2.309 ft). One "
        "Hazen-Williams C per group by bounded weighted least squares (Gauss-Newton with the "
        "structured secant curvature term of Dennis, Gay and Welsch 1981; with a robust loss "
        "scipy.optimize.least_squares, trust-region reflective; after Lansey and Basnet 1991), "
        "the Jacobian by implicit "
        "differentiation of the Todini and Pilati (1988) global gradient equations at each converged "
        "snapshot. Covariance (J<sup>T</sup>WJ)<sup>-1</sup> by an SVD pseudo-inverse (Bard 1974), "
        "the readings' rows weighted by their scale: the stated gauge sigma when a two-sided "
        "chi-square test does not reject it (normal quantile), else s<sup>2</sup> = S/(n-p) from their "
        "scatter (t quantile), which is also the case when no accuracy was stated; prior rows keep "
        "their own spread. 95 % intervals: linearized where that can be trusted, else profile "
        "likelihood - the other parameters refit with the C held fixed, the ends where the sum of "
        "squares rises by the squared quantile (Venzon and Moolgavkar 1988, Applied Statistics 37(1); "
        "Bates and Watts 1988, Nonlinear Regression Analysis and Its Applications) - never outside the "
        "C bounds. Flags: face checks, standardized residuals "
        "with leverage beyond the Bonferroni outlier cut-off at the stated family-wise level (Cook and "
        "Weisberg 1982), Cook's distance (Cook 1977) and leave-one-out refits; readings beyond the "
        "cut-off are left out one at a time and the fit repeated. Accuracy criteria: WRc (1989) "
        "Network Analysis - A Code of Practice, and the AWWA ECAC (1999) calibration guidelines, "
        "both quoted from memory.</p>")
    parts.append("<div class='caution'><b>Before using these C-factors.</b> "
                 + e(CAUTIONS[0]) + "</div>")
    parts.append("</body></html>")
    return "\n".join(parts)


def write_report(result, out, system: str = "us", curves: bool = True, worker=None,
                 parts: ReportParts | None = None) -> Path:
    """Write ``OUT/report.html`` atomically and return its path (``worker``, ``parts``: see ``render``)."""
    path = Path(out) / "report.html"
    return fileio.write_text(path, render(result, system, curves, worker, parts))
