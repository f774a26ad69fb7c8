"""``python -m calib check NETWORK TESTS --out check.csv``: judge each reading as the field app does.

Thin: read the network and the tests folder, build the starting state (``--fit`` folder's intervals,
else the ``--prior``), run ``calib.loop.check.check_tests`` (tests in the order taken, each judged with
only the tests before it), write check.csv and print what was assumed and what is suspect.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd

from calib import fileio, units

CAUTION = ("The check is an aid on site, not a verdict on the network: a suspect reading is worth a "
           "second look before leaving. Flowing hydrants: open and close slowly (water hammer), control "
           "traffic and the water's path, and tell the fire service while protection is reduced; local "
           "codes and the authority having jurisdiction govern.")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "check", help="judge each reading against what a plausible state of the network explains",
        description="Judge every reading of a tests folder, test by test in the order taken, against "
                    "a prediction interval (each group's C within its plausible range, the tests "
                    "before it, the tank level and the gauge's accuracy): ok or suspect, with why.",
        epilog=CAUTION)
    p.add_argument("network", metavar="NETWORK", help="network folder of CSV tables or a .geojson file")
    p.add_argument("tests", metavar="TESTS", help="folder with flows.csv, pressures.csv (boundary.csv, tests.csv)")
    p.add_argument("--out", required=True, metavar="check.csv", help="the verdicts to write")
    p.add_argument("--fit", default=None, metavar="FITDIR",
                   help="start from the last fit's C and intervals (its groups.csv)")
    p.add_argument("--prior", choices=("handbook", "none"), default="handbook",
                   help="plausible C where no fit is given (default handbook)")
    p.add_argument("--sigma", default="1 psi", metavar="P",
                   help="gauge accuracy where pressures.csv gives none (default 1 psi)")
    p.add_argument("--units", choices=("us", "si"), default="us", help="units of the outputs")
    p.set_defaults(func=run)


def verdict_frame(verdicts, system: str = "us") -> pd.DataFrame:
    """check.csv: ``test_id, node, kind, observed, predicted, low, high, verdict, reason``."""
    pu = units.display_unit("pressure", system)
    conv = lambda v: np.round(units.from_si(np.asarray(v, float), "pressure", pu), 2)  # noqa: E731
    return pd.DataFrame({
        "test_id": [v.test_id for v in verdicts], "node": [v.node for v in verdicts],
        "kind": [v.kind for v in verdicts],
        f"observed [{pu}]": conv([v.observed for v in verdicts]),
        f"predicted [{pu}]": conv([v.predicted for v in verdicts]),
        f"low [{pu}]": conv([v.low for v in verdicts]), f"high [{pu}]": conv([v.high for v in verdicts]),
        "verdict": [v.verdict for v in verdicts], "reason": [v.reason for v in verdicts]},
        columns=["test_id", "node", "kind", f"observed [{pu}]", f"predicted [{pu}]", f"low [{pu}]",
                 f"high [{pu}]", "verdict", "reason"])


def run(args) -> int:
    from calib.calibration import read_tests
    from calib.cli.fit import _sigma
    from calib.loop import check, closures
    from calib.loop.state import default_grouping, initial_state
    from calib.network.io import read_network

    sigma = _sigma(args.sigma)
    fileio.check_outputs({"--out": args.out},
                         fileio.input_files(*(p for p in (args.network, args.tests, args.fit) if p)))
    network = read_network(args.network)
    tests = read_tests(args.tests, network, sigma=sigma)
    grouping = default_grouping(network)
    state = initial_state(network, grouping, args.prior, args.fit, tests=tests)
    t0 = time.perf_counter()
    finder = closures.ClosureFinder(network, grouping)
    verdicts = check.check_tests(network, tests, state, grouping, closures=finder.best_for_check)
    elapsed = time.perf_counter() - t0
    path = fileio.write_csv(args.out, verdict_frame(verdicts, args.units), float_format=None)
    print(f"starting state: {state.source}")
    for note in state.notes:
        print(f"  {note}")
    print("assumed: " + "; ".join(check.assumptions()))
    bad = [v for v in verdicts if v.suspect]
    print(f"{len(verdicts)} readings of {len({v.test_id for v in verdicts})} tests judged in {elapsed:.1f} s: "
          f"{len(verdicts) - len(bad)} ok, {len(bad)} suspect")
    for v in bad:
        print(f"  {v.test_id} {v.node} {v.kind}: {v.reason}")
    print(f"wrote {path}")
    print(CAUTION)
    return 0
