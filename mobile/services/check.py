"""The on-site model check: is each reading one that a plausible state of the network explains?

The judgement is ``calib.loop.check.SequentialCheck`` - the same logic as ``python -m calib check``:
each group's C within its plausible range (the handbook prior), the tests finished earlier the same
day (a running fit), the gauge's stated accuracy and the tank level's uncertainty. A reading is
suspect only when no plausible state explains it; then its likely causes come ranked, with what to do
before leaving, and the pipes whose closing would best explain the test (``calib.loop.closures``).
The check runs in a worker thread (``run_in_background``); the caller hands the result to its UI
thread.

``advise`` keeps the former fixed-tolerance wording (5 psi, after the AWWA Engineering Computer
Applications Committee's calibration guidelines, 1999, from memory) for callers that want it.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field

from calib.errors import CalibError
from calib.units import GAMMA_WATER, PSI

from mobile.services import background, values

TOLERANCE = 5.0 * PSI  # [Pa] see the module docstring
GAUGE_SIGMA = 1.0 * PSI  # [Pa] the gauge's accuracy the check states (1 psi: a test gauge, common practice)
MAX_ACTIONS = 3  # a suspect reading's advice names at most this many actions (the likeliest causes')


@dataclass
class GaugeCheck:
    """One gauge hydrant: observed (at the node, gauge height taken out) and predicted [Pa]."""

    node: str
    observed_static: float
    observed_residual: float
    predicted_static: float
    predicted_residual: float
    advice: list = field(default_factory=list)  # plain sentences; empty when it agrees
    notes: list = field(default_factory=list)  # why an agreeing reading agrees (words)
    ranges: dict = field(default_factory=dict)  # "static" / "residual" -> (low, high) [Pa at the node]
    closures: list = field(default_factory=list)  # suspect: "pipe (from-to)" best explaining the test

    @property
    def suspect(self) -> bool:
        return bool(self.advice)


@dataclass
class CheckResult:
    ok: bool  # the check could run
    message: str
    gauges: list = field(default_factory=list)


def advise(obs_s: float, obs_r: float, pred_s: float, pred_r: float, tol: float = TOLERANCE,
           system: str = "us") -> list[str]:
    """What a crew should do when observed and predicted pressures [Pa] disagree (common practice)."""
    ds, dr = obs_s - pred_s, obs_r - pred_r
    drop_obs, drop_pred = obs_s - obs_r, pred_s - pred_r
    f = lambda v: values.fmt(abs(v), "pressure", system)  # noqa: E731
    out = []
    if abs(ds) > tol and abs(dr) > tol and (ds > 0) == (dr > 0) and abs(ds - dr) <= tol:
        out.append(f"Static and residual are both {f(ds)} {'above' if ds > 0 else 'below'} the "
                   "model: check the gauge height and the hydrant's elevation, then re-read the gauge.")
        return out
    if drop_obs > drop_pred + tol:
        out.append(f"The pressure dropped {f(drop_obs - drop_pred)} more than the model expects: "
                   "look for a closed or partly closed valve near the test, and re-read the residual.")
    elif drop_obs < drop_pred - tol:
        out.append(f"The pressure dropped {f(drop_pred - drop_obs)} less than the model expects: "
                   "check the pitot reading and the outlet size; the model may be too rough here.")
    if abs(ds) > tol and not out:
        out.append(f"The static is {f(ds)} {'above' if ds > 0 else 'below'} the model: re-read the "
                   "static and note tank levels and pumps running at the time.")
    return out


@dataclass
class CheckJob:
    """What the worker needs, gathered on the caller's thread (the store is never read off it)."""

    network: object
    flows: dict  # hydrant id -> [m3/s]
    gauges: list  # gauge hydrant ids with both readings
    observed: dict  # gauge id -> (static, residual) at the node [Pa]
    system: str
    tol: float
    source_head: dict = field(default_factory=dict)  # source id -> grade noted at the test [m]
    earlier: list = field(default_factory=list)  # the day's tests before this one: (flows, observed, grades)
    sigma: float = GAUGE_SIGMA  # stated gauge accuracy [Pa]


