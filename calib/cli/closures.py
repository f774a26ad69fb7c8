"""``python -m calib closures NETWORK TESTS --test ID``: pipes whose closing best explains one test.

Thin: read the network and tests, bring the state up to the test (``--fit`` or ``--prior``, then the
running fit of the tests taken before it, as ``check`` does), rank pipes with
``calib.loop.closures.ClosureFinder`` and write closures.csv (``rank, pipe, from, to, misfit_before,
misfit_after, note, day_misfit_before, day_misfit_after``; misfits are weighted sums of squares of the
test's readings, sigma = the gauge's stated accuracy; the day's columns add the other tests of the same
day, on which the ranking stands).
"""

from __future__ import annotations

import time

import pandas as pd

from calib import fileio
from calib.errors import InputError

CAUTION = ("A ranked pipe is a place to look, not a finding: confirm a closed valve in the street "
           "(valve records, a valve key, a crew) before changing the model. Operating valves affects "
           "service and fire protection; follow the utility's procedures.")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "closures", help="rank the pipes whose closing (or throttling) best explains a test",
        description="Rank the pipes whose closing or throttling would best explain one test's "
                    "readings: screened with the analytic sensitivities, the best confirmed by exact "
                    "solves.", epilog=CAUTION)
    p.add_argument("network", metavar="NETWORK", help="network folder of CSV tables or a .geojson file")
    p.add_argument("tests", metavar="TESTS", help="folder with flows.csv, pressures.csv (boundary.csv, tests.csv)")
    p.add_argument("--test", required=True, metavar="ID", help="the test to explain")
    p.add_argument("--out", default=None, metavar="closures.csv", help="write the ranking here")
    p.add_argument("--fit", default=None, metavar="FITDIR", help="start from the last fit's C (groups.csv)")
    p.add_argument("--prior", choices=("handbook", "none"), default="handbook",
                   help="C where no fit is given (default handbook)")
    p.add_argument("--sigma", default="1 psi", metavar="P",
                   help="gauge accuracy where pressures.csv gives none (default 1 psi)")
    p.add_argument("--top", type=int, default=10, help="rows to keep (default 10)")
    p.add_argument("--alone", dest="day", action="store_false",
                   help="score a closure on this test's readings only (default: also on the other "
                        "tests of the same day, for which the valve was shut too)")
    p.set_defaults(func=run)


COLUMNS = ["rank", "pipe", "from", "to", "misfit_before", "misfit_after", "note", "day_misfit_before",
           "day_misfit_after"]


def closure_frame(ranked) -> pd.DataFrame:
    return pd.DataFrame([{"rank": i + 1, "pipe": c.pipe_id, "from": c.start, "to": c.end,
                          "misfit_before": round(c.misfit_before, 2), "misfit_after": round(c.misfit_after, 2),
                          "note": c.note, "day_misfit_before": round(c.day_before, 2),
                          "day_misfit_after": round(c.day_after, 2)} for i, c in enumerate(ranked)],
                        columns=COLUMNS)


def run(args) -> int:
    from calib.calibration import read_tests
    from calib.cli.fit import _sigma
    from calib.loop.check import SequentialCheck
    from calib.loop.closures import SETTING_PENALTY, TIE, ClosureFinder
    from calib.loop.linear import split_tests
    from calib.loop.state import default_grouping, initial_state
    from calib.network.io import read_network

    if not 1 <= args.top <= 1000:
        raise InputError(f"--top {args.top} is out of range", field="--top", expected="1 to 1000")
    if args.out:
        fileio.check_outputs({"--out": args.out},
                             fileio.input_files(*(p for p in (args.network, args.tests, args.fit) if p)))
    network = read_network(args.network)
    tests = read_tests(args.tests, network, sigma=_sigma(args.sigma))
    ordered = split_tests(tests)
    ids = [t.test_id for t in ordered]
    if args.test not in ids:
        raise InputError(f"test '{args.test}' is not in {args.tests}", field="--test",
                         expected="one of " + ", ".join(ids[:20]) + (" ..." if len(ids) > 20 else ""))
    grouping = default_grouping(network)
    t0 = time.perf_counter()
    checker = SequentialCheck(network, grouping, initial_state(network, grouping, args.prior, args.fit,
                                                               tests=tests))
    for t in ordered[: ids.index(args.test)]:
        checker.judge(t)  # the running fit of the tests taken before it
    test = ordered[ids.index(args.test)]
    m, P = checker.prior(test)
    finder = ClosureFinder(network, grouping, linearizer=checker.lin)
    # a valve shut in the street is shut for the whole day: the day's other tests score it too
    others = [t for t in ordered if t is not test and t.date[:10] == test.date[:10]] if args.day else []
    ranked = finder.rank(test, m, top=args.top, others=others, cov=P)
    elapsed = time.perf_counter() - t0
    frame = closure_frame(ranked)
    names = ", ".join(f"{n} {c:.0f}" for n, c in zip(grouping.names, m[: len(grouping.names)]))
    print(f"test {args.test}: C by group {names} (from {checker.state.source} and the tests before it)")
    before, day_before = finder.last_before
    n_day = len(test.node) + sum(len(t.node) for t in others)
    print(f"misfit with every pipe open {before:.1f} over {len(test.node)} readings (weighted sum of "
          f"squares with the C's uncertainty; about {len(test.node)} when the model explains them)")
    print(f"ranked by the misfit over this test and {len(others)} other test(s) of the same day "
          f"({n_day} readings; open {day_before:.1f}), plus {SETTING_PENALTY:g} for a partly closed "
          "setting (one fitted unknown, Akaike 1974)" if others else
          f"ranked by this test's misfit alone, plus {SETTING_PENALTY:g} for a partly closed setting "
          "(one fitted unknown, Akaike 1974)")
    if ranked:
        print(frame.to_string(index=False))
    else:
        print(f"no pipe's closing lowers this test's misfit by more than {TIE:g} (the chi-square 95 % "
              "point on 1 degree of freedom): a closed valve does not explain it; look at the readings")
    print(f"ranked in {elapsed:.1f} s")
    if args.out:
        print(f"wrote {fileio.write_csv(args.out, frame, float_format=None)}")
    print(CAUTION)
    return 0
