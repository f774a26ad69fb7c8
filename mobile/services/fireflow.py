"""The model's fire-flow expectation for one hydrant, for the field app (plain Python, no Kivy).

Before the crew flows a hydrant it can see what the (calibrated) model expects: static pressure, the
flow available at the target residual, where the system limits it, and the interval when a fit's
folder is loaded. The numbers are those of ``python -m calib fireflow`` for the same hydrant (the
same ``calib.fireflow`` scan); here they are only put into the crew's units and words. Call it from
a worker thread (``background.run_in_background``) on a large network.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from calib.errors import CalibError
from calib.fireflow import FireFlowScan, ScanOptions
from calib.fireflow.fitdir import read_fit
from calib.units import PSI

from mobile.services import values

CAUTION = ("Model estimate before the flow test: it does not replace the test, local codes, the "
           "authority having jurisdiction or a licensed engineer.")


@dataclass
class FireFlowView:
    ok: bool
    message: str  # one line for the screen: the figure or what went wrong
    lines: list = field(default_factory=list)  # label, value pairs in the crew's units
    flow: object = None  # calib.fireflow.HydrantFlow when ok


def hydrant_fire_flow(network, node: str, fit_folder=None, residual: float = 20 * PSI,
                      system_minimum: float = 20 * PSI, demand_factor: float = 1.0,
                      system: str = "us") -> FireFlowView:
    """The fire-flow figures of hydrant ``node`` [SI inputs], ready to show."""
    if network is None:
        return FireFlowView(False, "Load the area's network first.")
    try:
        fit = read_fit(fit_folder, None, network)
        scan = FireFlowScan(network, roughness=fit.roughness, covariance=fit.covariance,
                            options=ScanOptions(residual=residual, system_minimum=system_minimum,
                                                demand_factor=demand_factor,
                                                # one hydrant: every figure, the system flow too
                                                system_search="always"))
        f = scan.hydrant(node)
    except CalibError as exc:
        return FireFlowView(False, f"No fire-flow estimate for {node}: {exc}")
    q = lambda v: values.fmt(v, "flow", system)  # noqa: E731
    interval = f"{q(f.low)} - {q(f.high)} (95 %)" if f.low == f.low else "no interval"
    limit = ("its own residual" if f.available == f.flow_at_residual
             else f"{f.limiting_node} reaching the system minimum")
    lines = [("Static", values.fmt(f.static, "pressure", system)),
             (f"Flow at {values.fmt(residual, 'pressure', system)} residual", q(f.flow_at_residual)),
             ("Flow at the system minimum", q(f.flow_system) + (f" ({f.limiting_node})"
                                                               if f.limiting_node else "")),
             ("Available", q(f.available)), ("Interval", interval), ("Limited by", limit),
             ("NFPA 291 class", f.hydrant_class or "-"), ("C-factors", fit.note)]
    if f.note:
        lines.append(("Note", f.note))
    return FireFlowView(True, f"{node}: about {q(f.available)} available ({interval}). {CAUTION}",
                        lines, f)