def _gather(service, tid: str):
    """(flows, observed, grades) of test ``tid``, or a sentence saying what is missing."""
    header = service.header(tid)
    res = service.results(tid)
    readings = service.readings(tid)
    flows = {}
    for o in header["outlets"]:
        q = res.outlet_flows.get(o["uid"])
        if q is None:
            return "Enter every pitot or meter reading first"
        flows[o["hydrant"]] = flows.get(o["hydrant"], 0.0) + q
    gauges = [g for g in header["gauges"]
              if f"static@{g}" in readings and f"residual@{g}" in readings]
    if not gauges:
        return "Enter a static and a residual first"
    # A gauge above the node reads less than the node's pressure by gamma * height.
    lift = GAMMA_WATER * (header.get("gauge_height") or {}).get("si", 0.0)
    observed = {g: (readings[f"static@{g}"].si_value + lift, readings[f"residual@{g}"].si_value + lift)
                for g in gauges}
    grades = {b["source"]: b["si"] for b in header.get("boundary", [])}
    return flows, observed, grades


def _earlier_today(service, tid: str) -> list:
    """The same day's tests started before ``tid`` that can be judged, in the order started."""
    mine = service.header(tid).get("started_at", "")
    day = mine[:10]
    rows = [r for r in service.list_tests("all") if r["test_id"] != tid and day
            and r.get("started_at", "")[:10] == day and (r.get("started_at", ""), r["test_id"]) < (mine, tid)]
    out = []
    for r in sorted(rows, key=lambda r: (r["started_at"], r["test_id"])):
        got = _gather(service, r["test_id"])
        if not isinstance(got, str):
            out.append(got)
    return out


def prepare(service, tid: str, tol: float = TOLERANCE) -> CheckJob | CheckResult:
    """Gather test ``tid``'s flows and readings, or a ``CheckResult`` saying why it cannot run."""
    area = service.area
    if area.network is None:
        return CheckResult(False, "No network loaded for this area: the model check needs the "
                                  "office network (load it on the home screen)")
    got = _gather(service, tid)
    if isinstance(got, str):
        return CheckResult(False, got)
    flows, observed, grades = got
    return CheckJob(area.network, flows, list(observed), observed, service.system, tol, grades,
                    earlier=_earlier_today(service, tid))


def _readings(network, test_id, flows, observed, grades, sigma):
    """A ``calib.loop.linear.TestReadings`` from the app's ids and pressures at the node [Pa]."""
    import numpy as np
    from calib.loop.linear import TestReadings
    index = network.node_index
    nodes, kinds, pressure = [], [], []
    for g, (st, rs) in observed.items():
        nodes += [index[g], index[g]]
        kinds += ["static", "residual"]
        pressure += [st, rs]
    nodes = np.array(nodes, dtype=np.int64)
    return TestReadings(test_id, {index[h]: q for h, q in flows.items()},
                        {index[s]: h for s, h in grades.items() if s in index},
                        nodes, np.array(kinds, dtype=object), np.array(pressure, float),
                        np.zeros(len(nodes)), np.full(len(nodes), sigma),
                        np.asarray(network.elevation, float)[nodes])


def _checker(job: CheckJob):
    """(checker, closure finder, this test): the state brought up to the test by the day's earlier ones."""
    import datetime as _dt
    from calib.loop.check import SequentialCheck
    from calib.loop.closures import ClosureFinder
    from calib.loop.state import default_grouping, handbook_state
    net = job.network
    grouping = default_grouping(net)
    finder = ClosureFinder(net, grouping)
    checker = SequentialCheck(net, grouping, handbook_state(net, grouping, float(_dt.date.today().year)),
                              solver=finder.lin.solver, closures=finder.best_for_check)
    checker.lin = finder.lin
    for k, (flows, observed, grades) in enumerate(job.earlier):
        checker.judge(_readings(net, f"earlier-{k + 1}", flows, observed, grades, job.sigma))
    return checker, finder, _readings(net, "this test", job.flows, job.observed, job.source_head, job.sigma)


