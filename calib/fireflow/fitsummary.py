"""The fire-flow summary in a fit's report: available flow with the fitted C, and its interval, at the
hydrants the tests flowed (where the fit knows the mains best), and how to scan every hydrant."""

from __future__ import annotations

import dataclasses
import html

import numpy as np

from calib import parallel, units
from calib.errors import CalibError
from calib.flowtest.rating import EXPONENT
from calib.fireflow.scan import FireFlowScan, GroupCovariance


def covariance_of(result) -> GroupCovariance:
    """The group C covariance of a ``FitResult`` (as covariance.csv holds it)."""
    cols = result.c_cols
    cov = np.asarray(result.estimate.cov, float)[np.ix_(cols, cols)]
    undetermined = np.asarray(result.estimate.undetermined, bool)[cols]
    cov = np.where(np.isfinite(cov), cov, 0.0)
    return GroupCovariance(names=list(result.grouping.names), cov=cov,
                           pipe_group=np.asarray(result.grouping.index, np.int64),
                           undetermined=undetermined, c=result.c)


def flowed_hydrants(result) -> list[str]:
    """Junctions flowed by the tests, in test order, each once."""
    ids = result.network.node_ids
    return list(dict.fromkeys(str(ids[i]) for flows in result.tests.flows for i in flows))


def static_start(result):
    """A warm start for the scan's static solve: the fit's solution of the first test's static
    loading at the fitted C (it differs from the scan's only in the demand factor and the source
    grades), None where no test has one. Measured: 3 against 10 Newton iterations from cold on
    the demo town, 2 against 6 on the 7,938-pipe grid."""
    tests = result.tests
    return next((result.solutions[f"{t} static"] for t in tests.test_ids
                 if f"{t} static" in result.solutions), None)


def held_start(result, scan, node: str):
    """A warm start for the held solve at ``node``, a hydrant the tests flowed (None for another):
    the scan's static flows plus the flow change of the first test that flowed it (the fit's
    residual solution of that test less its static one, both at the fitted C; the scan's static
    where the test has no static reading), scaled from the test's flow to the flow NFPA 291's
    rating formula gives at the scan's residual target, Q_R = Q_F (h_r / h_f)^0.54 with h_r the
    scan's static pressure less the target and h_f the drop the fit's two solutions show at the
    hydrant (``flowtest.rated_flow``). Where both solutions are the test's, their change balances
    its draws, so the start balances every junction but the flowed ones. Measured: held solves in 86
    against 137 Newton iterations from cold on the demo town's 12 flowed hydrants, 62 against 89
    on the 7,938-pipe grid's (benchmarks/README.md, "C3"); the figures are the same to the
    solver's tolerance (tests/fireflow/test_fitsummary_start.py)."""
    t, net = result.tests, result.network
    i = net.node_index.get(str(node))
    k = next((k for k in range(t.n_tests) if i in t.flows[k]), None)
    tested = None if k is None else result.solutions.get(f"{t.test_ids[k]} residual")
    if tested is None:
        return None
    at_rest = result.solutions.get(f"{t.test_ids[k]} static", scan.static)
    total = sum(t.flows[k].values())
    room, drop = scan.p0[i] - scan.options.residual, at_rest.pressure[i] - tested.pressure[i]
    share = 1.0
    if room > 0 and drop > 0 and total > 0:
        share = t.flows[k][i] * (room / drop) ** EXPONENT / total  # as flowtest.rated_flow
    base = scan.static

    def moved(field):
        return getattr(base, field) + share * (getattr(tested, field) - getattr(at_rest, field))

    return dataclasses.replace(base, flow=moved("flow"), pump_flow=moved("pump_flow"),
                               valve_flow=moved("valve_flow"))


def _fresh(scan) -> None:
    """The scan as a hydrant finds it first: no neighbour's held solve, no kept factorization; the
    hydrants are shared out between processes (``calib.parallel``), each from this state, so the
    table is the same on one core or several."""
    scan.reset()
    scan.solver.forget()


def fire_flow_job(result, limit: int = 12, finished=None):
    """The rows of ``html_section`` as a ``calib.parallel.Job``, one task per flowed hydrant (at most
    ``limit``), each from the scan as a hydrant finds it first (``_fresh``), so the rows are the
    same on one core or several, beside any other work; ``finished(rows)`` once the last is in.
    A row is a ``HydrantFlow``, or a ``NotComputed`` where the scan failed there; where the scan
    cannot start, no job: ``finished`` gets that failure at once."""
    nodes = flowed_hydrants(result)[:limit]
    try:
        scan = FireFlowScan(result.network, roughness=result.roughness(),
                            covariance=covariance_of(result), static_start=static_start(result))
    except CalibError as exc:
        if finished is not None:
            finished([NotComputed(str(exc))])
        return None

    def row(node):
        try:
            return scan.hydrant(node, held_start(result, scan, node))
        except CalibError as exc:  # the section says so; the rows after it are not shown
            return NotComputed(str(exc))
    # short tasks, only written: last in ``calib fit``'s run of tasks (after its interval ends,
    # ``calib.calibration.fit.RANK_END``), where they even out the processes' shares
    return parallel.Job(row, nodes, reset=lambda: _fresh(scan), finished=finished, rank=4)


@dataclasses.dataclass
class NotComputed:
    """A fire-flow row that could not be computed, and why."""
    why: str


def html_section(result, system: str = "us", limit: int = 12, rows=None) -> str:
    """``<h2>Fire flow ...</h2>`` with a table for the flowed hydrants (at most ``limit``); ``rows``:
    those of ``fire_flow_job`` where it ran already (else they are solved here)."""
    e = html.escape
    fu, pu = units.display_unit("flow", system), units.display_unit("pressure", system)
    head = ("<h2>Fire flow with the fitted C</h2><p>Model estimate of the flow available at 20 psi "
            "residual (and 20 psi elsewhere in its hydraulic zone), average-day demand, at the hydrants the "
            "tests flowed; 95 % interval from the C covariance (first order). For every hydrant, "
            "with a map: <code>python -m calib fireflow NETWORK --fit THIS_FOLDER --out "
            "THIS_FOLDER/fireflow.csv</code>. An estimate: it does not replace flow tests, local "
            "codes, the authority having jurisdiction or a licensed engineer.</p>")
    if rows is None:
        rows = []  # filled by the job's ``finished`` (at once where the scan cannot start)
        parallel.run_jobs([fire_flow_job(result, limit, finished=rows.extend)],
                          workers=parallel.workers_for(result.network))
    failed = next((f for f in rows if isinstance(f, NotComputed)), None)
    if failed is not None:
        return head + f"<p>Not computed: {e(failed.why)}</p>"
    q = lambda v: f"{units.from_si(v, 'flow', fu):.0f}" if np.isfinite(v) else "-"  # noqa: E731
    cells = "".join(
        f"<tr><td>{e(f.node)}</td><td>{units.from_si(f.static, 'pressure', pu):.1f}</td>"
        f"<td>{q(f.available)}</td><td>{q(f.low)} - {q(f.high)}</td>"
        f"<td>{e(f.limiting_node if f.available == f.flow_system else 'own residual')}</td>"
        f"<td>{e(f.hydrant_class)}</td><td>{e(f.note)}</td></tr>" for f in rows)
    return (head + f"<table><tr><th>hydrant</th><th>static [{pu}]</th><th>available [{fu}]</th>"
            f"<th>95 % interval [{fu}]</th><th>limited by</th><th>NFPA 291 class</th><th>note</th>"
            f"</tr>{cells}</table>")
