"""Generate a day of hydrant flow tests for Tallowmere, the project's fictional demo town.

    python field_samples/make_tests.py

writes ``field_samples/tallowmere/tests/{tests,flows,pressures,boundary}.csv`` and ``truth.json``.
Deterministic (one seeded generator). Everything is invented: the town, the crews, the readings.

How the readings are made: the demo network (``field_samples/tallowmere/network``, by
``make_network.py``) is given "true" C-factors per group that differ from the office model's guesses
(aged unlined cast iron much lower); ten tests are laid out with one or two flowing hydrants and two
gauge hydrants nearby; each is solved with the true C for the static (normal demand) and residual
(plus the test's flows) snapshots at the tank level of that hour; readings get 1 psi of gauge noise
and are rounded as a gauge is read (0.5 psi). Flows are given in pitot form (2.5 in outlets,
c 0.90, pitot rounded to 0.5 psi and the flow taken from the rounded pitot) for some tests and as
flow-meter readings for the others. One reading is planted wrong by +8 psi for the flags to find.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from calib import fileio, units  # noqa: E402
from calib.calibration.predict import predict_test  # noqa: E402
from calib.flowtest.pitot import pitot_discharge  # noqa: E402
from calib.network.io import read_network  # noqa: E402

SEED = 2026_0514
NETWORK = HERE / "tallowmere" / "network"
OUT = HERE / "tallowmere" / "tests"
#: The demo truth: C per group (the office model guesses CI 100, DI 130, PVC 150).
TRUE_C = {"CI-1930s": 58.0, "CI-1950s": 72.0, "CI-1960s": 84.0, "DI": 126.0, "PVC": 145.0}
N_TESTS = 10
SIGMA_PSI = 1.0
GAUGE_HEIGHT_FT = 2.0  # outlet cap above the node elevation
OUTLET_IN, OUTLET_C = 2.5, 0.90
PLANTED = ("T07", "residual", 8.0)  # test, kind, error [psi] on its first gauge
CREWS = ("Ines Oakhurst, Tobias Wren", "Marta Feldgrave, Juno Pell")


def _neighbours(net, node, count, exclude):
    """The ``count`` hydrants nearest to ``node`` (map distance), not in ``exclude``."""
    hyd = np.flatnonzero(net.hydrant)
    d = np.hypot(net.x[hyd] - net.x[node], net.y[hyd] - net.y[node])
    order = [int(h) for h in hyd[np.argsort(d)] if int(h) not in exclude and h != node]
    return order[:count]


def _group_of_node(net, node):
    pipes = np.flatnonzero((net.pipe_from == node) | (net.pipe_to == node))
    return str(net.group[pipes[0]]) if len(pipes) else ""


def main() -> None:
    rng = np.random.default_rng(SEED)
    net = read_network(NETWORK)
    true_c = net.roughness.copy()
    for g, c in TRUE_C.items():
        true_c[net.group == g] = c
    # one test per group first, then the rest at random; hydrants far enough from the plant main
    hyd = np.flatnonzero(net.hydrant)
    by_group: dict[str, list[int]] = {}
    for h in hyd:
        by_group.setdefault(_group_of_node(net, h), []).append(int(h))
    order = list(TRUE_C) + list(rng.choice(list(TRUE_C), size=N_TESTS - len(TRUE_C)))
    used: set[int] = set()
    tests, flows_rows, pressure_rows, boundary_rows = [], [], [], []
    truth_flows = {}
    planted_node = None
    t = 0
    for group in order:
        for _ in range(80):  # draw until a test with a useful drop and safe residual is found
            cand = [h for h in by_group.get(group, []) if h not in used]
            if not cand:
                break
            flow_nodes = [int(rng.choice(cand))]
            two = t == 2  # the third test (in the weakly loaded CI-1960s area) flows two hydrants
            if two:
                flow_nodes += _neighbours(net, flow_nodes[0], 1, used | set(flow_nodes))
            near = _neighbours(net, flow_nodes[0], 5, used | set(flow_nodes))
            total_gpm = rng.uniform(1000.0, 1500.0) if not two else 2 * rng.uniform(1100.0, 1400.0)
            tank_ft = float(rng.uniform(988.0, 997.0))
            heads = {"PLANT": 1004.0 * units.FT, "HILLTANK": tank_ft * units.FT}
            pitot_form = t % 2 == 0
            outlets = []  # (node, pitot psi or nan, flow m3/s)
            for node in flow_nodes:
                q_node = total_gpm / len(flow_nodes)
                n_out = 1 if q_node <= 880.0 else 2  # keep pitot readings within about 10-30 psi
                for _k in range(n_out):
                    q_out = q_node / n_out
                    if pitot_form:
                        p_psi = (q_out / (29.83 * OUTLET_C * OUTLET_IN ** 2)) ** 2
                        p_psi = round(p_psi * 2) / 2
                        q = float(pitot_discharge(p_psi * units.PSI, OUTLET_IN * units.INCH, OUTLET_C))
                        outlets.append((node, p_psi, q))
                    else:
                        q_gpm = round(q_out / 10) * 10
                        outlets.append((node, np.nan, q_gpm * units.GPM))
            flows = {}
            for node, _p, q in outlets:
                flows[str(net.node_ids[node])] = flows.get(str(net.node_ids[node]), 0.0) + q
            pred = predict_test(net, flows, [str(net.node_ids[g]) for g in near], roughness=true_c,
                                source_head=heads)
            # the two nearby hydrants that see the largest drop become the gauges
            # (drops rounded to 0.01 psi, ties to the nearer: stable against solver round-off)
            best = np.argsort([-round((r.static - r.residual) / units.PSI, 2) for r in pred],
                              kind="stable")[:2]
            gauges = [near[i] for i in sorted(best)]
            pred = [pred[i] for i in sorted(best)]
            gh = GAUGE_HEIGHT_FT * units.FT * units.GAMMA_WATER
            res_psi = [(r.residual - gh) / units.PSI for r in pred]
            drop_psi = [(r.static - r.residual) / units.PSI for r in pred]
            if min(res_psi) >= 25.0 and max(drop_psi) >= 3.0:
                break
        else:
            raise SystemExit(f"no usable test found in group {group}")
        t += 1
        tid = f"T{t:02d}"
        used |= set(flow_nodes) | set(gauges)
        truth_flows[tid] = {k: v / units.GPM for k, v in flows.items()}
        start = f"2026-05-14T{8 + (t - 1) // 2:02d}:{30 * ((t - 1) % 2):02d}"
        tests.append({"test_id": tid, "date": start, "crew": CREWS[(t - 1) % 2],
                      "notes": ("two hydrants flowing" if len(flow_nodes) > 1 else
                                "pitot on 2.5 in outlet(s)" if pitot_form else "flow meter on hose")
                      + "; dechlorinating diffuser used"})
        for node, p_psi, q in outlets:
            row = {"test_id": tid, "node": str(net.node_ids[node])}
            if pitot_form:
                row.update({"flow [gpm]": "", "pitot [psi]": p_psi, "outlet_diameter [in]": OUTLET_IN,
                            "coefficient": OUTLET_C})
            else:
                row.update({"flow [gpm]": round(q / units.GPM, 1), "pitot [psi]": "",
                            "outlet_diameter [in]": "", "coefficient": ""})
            flows_rows.append(row)
        for k, (g, r) in enumerate(zip(gauges, pred)):
            readings = {}
            for kind, p in (("static", r.static), ("residual", r.residual)):
                value = (p - gh) / units.PSI + rng.normal(0.0, SIGMA_PSI)
                if (tid, kind) == PLANTED[:2] and k == 0:
                    value += PLANTED[2]
                    planted_node = str(net.node_ids[g])
                readings[kind] = round(value * 2) / 2
            pressure_rows.append({"test_id": tid, "node": str(net.node_ids[g]),
                                  "static [psi]": readings["static"],
                                  "residual [psi]": readings["residual"],
                                  "gauge_height [ft]": GAUGE_HEIGHT_FT})
        boundary_rows += [{"test_id": tid, "source": "PLANT", "head [ft]": 1004.0},
                          {"test_id": tid, "source": "HILLTANK", "head [ft]": round(tank_ft, 1)}]

    OUT.mkdir(parents=True, exist_ok=True)
    fileio.write_csv(OUT / "tests.csv", pd.DataFrame(tests))
    fileio.write_csv(OUT / "flows.csv", pd.DataFrame(flows_rows))
    fileio.write_csv(OUT / "pressures.csv", pd.DataFrame(pressure_rows))
    fileio.write_csv(OUT / "boundary.csv", pd.DataFrame(boundary_rows))
    truth = {"note": "demo truth used to generate the readings (fictional)", "c_factor": TRUE_C,
             "sigma_psi": SIGMA_PSI, "planted": {"test_id": PLANTED[0], "kind": PLANTED[1],
                                                 "node": planted_node, "error_psi": PLANTED[2]},
             "flows_gpm": truth_flows}
    fileio.write_text(OUT / "truth.json", json.dumps(truth, indent=1) + "\n")
    print(f"wrote {len(tests)} tests, {len(pressure_rows)} gauges to {OUT}")


if __name__ == "__main__":
    main()