def run_job(job: CheckJob) -> CheckResult:
    """Judge the test (the slow part: network solves) with the day's earlier tests; safe in a worker."""
    try:
        import calib.loop.check  # noqa: F401 - the check's package; loaded when needed
    except ImportError:
        return CheckResult(False, "The model check is not available in this build")
    from calib.loop.check import ACTIONS_IN_REASON
    try:
        checker, finder, test = _checker(job)
        verdicts = checker.judge(test)
        closures = []
        if any(v.suspect for v in verdicts):
            m, _ = checker.prior(test)
            closures = [f"{c.pipe_id} ({c.start}-{c.end}): {c.note}"
                        for c in finder.rank(test, m, top=3, confirm=10, min_drop=0.0)]
    except (CalibError, KeyError, ValueError, IndexError) as exc:
        return CheckResult(False, f"The model could not simulate this test: {exc}")
    out = []
    for g in job.observed:
        st, rs = [v for v in verdicts if v.node == str(g)]
        advice = [v.reason for v in (st, rs) if v.suspect]
        if advice:
            # the reason already says the first actions ("Before leaving: ..."): only the next one
            advice += [f"Then: {a}." for _, a in
                       (rs if rs.suspect else st).causes[ACTIONS_IN_REASON:MAX_ACTIONS]]
        out.append(GaugeCheck(str(g), st.observed, rs.observed, st.predicted, rs.predicted, advice,
                              notes=[v.reason for v in (st, rs) if not v.suspect],
                              ranges={"static": (st.low, st.high), "residual": (rs.low, rs.high)},
                              closures=closures if advice else []))
    bad = [g.node for g in out if g.suspect]
    msg = ("Suspect reading at " + ", ".join(bad) + ": see what to do below") if bad else \
        "Every reading is one a plausible state of the network explains"
    if job.earlier:
        msg += f" (with {len(job.earlier)} earlier test(s) of today)"
    note = _valve_note(job)
    if note:  # a valve changes state under the test: a common reason readings disagree
        msg += ". " + note
    return CheckResult(True, msg, out)


def _valve_note(job: CheckJob) -> str:
    """The valves whose state differs between the test's static and flowing snapshots, in words
    (``calib.calibration.predict_test``); '' for a network without valves or when it cannot say."""
    if not len(getattr(job.network, "valves", ())):
        return ""
    from calib.calibration import predict_test
    try:
        predicted = predict_test(job.network, flows=job.flows, gauges=list(job.gauges)[:1],
                                 source_head=job.source_head or None)
    except (CalibError, KeyError, ValueError):
        return ""
    return predicted[0].valve_note if predicted else ""


def closures_for(service, tid: str, top: int = 5) -> list:
    """The pipes whose closing best explains test ``tid`` (``calib.loop.closures.Closure``, best first),
    with the day's earlier tests as the running fit; [] when the test cannot be simulated yet."""
    job = prepare(service, tid)
    if isinstance(job, CheckResult):
        return []
    checker, finder, test = _checker(job)
    m, _ = checker.prior(test)
    return finder.rank(test, m, top=top, min_drop=0.0)  # the best few, each with its note


def check_test(service, tid: str, tol: float = TOLERANCE) -> CheckResult:
    """Run the model check for test ``tid`` on this thread (blocking)."""
    job = prepare(service, tid, tol)
    return job if isinstance(job, CheckResult) else run_job(job)


def run_in_background(service, tid: str, on_done, tol: float = TOLERANCE) -> threading.Thread | None:
    """Gather the inputs here, run the solve in a daemon thread, call ``on_done(CheckResult)`` there.

    The caller makes ``on_done`` safe for its UI (the app wraps it in ``kivy.clock.mainthread``).
    Returns the thread, or None when the check could not start (``on_done`` already called).
    """
    job = prepare(service, tid, tol)
    if isinstance(job, CheckResult):
        on_done(job)
        return None
    return background.start(lambda: run_job(job), on_done,
                            lambda exc: CheckResult(False, f"The model check failed: {exc}"),
                            name=f"model-check-{tid}")
