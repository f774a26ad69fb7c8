"""``calib fit`` with its report at one and two workers, against a reference tree (run by hand).

    python benchmarks/parallel.py [--base /tmp/main_base] [--repeats 3] [--cases demo,grid] [--default]

Runs, interleaved in each repeat so that all see the same load: the base tree (as it is), this
tree with ``CALIB_WORKERS=1`` (serial) and this tree with ``CALIB_WORKERS=2`` (two workers even
below ``calib.parallel.MIN_PIPES``), and with ``--default`` this tree without the variable. Prints per case the
median wall and CPU time (the command with its children: the report's figure worker and the fit's
worker processes) and the median of each phase line the command writes off a terminal
(``interval checks ...: 651 solves, 9.0 s``), with the solve counts, and the load average before
and after. The grid is ``benchmarks/cli_fit.py``'s (written once to a temporary folder, or
``--grid FOLDER`` holding network/ and tests/).
"""

from __future__ import annotations

import argparse
import os
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parents[1]
PHASE = re.compile(r"^([a-z][^:]*?)(?: \([^)]*\))?: (?:(\d+) solves, )?([\d.]+) s$")


def run_once(code: Path, workers: str | None, network: Path, tests: Path, out: Path):
    env = dict(os.environ, PYTHONPATH=str(code))
    env.pop("CALIB_WORKERS", None)
    if workers is not None:
        env["CALIB_WORKERS"] = workers
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "calib", "fit", str(network), str(tests), "--out",
                           str(out)], env=env, cwd=str(code), capture_output=True, text=True)
    elapsed = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        raise SystemExit(f"{code}: exited {done.returncode}:\n{done.stderr}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    phases = {}
    for line in done.stderr.splitlines():
        m = PHASE.match(line.strip())
        if m:
            phases[m.group(1)] = (int(m.group(2) or 0), float(m.group(3)))
    return elapsed, cpu, phases


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--base", default="/tmp/main_base")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--cases", default="demo,grid")
    ap.add_argument("--grid", default=None)
    ap.add_argument("--default", action="store_true", help="also this tree without CALIB_WORKERS")
    args = ap.parse_args(argv)
    tmp = Path(tempfile.mkdtemp(prefix="calib-parallel-"))
    try:
        return _run(args, tmp)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)  # the outputs and the written grid


def _run(args, tmp: Path) -> int:
    cases = {}
    if "demo" in args.cases:
        demo = HERE / "field_samples" / "tallowmere"
        cases["demo"] = (demo / "network", demo / "tests")
    if "grid" in args.cases:
        if args.grid:
            cases["grid"] = (Path(args.grid) / "network", Path(args.grid) / "tests")
        else:
            sys.path.insert(0, str(HERE / "benchmarks"))
            from cli_fit import write_grid_case
            cases["grid"] = write_grid_case(tmp / "grid")
    variants = [("base", Path(args.base), None), ("this, 1 worker", HERE, "1"),
                ("this, 2 workers", HERE, "2")]
    if args.default:  # what a user gets: the cores decide, small networks stay serial
        variants.append(("this, default", HERE, None))
    print("load before:", os.getloadavg())
    for case, (network, tests) in cases.items():
        seen = {name: [] for name, _c, _w in variants}
        for r in range(args.repeats):
            for name, code, workers in variants:
                seen[name].append(run_once(code, workers, network, tests, tmp / f"{case}-{r}"))
        print(f"\n{case}: median of {args.repeats}")
        for name, runs in seen.items():
            wall = statistics.median(x[0] for x in runs)
            cpu = statistics.median(x[1] for x in runs)
            print(f"  {name:16s} wall {wall:6.2f} s  CPU {cpu:6.2f} s  "
                  f"(walls {', '.join(f'{x[0]:.2f}' for x in runs)})")
            for phase in runs[0][2]:
                vals = [x[2].get(phase, (0, float('nan'))) for x in runs]
                print(f"      {phase[:48]:48s} {vals[0][0]:5d} solves "
                      f"{statistics.median(v[1] for v in vals):6.2f} s")
    print("\nload after:", os.getloadavg())
    return 0


if __name__ == "__main__":
    sys.exit(main())
