"""``python -m calib plan NETWORK --tests N --out plan.csv``: propose the next flow tests.

Thin: read the network, build the state (``--fit`` folder's C and intervals, else the ``--prior``),
run the greedy D- or A-optimal design of ``calib.loop.plan`` (Bush and Uber 1998; Atkinson, Donev and
Tobias 2007), write plan.csv and plan.geojson (same name, .geojson) and print the groups' sd before
and after.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import time
from pathlib import Path

from calib import fileio, units
from calib.errors import InputError

CAUTION = ("A plan is a proposal: check each test on site before flowing. Flowing hydrants: open and "
           "close slowly (water hammer), control traffic and the water's path (flooding, discoloured "
           "water), and tell the fire service while protection is reduced; local codes, the authority "
           "having jurisdiction and the utility's procedures govern.")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "plan", help="propose the next flow tests (greedy D- or A-optimal design)",
        description="Propose N flow tests that most reduce the uncertainty of the groups' C (greedy "
                    "D- or A-optimal design from the analytic Jacobian) under the limits of NFPA 291 "
                    "(20 psi plus a margin at every junction), standard outlets and distinct hydrants; "
                    "a test flows one hydrant or two neighbouring ones sharing the flow.",
        epilog=CAUTION)
    p.add_argument("network", metavar="NETWORK", help="network folder of CSV tables or a .geojson file")
    p.add_argument("--tests", required=True, type=int, metavar="N", help="number of tests to plan")
    p.add_argument("--out", required=True, metavar="plan.csv", help="the plan (plan.geojson beside it)")
    p.add_argument("--fit", default=None, metavar="FITDIR", help="start from the last fit's C and intervals")
    p.add_argument("--prior", choices=("handbook", "none"), default="handbook",
                   help="C and spread where no fit is given (default handbook)")
    p.add_argument("--criterion", choices=("D", "A"), default="D",
                   help="D: most information (log det); A: least summed variance (default D)")
    p.add_argument("--margin", default="5 psi", metavar="P",
                   help="kept above 20 psi at every junction during a test (default 5 psi)")
    p.add_argument("--sigma", default="1 psi", metavar="P", help="gauge accuracy (default 1 psi)")
    p.add_argument("--year", type=float, default=None, help="year of the tests, to age cast iron (default this year)")
    p.add_argument("--units", choices=("us", "si"), default="us", help="units of the outputs")
    p.set_defaults(func=run)


def run(args) -> int:
    from calib.cli.fit import _sigma
    from calib.loop.plan import Planner, plan_frame, plan_geojson
    from calib.loop.state import default_grouping, initial_state
    from calib.network.io import read_network

    if not 1 <= args.tests <= 200:
        raise InputError(f"--tests {args.tests} is out of range", field="--tests", expected="1 to 200")
    try:
        margin = units.to_si(args.margin, "pressure", "psi")
    except ValueError as exc:
        raise InputError(str(exc), field="--margin", expected="a pressure such as 5psi") from None
    if not (math.isfinite(margin) and 0 <= margin <= 50 * units.PSI):
        raise InputError(f"'{args.margin}' is not a plausible margin", field="--margin", expected="0 to 50 psi")
    out = Path(args.out)
    fileio.check_outputs({"--out": [out, out.with_suffix(".geojson")]},
                         fileio.input_files(*(p for p in (args.network, args.fit) if p)))
    network = read_network(args.network)
    grouping = default_grouping(network)
    year = args.year or float(_dt.date.today().year)
    state = initial_state(network, grouping, args.prior, args.fit, year=year)
    t0 = time.perf_counter()
    planner = Planner(network, grouping, state.mean, sigma=_sigma(args.sigma), margin_psi=margin / units.PSI)
    plan = planner.plan(args.tests, state.cov, args.criterion)
    elapsed = time.perf_counter() - t0
    frame = plan_frame(plan, args.units)
    path = fileio.write_csv(out, frame, float_format=None)
    gpath = fileio.write_text(out.with_suffix(".geojson"), json.dumps(plan_geojson(plan, network, args.units),
                                                                       indent=1))
    print(f"starting state: {state.source}")
    for note in state.notes + plan.notes:
        print(f"  {note}")
    print(f"{plan.criterion}-optimal greedy design, {len(plan.tests)} tests, {elapsed:.1f} s")
    print(frame.to_string(index=False))
    print("sd of C by group, before -> after the plan: " + ", ".join(
        f"{n} {a:.1f} -> {b:.1f}" for n, a, b in zip(plan.group_names, plan.sd_prior, plan.sd_after)))
    print(f"wrote {path}, {gpath}")
    print(CAUTION)
    return 0
