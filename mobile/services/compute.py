"""Results of one test from its readings, through ``calib.flowtest`` (NFPA 291 arithmetic).

No formula lives here: this module only gathers the readings in force into a ``calib.flowtest``
``FlowTest`` and turns the ``FlowTestResult`` into what the screens show. The gauge used for the
rated flow is the first gauge hydrant that has both a static and a residual reading.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from calib.flowtest import classes, findings, pitot, rating
from calib.errors import CalibError


@dataclass
class Results:
    """Computed results of a test in SI, plus its findings; values are None until computable."""

    flow: float | None = None  # total discharge [m3/s]
    outlet_flows: dict = field(default_factory=dict)  # outlet uid -> [m3/s]
    rated_flow: float | None = None  # flow at the target residual [m3/s]
    target: float | None = None  # [Pa]
    class_label: str = ""
    class_colour: str = ""
    class_note: str = ""
    static: float | None = None  # of the rating gauge [Pa]
    residual: float | None = None
    gauge: str = ""
    findings: list = field(default_factory=list)  # (severity, code, message)
    missing: list = field(default_factory=list)  # plain words: what is still to enter
    curve: tuple | None = None  # (flows [m3/s], pressures [Pa]) of the hydrant curve


def outlet_flow(outlet: dict, readings: dict) -> float | None:
    """Discharge of one outlet [m3/s] from its pitot (NFPA 291 pitot formula) or its meter reading."""
    if outlet.get("kind") == "meter":
        r = readings.get(f"flow@{outlet['uid']}")
        return None if r is None else r.si_value
    r = readings.get(f"pitot@{outlet['uid']}")
    if r is None:
        return None
    coefficient = pitot.outlet_coefficient(outlet.get("shape", "smooth"))
    q = float(pitot.pitot_discharge(r.si_value, outlet["diameter"], coefficient))
    if outlet.get("pumper"):
        q *= float(pitot.pumper_factor(r.si_value))
    return q


def compute(header: dict, readings: dict, system: str = "us") -> Results:
    """Everything computable now from ``header`` (the test set-up) and ``readings`` (slot -> Reading)."""
    res = Results(target=header.get("target"))
    for g in header.get("gauges", []):
        s, r = readings.get(f"static@{g}"), readings.get(f"residual@{g}")
        if s is not None and r is not None:
            res.static, res.residual, res.gauge = s.si_value, r.si_value, g
            break
    else:
        gauges = header.get("gauges", [])
        if not gauges:
            res.missing.append("a gauge hydrant")
        for g in gauges[:1]:
            if f"static@{g}" not in readings:
                res.missing.append(f"static at {g}")
            if f"residual@{g}" not in readings:
                res.missing.append(f"residual at {g}")
    outlets = header.get("outlets", [])
    if not outlets:
        res.missing.append("a flow hydrant outlet")
    for o in outlets:
        q = outlet_flow(o, readings)
        if q is None:
            res.missing.append(f"{'flow' if o.get('kind') == 'meter' else 'pitot'} at {o['hydrant']} "
                               f"outlet {o['uid']}")
        else:
            res.outlet_flows[o["uid"]] = q
    if res.outlet_flows:
        res.flow = float(np.sum(list(res.outlet_flows.values())))  # flows add; pitots never average
    if res.missing or res.static is None:
        return res
    target = header.get("target") or rating.DEFAULT_TARGET
    res.target = target
    try:
        res.rated_flow = float(rating.rated_flow(res.flow, res.static, res.residual, target=target))
        hc = classes.hydrant_class(res.rated_flow if target == rating.DEFAULT_TARGET else
                                    rating.rated_flow(res.flow, res.static, res.residual))
        res.class_label, res.class_colour, res.class_note = hc.label, hc.colour, hc.note
        pitots = [readings[f"pitot@{o['uid']}"].si_value for o in outlets
                  if o.get("kind") != "meter"]
        res.findings = [(f.severity, f.code, f.message) for f in findings.check_test(
            res.static, res.residual, pitots=pitots, test_flow=res.flow, rated=res.rated_flow, system=system,
            **_extra_checks(header))]
        curve = rating.hydrant_curve(res.flow, res.static, res.residual, target=target)
        res.curve = tuple(np.asarray(a, dtype=float) for a in curve.line(n=40))
    except CalibError as exc:
        res.findings.append(("error", "not-computable", str(exc)))
    return res


def _extra_checks(header: dict) -> dict:
    gauges = header.get("gauges", [])
    flowing = {o["hydrant"] for o in header.get("outlets", [])}
    return {"residual_on_flowing": bool(gauges) and all(g in flowing for g in gauges)}
