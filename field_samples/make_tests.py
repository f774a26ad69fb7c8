"""Generate a day of hydrant flow tests for Tallowmere, the project's fictional demo town.

    python field_samples/make_tests.py

writes ``field_samples/tallowmere/tests/{tests,flows,pressures,boundary}.csv`` and ``truth.json``.
Deterministic (two seeded generators: the tank levels, the gauge noise). Everything is invented: the
town, the crews, the readings.

How the tests are planned: with ``calib plan`` itself (``calib.loop.plan.Planner``, one
implementation of planning), as the office would plan the day - at the office model's knowledge, not
the demo truth: the handbook prior for the year of the tests (``handbook_state``), the greedy
D-optimal design (Bush and Uber 1998; Atkinson, Donev and Tobias 2007) of ``N_TESTS`` tests over every
hydrant of the town, one flowing hydrant or two neighbouring ones, standard outlets, gauges that drop
4 psi or more (10 psi preferred, Walski), no hydrant in two tests. The margin above NFPA 291's 20 psi
is ``MARGIN_PSI`` = 10 psi, not the command's default 5: the handbook's cast iron (C 64.5 in 2026)
is smoother than the demo truth of the 1930s mains (58), and with 5 psi two planned tests would take a
junction of the true town below 20 psi (seen when this generator was switched to the planner). The generator
checks the plan against the truth and stops if any limit breaks there: every junction at 20 psi or
more, each pitot 10-30 psi. Where the true street has less pressure at a flowing hydrant than the model
promised, its outlets give less: the pitot is read lower (0.5 psi steps) until it stays 5 psi below
that hydrant's residual, and the test's notes say it flowed less than planned.

How the readings are made: the demo network (``field_samples/tallowmere/network``, by
``make_network.py``; not changed here, with its low zone Mereside behind two reducing-valve
stations) is given "true" C-factors per group that differ from the office model's guesses (aged
unlined cast iron much lower); each planned test is solved with the true C for the static (normal
demand) and residual (plus the test's flows) snapshots at the tank level of that hour (drawn from
``SEED``); hose outlets are read by pitot to 0.5 psi and the flows follow from the reading (NFPA 291
formula), a flow meter is read to 10 gpm; gauge readings get 1 psi of noise and are rounded as a gauge
is read (0.5 psi). One reading is planted wrong (``PLANTED``: +8 psi on T13's first residual) for the
flags to find; truth.json lists it. Where it is planted is a demo choice, made openly: on the first test
of a group (e.g. T05, the day's first on CI-1930s) the on-site check cannot call +8 psi suspect, since
the handbook's wide spread of C explains it; on T13, after T05 has narrowed the CI-1930s C, it can (seen
when this generator was switched to the planner: planted on T07, T09, T10 or T12 the check let it pass,
on T13 or T14 it called it suspect). The tank levels and the noise have separate seeds. The noise
seed is a demo choice, made openly (``NOISE_SEED = 1``, the first seed tried on this plan; the coverage of the intervals over many draws is
checked on synthetic networks in ``tests/calibration``, not here).

Flowing hydrants in a real town: open and close them slowly (water hammer), mind traffic, the path
of the water and discoloured water, and tell the fire service while protection is reduced. The
authority having jurisdiction and the water utility's own procedures govern.
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
from calib.calibration import make_groups  # noqa: E402
from calib.flowtest.pitot import pitot_discharge  # noqa: E402
from calib.hydraulics import Snapshot  # noqa: E402
from calib.loop.plan import HOSE_C, HOSE_IN, PITOT, PITOT_MARGIN_PSI, Planner, hose_flow_gpm  # noqa: E402
from calib.loop.state import handbook_state  # noqa: E402
from calib.network.io import read_network  # noqa: E402

SEED = 2026_0514  # the tank level of each hour
NOISE_SEED = 1  # see the module docstring: a demo draw, chosen openly
NETWORK = HERE / "tallowmere" / "network"
OUT = HERE / "tallowmere" / "tests"
YEAR = 2026.0  # the tests' year (ages the handbook's cast iron)
N_TESTS = 14
MARGIN_PSI = 10.0  # above NFPA 291's 20 psi during a test (see the module docstring)
#: The demo truth: C per group (the office model guesses CI 100, DI 130, PVC 150).
TRUE_C = {"CI-1930s": 58.0, "CI-1950s": 72.0, "CI-1960s": 84.0, "DI": 126.0, "PVC": 145.0}
SIGMA_PSI = 1.0
GAUGE_HEIGHT_FT = 2.0  # outlet cap above the node elevation
PUMPER_IN = 4.5  # the pumper (steamer) outlet, used with a flow meter for the larger flows
PLANTED = ("T13", "residual", 8.0)  # test, kind, error [psi] on its first gauge (see the module docstring)
CREWS = ("Ines Oakhurst, Tobias Wren", "Marta Feldgrave, Juno Pell")


def _outlets(t, net):
    """One planned test's outlets as the crew reads them: [(node, pitot psi or nan, flow m3/s, d in)].

    Hose outlets: the pitot that gives the planned share, read to 0.5 psi (rounded down, so the test
    stays within the planned flow), and the flow from that
    reading (NFPA 291 pitot formula); a pumper outlet: the flow meter read to 10 gpm.
    """
    out = []
    text = t.outlets.lower()
    n_hose = 0 if "pumper" in text else (2 if "two 2.5 in" in text else 1)
    for node, share in zip(t.flow_nodes, t.flow_split):
        i = net.node_index[node]
        if n_hose:
            pitot = np.floor((share / units.GPM / hose_flow_gpm(1.0, n_hose)) ** 2 * 2) / 2  # never above the plan
            q = float(pitot_discharge(pitot * units.PSI, HOSE_IN * units.INCH, HOSE_C))
            out += [(i, pitot, q, HOSE_IN)] * n_hose
        else:
            out.append((i, np.nan, round(share / units.GPM / 10.0) * 10.0 * units.GPM, PUMPER_IN))
    return out


def main() -> None:
    rng = np.random.default_rng(SEED)  # the tank levels
    noise = np.random.default_rng(NOISE_SEED)  # the gauges: a plan change leaves the noise alone
    net = read_network(NETWORK)
    grouping = make_groups(net)
    office = handbook_state(net, grouping, YEAR)
    planner = Planner(net, grouping, office.mean, margin_psi=MARGIN_PSI)
    plan = planner.plan(N_TESTS, office.cov, "D")
    if len(plan.tests) < N_TESTS:
        raise SystemExit(f"the plan found only {len(plan.tests)} tests: " + "; ".join(plan.notes))
    true_c = net.roughness.copy()
    for g, c in TRUE_C.items():
        true_c[net.group == g] = c
    solver = planner.solver
    nj = net.n_junctions
    gh = GAUGE_HEIGHT_FT * units.FT * units.GAMMA_WATER  # [Pa] the gauge sits above the node
    tests, flows_rows, pressure_rows, boundary_rows, plan_rows = [], [], [], [], []
    truth_flows = {}
    planted_node = None
    for t, planned in enumerate(plan.tests, start=1):
        tid = f"T{t:02d}"
        tank_ft = float(rng.uniform(988.0, 997.0))
        heads = {"PLANT": 1004.0 * units.FT, "HILLTANK": tank_ft * units.FT}
        outlets = _outlets(planned, net)
        static = solver.solve(Snapshot(source_head=heads), roughness=true_c).pressure
        less = ""
        while True:
            flows = {}
            for node, _p, q, _d in outlets:
                flows[str(net.node_ids[node])] = flows.get(str(net.node_ids[node]), 0.0) + q
            residual = solver.solve(Snapshot(source_head=heads, extra_demand=flows), roughness=true_c).pressure
            # the hose streams of the true town: a pitot cannot come near its hydrant's residual, so
            # where the office model promised more pressure than the street has, the outlets give less
            # (the pitot 0.5 psi lower until it keeps PITOT_MARGIN_PSI below the residual, as read)
            high = [o for o in outlets if o[1] == o[1] and o[1] > residual[o[0]] / units.PSI - PITOT_MARGIN_PSI]
            if not high:
                break
            outlets = [(n, p - 0.5, float(pitot_discharge((p - 0.5) * units.PSI, d * units.INCH, HOSE_C)), d)
                       if any(h[0] == n for h in high) else (n, p, q, d) for n, p, q, d in outlets]
            less = f"; the outlets gave less than the planned {planned.flow / units.GPM:.0f} gpm"
        # the plan was made on the office model: the true town must keep the limits too
        low = residual[:nj].min() / units.PSI
        if low < 20.0:
            raise SystemExit(f"{tid} ({planned.test_id}): the true town falls to {low:.1f} psi; "
                             "raise MARGIN_PSI")
        for node, p_psi, _q, _d in outlets:
            if p_psi == p_psi and not PITOT[0] <= p_psi <= PITOT[1]:
                raise SystemExit(f"{tid}: pitot {p_psi} psi at {net.node_ids[node]} leaves NFPA 291's 10-30 psi")
        truth_flows[tid] = {k: v / units.GPM for k, v in flows.items()}
        start = f"2026-05-14T{8 + (t - 1) * 40 // 60:02d}:{(t - 1) * 40 % 60:02d}"
        total_gpm = sum(flows.values()) / units.GPM
        pitot_form = np.isfinite(outlets[0][1])
        how = (f"{len(flows)} hydrant(s), {len(outlets)} x {HOSE_IN:g} in outlets read by pitot"
               if pitot_form else
               f"{len(flows)} hydrant(s), {PUMPER_IN:g} in pumper outlet(s) through a flow meter")
        zone = {str(net.zone[n]) for n, *_ in outlets}
        where = " in Mereside, behind the reducing-valve stations" if zone == {"mereside"} else ""
        tests.append({"test_id": tid, "date": start, "crew": CREWS[(t - 1) % 2],
                      "notes": f"planned {planned.test_id} (calib plan, D-optimal), aimed at the "
                               f"{planned.aimed_at} mains{where}; {how}, about {total_gpm:.0f} gpm{less}; "
                               "dechlorinating diffusers used"})
        for node, p_psi, q, _d in outlets:
            row = {"test_id": tid, "node": str(net.node_ids[node])}
            if pitot_form:
                row.update({"flow [gpm]": "", "pitot [psi]": p_psi, "outlet_diameter [in]": HOSE_IN,
                            "coefficient": HOSE_C})
            else:
                row.update({"flow [gpm]": round(q / units.GPM, 1), "pitot [psi]": "",
                            "outlet_diameter [in]": "", "coefficient": ""})
            flows_rows.append(row)
        for k, gid in enumerate(planned.gauge_nodes):
            g = net.node_index[gid]
            readings = {}
            for kind, p in (("static", static[g]), ("residual", residual[g])):
                value = (p - gh) / units.PSI + noise.normal(0.0, SIGMA_PSI)
                if (tid, kind) == PLANTED[:2] and k == 0:
                    value += PLANTED[2]
                    planted_node = gid
                readings[kind] = round(value * 2) / 2
            pressure_rows.append({"test_id": tid, "node": gid,
                                  "static [psi]": readings["static"],
                                  "residual [psi]": readings["residual"],
                                  "gauge_height [ft]": GAUGE_HEIGHT_FT})
            plan_rows.append(f"{tid} {planned.aimed_at:<9s} flow {total_gpm:6.0f} gpm at "
                             f"{','.join(flows):<10s} gauge {gid}: drop "
                             f"{(static[g] - residual[g]) / units.PSI:5.1f} psi (planned "
                             f"{planned.expected_drop[k] / units.PSI:5.1f}), residual "
                             f"{(residual[g] - gh) / units.PSI:5.1f} psi; town minimum {low:5.1f} psi")
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
             "flows_gpm": truth_flows,
             "plan": {"by": "calib.loop.plan (D-optimal greedy), handbook prior for 2026",
                      "margin_psi": MARGIN_PSI, "notes": plan.notes}}
    fileio.write_text(OUT / "truth.json", json.dumps(truth, indent=1) + "\n")
    print("\n".join(plan.notes + plan_rows))
    print(f"wrote {len(tests)} tests, {len(pressure_rows)} gauges to {OUT}")


if __name__ == "__main__":
    main()
