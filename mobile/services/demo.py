"""Demo data for ``--demo`` and ``--snapshot``: the fictional town of Tallowmere and a few tests.

Everything here is invented (no real town, utility or person). The network is the one the office
package ships in ``field_samples/tallowmere/network`` when it is there; otherwise a small built-in
grid stands in so the app can be shown on its own.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from calib import units
from calib.network import Network

from mobile.services.area import Area

REPO = Path(__file__).resolve().parents[2]
TALLOWMERE = REPO / "field_samples" / "tallowmere" / "network"


def builtin_network() -> Network:
    """A 4 x 3 grid of junctions (8 in mains, 6 in cross streets) fed by one reservoir (invented)."""
    rows, cols = 3, 4
    ids = [f"TM-{100 + 10 * r + c + 1}" for r in range(rows) for c in range(cols)]
    n = len(ids)
    rng = np.random.default_rng(7)
    elevation = 30.0 + rng.uniform(-4.0, 6.0, n)  # [m]
    xs = np.array([c * 250.0 for r in range(rows) for c in range(cols)])
    ys = np.array([r * 220.0 for r in range(rows) for c in range(cols)])
    pf, pt, dia, rough = [], [], [], []
    for r in range(rows):
        for c in range(cols):
            i = r * cols + c
            if c + 1 < cols:
                pf.append(i), pt.append(i + 1), dia.append(8 * units.INCH), rough.append(110.0)
            if r + 1 < rows:
                pf.append(i), pt.append(i + cols), dia.append(6 * units.INCH), rough.append(95.0)
    pf.append(n), pt.append(0), dia.append(12 * units.INCH), rough.append(120.0)  # reservoir main
    p = len(pf)
    return Network(
        node_ids=ids + ["TM-RES"], n_junctions=n,
        elevation=np.append(elevation, 82.0), demand=np.full(n, 2.0e-3),
        source_head=np.array([82.0]),  # [m] about 70 psi over the grid
        pipe_ids=[f"TM-P{k + 1:02d}" for k in range(p)], pipe_from=pf, pipe_to=pt,
        length=np.full(p, 240.0), diameter=np.array(dia), roughness=np.array(rough),
        hydrant=np.ones(n, dtype=bool), x=np.append(xs, -300.0), y=np.append(ys, 0.0),
        name="Tallowmere (built-in sample)")


def demo_area() -> Area:
    """The Tallowmere network from field_samples when present and readable, else the built-in grid."""
    if TALLOWMERE.exists():
        try:
            return Area.load(TALLOWMERE)
        except Exception:  # noqa: BLE001 - the demo must open even if the sample is mid-edit
            pass
    return Area.from_network(builtin_network(), name="Tallowmere", source="built-in")


#: A few invented tests: (crew, weather, gauge hydrant in Tallowmere, gauge index elsewhere, number of
#: flow hydrants, pitots [psi], static and residual [psi] when the model cannot give them, residual
#: offset planted [psi]). The Tallowmere gauges sit where two hose outlets drop the pressure most.
DEMO_TESTS = (
    ("R. Okafor, J. Lindqvist", "dry, 18 C", "J316", 0, 2, ("20", "18"), "72", "58", 0.0),
    ("R. Okafor, J. Lindqvist", "dry, 20 C", "J326", 4, 2, ("21", "19"), "68", "49.5", 0.0),
    ("M. Haddad, P. Szabo", "light rain", "J284", 8, 2, ("17", "18.5"), "70.5", "44", -9.0),
)


def _nearest(area: Area, gauge: str, k: int) -> list[str]:
    """The ``k`` hydrants nearest to ``gauge`` on the map (the next ones in the list without x/y)."""
    net, ids = area.network, area.hydrants
    others = [h for h in ids if h != gauge]
    if net is None:
        return others[:k]
    idx = net.nodes([gauge] + others)
    x, y = net.x[idx], net.y[idx]
    if not np.all(np.isfinite(x)) or not np.all(np.isfinite(y)):
        return others[:k]
    d = np.hypot(x[1:] - x[0], y[1:] - y[0])
    return [others[i] for i in np.argsort(d)[:k]]


def _model_pressures(area: Area, gauge: str, flows: dict, offset_psi: float):
    """Static and residual [psi text] the model predicts at ``gauge``, read as a gauge does (0.5 psi)."""
    if area.network is None:
        return None
    try:
        from calib.calibration import predict_test

        p = predict_test(area.network, flows=flows, gauges=[gauge])[0]
    except Exception:  # noqa: BLE001 - the demo falls back to fixed readings
        return None
    static, residual = p.static / units.PSI, p.residual / units.PSI + offset_psi
    if not (20.0 < residual < static - 1.0):
        return None
    r = lambda v: f"{round(v * 2) / 2:g}"  # noqa: E731
    return r(static), r(residual)


def log_demo_tests(service, area: Area) -> list[str]:
    """Enter the demo tests through the service (as a crew would) and finish them.

    Readings come from the area's model where it can simulate the test (one reading planted off by
    9 psi so that the on-site check has something to find), else from the fixed values above.
    """
    from calib.flowtest import pitot_discharge

    made = []
    hydrants = area.hydrants
    for crew, weather, gauge_id, gauge_i, n_flow, pitots, static, residual, offset in DEMO_TESTS:
        if gauge_id in hydrants:
            gauge = gauge_id
        elif len(hydrants) > max(gauge_i, n_flow):
            gauge = hydrants[gauge_i]
        else:
            break
        flowing = _nearest(area, gauge, n_flow)
        flows = {h: float(pitot_discharge(float(p) * units.PSI, 2.5 * units.INCH, 0.90))
                 for h, p in zip(flowing, pitots)}
        static, residual = _model_pressures(area, gauge, flows, offset) or (static, residual)
        tid = service.new_test(crew=crew, area=area.name)
        service.set_field(tid, "weather", weather)
        service.set_field(tid, "notes", "Demo test (invented). Tank about 3/4 full, one pump running.")
        for key in service.checklist_keys():
            service.tick(tid, key, True)
        service.set_gauges(tid, [gauge])
        for h in flowing:
            service.add_outlet(tid, h, diameter_text="2.5 in", shape="smooth")
        # Typed with their units, so the demo is the same whichever units the settings show.
        service.enter(tid, f"static@{gauge}", f"{static} psi")
        service.enter(tid, f"residual@{gauge}", f"{residual} psi")
        for outlet, pitot in zip(service.outlets(tid), pitots):
            service.enter(tid, f"pitot@{outlet['uid']}", f"{pitot} psi")
        service.finish(tid)
        made.append(tid)
    return made
