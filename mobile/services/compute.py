"""Results of one test from its readings, through ``calib.flowtest`` (NFPA 291 arithmetic).

No formula lives here: this module only gathers the readings in force into a ``calib.flowtest``
``FlowTest`` and turns the ``FlowTestResult`` into what the screens show. The gauge used for the
rated flow is the first gauge hydrant that has both a static and a residual reading.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from calib import flowtest
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


def outlet_record(outlet: dict, readings: dict) -> flowtest.Outlet | None:
    """The ``calib.flowtest.Outlet`` of one set-up outlet, or None while its reading is missing."""
    if outlet.get("kind") == "meter":
        r = readings.get(f"flow@{outlet['uid']}")
        return None if r is None else flowtest.Outlet(flow=r.si_value, hydrant=outlet["hydrant"])
    r = readings.get(f"pitot@{outlet['uid']}")
    if r is None:
        return None
    return flowtest.Outlet(diameter=outlet["diameter"], shape=outlet.get("shape", "smooth"),
                           pitot=r.si_value, pumper=bool(outlet.get("pumper")),
                           hydrant=outlet["hydrant"])


def compute(header: dict, readings: dict, system: str = "us") -> Results:
    """Everything computable now from ``header`` (the test set-up) and ``readings`` (slot -> Reading)."""
    res = Results(target=header.get("target") or flowtest.DEFAULT_TARGET)
    gauges = header.get("gauges", [])
    for g in gauges:
        s, r = readings.get(f"static@{g}"), readings.get(f"residual@{g}")
        if s is not None and r is not None:
            res.static, res.residual, res.gauge = s.si_value, r.si_value, g
            break
    else:
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
    records = []
    try:
        for o in outlets:
            rec = outlet_record(o, readings)
            if rec is None:
                what = "meter flow" if o.get("kind") == "meter" else "pitot"
                res.missing.append(f"{what} at {o['hydrant']} ({o['uid']})")
            else:
                records.append(rec)
                res.outlet_flows[o["uid"]] = float(rec.discharge)
    except CalibError as exc:
        res.findings.append(("error", "not-computable", str(exc)))
        return res
    if res.outlet_flows:
        res.flow = float(flowtest.total_flow(list(res.outlet_flows.values())))
    if res.missing or res.static is None:
        return res
    flowing = {o["hydrant"] for o in outlets}
    height = (header.get("gauge_height") or {}).get("si", 0.0)
    try:
        end = readings.get(f"static_end@{res.gauge}")
        test = flowtest.FlowTest(res.static, res.residual, records, target=res.target,
                                 static_end=None if end is None else end.si_value,
                                 gauge_height=height, residual_on_flowing=res.gauge in flowing,
                                 label=header.get("test_id", ""))
        out = flowtest.evaluate(test, system=system)
    except CalibError as exc:
        res.findings.append(("error", "not-computable", str(exc)))
        return res
    res.findings = [(f.severity, f.code, f.message) for f in out.findings]
    if out.curve is None or not np.isfinite(out.rated_flow):
        return res
    res.rated_flow = float(out.rated_flow)
    # The class is defined at 20 psi residual whatever target the crew rates at (NFPA 291 marking).
    at20 = res.rated_flow if res.target == flowtest.DEFAULT_TARGET else float(
        flowtest.rated_flow(res.flow, res.static, res.residual))
    hc = flowtest.hydrant_class(at20)
    res.class_label, res.class_colour, res.class_note = hc.label, hc.colour, hc.note
    res.curve = tuple(np.asarray(a, dtype=float) for a in out.curve.line(n=40))
    return res
