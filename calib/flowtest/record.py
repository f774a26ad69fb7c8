"""One hydrant flow test as a record (``Outlet``, ``FlowTest``) and its evaluation (``evaluate``).

``evaluate`` never raises for a reading that is merely doubtful: it returns the numbers it can work
out and the findings. It raises ``FlowTestError`` only for input it cannot read at all (junk text, a
length where a pressure is needed, an outlet with neither a pitot reading nor a flow).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from calib.flowtest._edge import fail, si
from calib.flowtest.classes import HydrantClass, hydrant_class
from calib.flowtest.findings import SEVERITIES, Finding, check_test, fmt_pressure
from calib.flowtest.pitot import outlet_coefficient, pitot_discharge, pumper_factor
from calib.flowtest.rating import DEFAULT_TARGET, HydrantCurve, hydraulic_grade, rated_flow
from calib.units import DISPLAY, from_si


@dataclass
class Outlet:
    """One flowing outlet, SI after construction (strings / Quantities are converted).

    Either ``pitot`` [Pa gauge] with ``diameter`` [m] (and ``coefficient``, or ``shape`` giving it via
    NFPA 291's outlet figure), or ``flow`` [m3/s] read directly (a flow meter, or a diffuser with its
    own coefficient): a measured flow is taken as it is. ``pumper=True`` applies the extra factor for
    a pumper outlet read without a flow tube (``pitot.pumper_factor``). ``hydrant`` names the hydrant
    the outlet belongs to when several hydrants flow.
    """

    diameter: float | None = None
    coefficient: float | None = None
    shape: str = "smooth"
    pitot: float | None = None
    flow: float | None = None
    pumper: bool = False
    hydrant: str = ""

    def __post_init__(self):
        if self.flow is not None:
            self.flow = si(self.flow, "flow", "flow")
            if not math.isfinite(self.flow) or self.flow < 0:
                fail("flow", "a measured flow must be zero or more", "a flow such as 500 - 1500 gpm")
        if self.pitot is not None:
            self.pitot = si(self.pitot, "pressure", "pitot")
        if self.diameter is not None:
            self.diameter = si(self.diameter, "diameter", "outlet diameter")
        if self.flow is None:
            if self.pitot is None:
                fail("pitot", "an outlet needs a pitot reading or a measured flow")
            if self.diameter is None:
                fail("outlet diameter", "an outlet read by pitot needs its inside diameter",
                     "1.5 - 6 in, usually 2.5 in (hose) or 4 - 4.5 in (pumper)")
            if self.coefficient is None:
                self.coefficient = outlet_coefficient(self.shape)
            try:
                self.coefficient = float(self.coefficient)
            except (TypeError, ValueError):
                fail("coefficient", f"outlet coefficient {self.coefficient!r} is not a number",
                     "0.5 - 1.0, usually 0.70 - 0.90 (NFPA 291 outlet figure)")

    @property
    def factor(self) -> float:
        """Pumper-outlet factor applied (1.0 for other outlets or a measured flow)."""
        if self.flow is not None or not self.pumper:
            return 1.0
        return float(pumper_factor(self.pitot))

    @property
    def discharge(self) -> float:
        """Discharge of this outlet [m3/s]: the measured flow, or the pitot formula (NFPA 291)."""
        if self.flow is not None:
            return self.flow
        return self.factor * pitot_discharge(self.pitot, self.diameter, self.coefficient)


@dataclass
class FlowTest:
    """A flow test: pressures at the residual hydrant and the flowing outlets (of one or more hydrants).

    ``static`` / ``residual`` / ``target`` / ``static_end`` are gauge pressures [Pa] (strings or
    Quantities are converted); ``elevation`` [m] of the residual hydrant's node and ``gauge_height``
    [m] of the gauge above it give hydraulic grades; ``residual_on_flowing`` marks a residual read on
    the flowing hydrant itself.
    """

    static: float
    residual: float
    outlets: list[Outlet]
    target: float = DEFAULT_TARGET
    static_end: float | None = None
    elevation: float | None = None
    gauge_height: float = 0.0
    residual_on_flowing: bool = False
    label: str = ""

    def __post_init__(self):
        self.static = si(self.static, "pressure", "static")
        self.residual = si(self.residual, "pressure", "residual")
        self.target = si(self.target, "pressure", "target")
        if self.static_end is not None:
            self.static_end = si(self.static_end, "pressure", "static at end")
        if self.elevation is not None:
            self.elevation = si(self.elevation, "elevation", "elevation")
        self.gauge_height = si(self.gauge_height, "length", "gauge height")
        self.outlets = list(self.outlets)
        if not self.outlets:
            fail("outlets", "a flow test needs at least one flowing outlet")
        if not all(isinstance(o, Outlet) for o in self.outlets):
            fail("outlets", "outlets must be Outlet records")


@dataclass
class FlowTestResult:
    """What a flow test gives, SI: ``flow`` total [m3/s], ``rated_flow`` at the target [m3/s] (nan when
    it cannot be worked out), ``hydrant_class`` (None then), ``findings``, ``curve`` (None then)."""

    flow: float
    rated_flow: float
    hydrant_class: HydrantClass | None
    findings: list[Finding]
    curve: HydrantCurve | None
    outlet_flows: list[float] = field(default_factory=list)
    test: FlowTest | None = None
    static_grade: float | None = None
    residual_grade: float | None = None
    #: Flow at 20 psi residual [m3/s], the flow NFPA 291 classes by (equals ``rated_flow`` at the
    #: default target; 0 when the static is not above 20 psi).
    rated_flow_20psi: float = math.nan

    @property
    def drop(self) -> float:
        """Pressure drop static - residual [Pa]."""
        return self.test.static - self.test.residual

    @property
    def drop_fraction(self) -> float:
        """Drop as a fraction of the static [-] (nan for a static of zero or less)."""
        return self.drop / self.test.static if self.test.static > 0 else math.nan

    @property
    def worst(self) -> str | None:
        """Highest severity among the findings, or None when there are none."""
        return max((f.severity for f in self.findings), key=SEVERITIES.index, default=None)

    def to_dict(self, system: str = "us") -> dict:
        """Plain dict with numbers in the ``us`` or ``si`` display units (for JSON and the app)."""
        units = {k: DISPLAY[system][k] for k in ("pressure", "flow", "diameter", "head")}

        def p(v):
            return None if v is None else float(from_si(v, "pressure", units["pressure"]))

        def q(v):
            return None if v is None or not math.isfinite(v) else float(from_si(v, "flow", units["flow"]))

        t = self.test
        outlets = []
        for o, flow in zip(t.outlets, self.outlet_flows):
            outlets.append({
                "hydrant": o.hydrant, "pitot": p(o.pitot),
                "diameter": None if o.diameter is None else float(from_si(o.diameter, "diameter", units["diameter"])),
                "coefficient": o.coefficient if o.flow is None else None,
                "pumper_factor": o.factor, "measured": o.flow is not None, "flow": q(flow)})
        cls = self.hydrant_class
        return {
            "units": units,
            "static": p(t.static), "residual": p(t.residual), "target": p(t.target),
            "static_end": p(t.static_end),
            "drop": p(self.drop), "drop_percent": 100.0 * self.drop_fraction if math.isfinite(self.drop_fraction) else None,
            "outlets": outlets, "flow": q(self.flow), "rated_flow": q(self.rated_flow),
            "rated_flow_20psi": q(self.rated_flow_20psi),
            "hydrant_class": None if cls is None else {
                "label": cls.label, "standard": cls.standard, "colour": cls.colour,
                "lower_gpm": cls.lower_gpm, "upper_gpm": None if math.isinf(cls.upper_gpm) else cls.upper_gpm,
                "note": cls.note},
            "curve": None if self.curve is None else {
                "flow": [q(v) for v in self.curve.flows], "pressure": [p(v) for v in self.curve.pressures]},
            "static_grade": None if self.static_grade is None else float(from_si(self.static_grade, "head", units["head"])),
            "residual_grade": None if self.residual_grade is None else float(from_si(self.residual_grade, "head", units["head"])),
            "findings": [{"code": f.code, "severity": f.severity, "message": f.message, "source": f.source}
                         for f in self.findings],
        }


def evaluate(test: FlowTest, system: str = "us") -> FlowTestResult:
    """Discharge, rated flow (NFPA 291 0.54 formula), NFPA 291 class, curve and findings of a test.

    Flows of all outlets and hydrants are summed (never the pitots averaged). Finding messages use
    the ``us`` (psi) or ``si`` (kPa) units. The rated flow is nan and the class None when the readings
    cannot give one (residual at or above the static, a negative pressure, target at or above static).
    """
    if system not in DISPLAY:
        fail("units", f"units must be 'us' or 'si', not '{system}'")
    flows = [o.discharge for o in test.outlets]
    total = float(sum(flows))
    ps, pr, pt = test.static, test.residual, test.target
    ratable = 0 <= pr < ps and 0 <= pt < ps
    rated = float(rated_flow(total, ps, pr, pt)) if ratable else math.nan
    pitots = [o.pitot for o in test.outlets if o.flow is None]
    extrapolated = ratable and pt < pr
    findings = check_test(ps, pr, pitots, total, rated if extrapolated else None, test.static_end,
                          system, test.residual_on_flowing)
    if pt >= ps and 0 <= pr < ps:
        findings.append(Finding("target-above-static", "error",
                                f"The target residual ({fmt_pressure(pt, system)}) is at or above the static "
                                f"({fmt_pressure(ps, system)}): no rated flow exists. Choose a lower target."))
    elif pt < 0:
        findings.append(Finding("negative-target", "error",
                                f"The target residual ({fmt_pressure(pt, system)}) is below zero. "
                                "Use 20 psi unless your authority asks for another."))
    # NFPA 291 classes are defined by the flow at 20 psi residual, whatever target the user rates at.
    at20 = math.nan
    if ratable:
        at20 = rated if pt == DEFAULT_TARGET else (
            float(rated_flow(total, ps, pr, DEFAULT_TARGET)) if ps > DEFAULT_TARGET else 0.0)
    grades = (None, None)
    if test.elevation is not None:
        grades = tuple(float(hydraulic_grade(v, test.elevation, test.gauge_height)) for v in (ps, pr))
    return FlowTestResult(
        flow=total, rated_flow=rated, hydrant_class=hydrant_class(at20) if ratable else None,
        findings=findings, curve=HydrantCurve(ps, total, pr, rated, pt) if ratable else None,
        outlet_flows=flows, test=test, static_grade=grades[0], residual_grade=grades[1],
        rated_flow_20psi=at20)
