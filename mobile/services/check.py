"""The on-site model check: simulate this test on the loaded network and compare with the gauges.

The prediction comes from ``calib.calibration.predict_test`` (the network solver with the current
C-factors). Here we only compare and put the comparison into words a crew can act on before leaving
the site: re-read the gauge, check the gauge height, look for a closed valve. The check runs in a
worker thread (``run_in_background``); the caller hands the result to its UI thread.

Thresholds are common practice; the default tolerance of 5 psi follows the AWWA Engineering Computer
Applications Committee's calibration guidelines (1999) for planning models (from memory).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field

from calib.errors import CalibError
from calib.units import GAMMA_WATER, PSI

from mobile.services import background, values

TOLERANCE = 5.0 * PSI  # [Pa] see the module docstring


@dataclass
class GaugeCheck:
    """One gauge hydrant: observed (at the node, gauge height taken out) and predicted [Pa]."""

    node: str
    observed_static: float
    observed_residual: float
    predicted_static: float
    predicted_residual: float
    advice: list = field(default_factory=list)  # plain sentences; empty when it agrees

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


def prepare(service, tid: str, tol: float = TOLERANCE) -> CheckJob | CheckResult:
    """Gather test ``tid``'s flows and readings, or a ``CheckResult`` saying why it cannot run."""
    area = service.area
    if area.network is None:
        return CheckResult(False, "No network loaded for this area: the model check needs the "
                                  "office network (load it on the home screen)")
    header = service.header(tid)
    res = service.results(tid)
    readings = service.readings(tid)
    flows = {}
    for o in header["outlets"]:
        q = res.outlet_flows.get(o["uid"])
        if q is None:
            return CheckResult(False, "Enter every pitot or meter reading first")
        flows[o["hydrant"]] = flows.get(o["hydrant"], 0.0) + q
    gauges = [g for g in header["gauges"]
              if f"static@{g}" in readings and f"residual@{g}" in readings]
    if not gauges:
        return CheckResult(False, "Enter a static and a residual first")
    # A gauge above the node reads less than the node's pressure by gamma * height.
    lift = GAMMA_WATER * (header.get("gauge_height") or {}).get("si", 0.0)
    observed = {g: (readings[f"static@{g}"].si_value + lift, readings[f"residual@{g}"].si_value + lift)
                for g in gauges}
    grades = {b["source"]: b["si"] for b in header.get("boundary", [])}
    return CheckJob(area.network, flows, gauges, observed, service.system, tol, grades)


def run_job(job: CheckJob) -> CheckResult:
    """Simulate the test (the slow part: a network solve) and compare; safe in a worker thread."""
    try:
        from calib.calibration import predict_test  # the calibration package; loaded when needed
    except ImportError:
        return CheckResult(False, "The model check is not available in this build")
    try:
        predicted = predict_test(job.network, flows=job.flows, gauges=job.gauges,
                                 source_head=job.source_head or None)
    except (CalibError, KeyError, ValueError) as exc:
        return CheckResult(False, f"The model could not simulate this test: {exc}")
    out = []
    for p in predicted:
        node = str(p.node)
        obs_s, obs_r = job.observed[node]
        out.append(GaugeCheck(node, obs_s, obs_r, float(p.static), float(p.residual),
                              advise(obs_s, obs_r, float(p.static), float(p.residual), job.tol,
                                     job.system)))
    bad = [g.node for g in out if g.suspect]
    msg = ("Suspect reading at " + ", ".join(bad) + ": see what to do below") if bad else \
        f"Readings agree with the model within {values.fmt(job.tol, 'pressure', job.system)}"
    if predicted and predicted[0].valve_note:  # a valve changes state under the test: say so
        msg += ". " + predicted[0].valve_note
    return CheckResult(True, msg, out)


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
