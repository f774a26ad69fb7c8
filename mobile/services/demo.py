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


#: A few invented tests: (crew, weather, gauge index, flow indexes, static, residual, pitots [psi]).
DEMO_TESTS = (
    ("R. Okafor, J. Lindqvist", "dry, 18 C", 0, (1,), "72", "58", ("22",)),
    ("R. Okafor, J. Lindqvist", "dry, 20 C", 4, (5,), "68", "49.5", ("19",)),
    ("M. Haddad, P. Szabo", "light rain", 6, (7, 3), "70.5", "44", ("17", "18.5")),
)


def log_demo_tests(service, area: Area) -> list[str]:
    """Enter the demo tests through the service (as a crew would) and finish them."""
    made = []
    hydrants = area.hydrants
    for crew, weather, gauge, flows, static, residual, pitots in DEMO_TESTS:
        if len(hydrants) <= max((gauge,) + flows):
            break
        tid = service.new_test(crew=crew, area=area.name)
        service.set_field(tid, "weather", weather)
        for key in service.checklist_keys():
            service.tick(tid, key, True)
        service.set_gauges(tid, [hydrants[gauge]])
        for k, f in enumerate(flows):
            service.add_outlet(tid, hydrants[f], diameter_text="2.5", shape="smooth")
        service.enter(tid, f"static@{hydrants[gauge]}", static)
        service.enter(tid, f"residual@{hydrants[gauge]}", residual)
        for outlet, pitot in zip(service.outlets(tid), pitots):
            service.enter(tid, f"pitot@{outlet['uid']}", pitot)
        service.finish(tid)
        made.append(tid)
    return made
