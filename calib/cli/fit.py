"""``python -m calib fit NETWORK TESTS --out OUT``: calibrate group C-factors from a season of flow tests.

Thin: read the network (``calib.network.io``) and the tests folder (``calib.calibration.read_tests``),
fit (``calib.calibration.fit``), write the exports and the report into OUT, print a summary table.
Progress on stderr after every solver call: a tqdm bar on a terminal, one line per phase elsewhere. Bad input exits 2 with every problem
listed; a fit that cannot be carried out exits 1.
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

from calib.errors import InputError

# calib.units, calib.limits (pint) and calib.fileio are imported where used: ``fit --help`` loads
# the command line only

CAUTION = ("A calibrated model supports, never replaces, field verification and review by a licensed "
           "engineer; for fire-protection design follow local codes and the authority having "
           "jurisdiction. Flowing hydrants: open and close slowly, control traffic and the water's "
           "path, and notify the fire service.")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "fit", help="calibrate Hazen-Williams C-factors of pipe groups from flow tests",
        description="Fit one Hazen-Williams C per pipe group to the static and residual readings of "
                    "a folder of hydrant flow tests (bounded weighted least squares), with 95 %% "
                    "intervals, flagged readings, exports and an HTML report.", epilog=CAUTION)
    p.add_argument("network", metavar="NETWORK", help="network folder of CSV tables or a .geojson file")
    p.add_argument("tests", metavar="TESTS",
                   help="folder with flows.csv, pressures.csv (boundary.csv, tests.csv)")
    p.add_argument("--out", required=True, metavar="OUT", help="folder for the outputs")
    p.add_argument("--group-by", default=None, metavar="RULE",
                   help="group pipes by a rule: material, decade, diameter (e.g. material,decade or "
                        "diameter=8,12); default the group column of pipes.csv")
    p.add_argument("--prior", choices=("handbook", "none"), default="handbook",
                   help="regularizing prior on C by material and age (default handbook)")
    p.add_argument("--sigma", default=None, metavar="P",
                   help="gauge accuracy where pressures.csv gives none; a two-sided chi-square test "
                        "checks it. Default: not stated, the readings' scale comes from their scatter")
    p.add_argument("--units", choices=("us", "si"), default="us", help="units of the outputs")
    p.add_argument("--loss", choices=("linear", "soft_l1", "huber"), default="linear",
                   help="least-squares loss (default linear; robust losses damp outliers)")
    p.add_argument("--c-bounds", default="40,160", metavar="LO,HI",
                   help="plausible range of C (default 40,160)")
    p.add_argument("--demand-factor", action="store_true",
                   help="also fit a demand factor per test day")
    p.add_argument("--source-offsets", action="store_true",
                   help="also fit a grade offset per source per test where boundary.csv gives none")
    p.add_argument("--threshold", type=float, default=None,
                   help="flag readings whose standardized residual exceeds this fixed cut-off "
                        "(default: the Bonferroni cut-off of --flag-level over the readings)")
    # flags.FLAG_LEVEL, written out: importing calib.calibration here would load the numerics for
    # --help (tests/cli/test_fit.py checks that the two agree)
    p.add_argument("--flag-level", type=float, default=0.05, metavar="ALPHA",
                   help="family-wise level of the suspect-reading flag: with no gross error, the "
                        "chance that any reading is flagged (default 0.05; Bonferroni outlier test)")
    p.add_argument("--no-report", action="store_true", help="skip report.html")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)


#: Every file ``fit`` can write into OUT. A run replaces them all: a file of this list that the run
#: does not write (report.html with --no-report, parameters.csv, pipes.geojson) is removed, so no
#: file of an earlier run can pass for this run's (``calib.fileio.output_folder``).
OUTPUTS = ("groups.csv", "roughness.csv", "readings.csv", "parameters.csv", "covariance.csv",
           "pipes.geojson", "report.html")


def _bounds(text: str) -> tuple[float, float]:
    from calib import limits, units
    parts = [s.strip() for s in str(text).split(",")]
    try:
        lo, hi = (units.parse_number(parts[0]), units.parse_number(parts[1])) \
            if len(parts) == 2 else (math.nan, math.nan)
    except ValueError:
        lo = hi = math.nan
    c = limits.C_FACTOR
    if not (math.isfinite(lo) and math.isfinite(hi) and c.low <= lo < hi <= c.high):
        raise InputError(f"'{text}' is not a C range", field="--c-bounds",
                         expected=f"two numbers LO,HI with {c.low:g} <= LO < HI <= {c.high:g}, "
                         "e.g. 40,160")
    return lo, hi


def _sigma(text: str | None) -> float | None:
    from calib import limits, units
    if text is None:
        return None  # not stated: the fit takes the scale from the scatter
    try:
        value = units.to_si(text, "pressure", "psi")
    except ValueError as exc:
        raise InputError(str(exc), field="--sigma", expected="a pressure such as 1psi or 7kPa") from None
    if limits.SIGMA.refuses(value):
        raise InputError(f"'{text}' is not a plausible gauge accuracy", field="--sigma",
                         expected=limits.SIGMA.expected())
    return value


class ProgressBar:
    """Progress on stderr: a tqdm bar on a terminal, one line per phase elsewhere.

    ``__call__(n, stage)`` is the fit's progress callback (``n`` solver calls so far; ``stage`` the
    phase, with a detail after a colon, e.g. ``"leave-one-out: T04 J316"``). On a terminal a ``tqdm``
    bar counts the solves (redrawn at most ten times a second), its total an estimate that grows when
    the fit needs more, the phase beside it. Off a terminal (CI, a log file, a pipe) redraws would pile
    up into one long line, so each phase is written once, when it ends: ``fit: 96 solves, 0.2 s``.
    ``tty`` overrides the stream's own ``isatty()``.
    """

    def __init__(self, stream=None, width: int = 28, expected: int = 400, tty: bool | None = None):
        self.stream = stream or sys.stderr
        self.width, self.expected = width, max(expected, 1)
        if tty is None:
            isatty = getattr(self.stream, "isatty", None)
            tty = bool(isatty()) if callable(isatty) else False
        self.tty = tty
        self._bar = None
        self._stage = None
        # off a terminal: the phase in progress, its first solve count, start time and details
        self._phase, self._phase_n0, self._phase_t0, self._details, self._n = None, 0, 0.0, [], 0

    def __call__(self, n: int, stage: str) -> None:
        if self.tty:
            self._draw(n, stage)
        else:
            self._log(n, stage)

    def stage(self, stage: str) -> None:
        """A phase of work without the fit's solves (e.g. the report's, which run beside the fit)."""
        self(self._bar.n if self._bar is not None else self._n, stage)

    def _draw(self, n: int, stage: str) -> None:
        from tqdm import tqdm

        if self._bar is None:
            self._bar = tqdm(total=self.expected, file=self.stream, unit=" solves", mininterval=0.1,
                             ncols=100, leave=True,
                             bar_format="{percentage:3.0f}%|{bar}| {n_fmt} solves {elapsed}  {desc}")
        if n > self._bar.total:
            self._bar.total = int(n * 1.15)  # the fit needed more solves than estimated
        if stage != self._stage:
            self._stage = stage
            self._bar.set_description_str(stage[:40], refresh=False)
        self._bar.update(n - self._bar.n)

    def _log(self, n: int, stage: str) -> None:
        phase, _, detail = str(stage).partition(":")
        phase, detail = phase.strip(), detail.strip()
        if phase != self._phase:
            self._end_phase()
            # the solve that announced the new phase belongs to it
            self._phase, self._phase_n0, self._phase_t0 = phase, self._n, time.perf_counter()
            self._details = []
        if detail and detail not in self._details:
            self._details.append(detail)
        self._n = n

    def _end_phase(self) -> None:
        if self._phase is None:
            return
        what = self._phase
        if len(self._details) > 1:
            # sorted: the leave-one-out refits of two processes report in either order
            what += f" ({len(self._details)} readings: {', '.join(sorted(self._details))})"
        elif self._details:
            what += f" {self._details[0]}"
        solves = f"{self._n - self._phase_n0} solves, " if self._n > self._phase_n0 else ""
        self.stream.write(f"{what}: {solves}{time.perf_counter() - self._phase_t0:.1f} s\n")
        self.stream.flush()
        self._phase = None

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()  # leaves the bar on its line and ends it
            self._bar = None
        if not self.tty:
            self._end_phase()
        self.stream.flush()


def scale_words(result, system: str = "us") -> str:
    """One phrase: which scale the intervals use and why (stated sigma, or the readings' scatter)."""
    import numpy as np

    from calib import units

    est = result.estimate
    pu = units.display_unit("pressure", system)
    sig = float(np.median(result.tests.sigma[est.used])) if est.used.any() else units.PSI
    s = units.from_si(math.sqrt(est.s2) * sig, "pressure", pu)
    if not est.sigma_stated:
        if not est.scaled:
            return "no gauge accuracy stated and no degrees of freedom left: nominal 1 psi used"
        return (f"no gauge accuracy stated: scale from the readings' scatter, s = {s:.2f} {pu} "
                f"(t quantile {est.t:.2f})")
    if est.scaled:
        return (f"stated gauge sigma rejected by a two-sided chi-square test (p = {est.chi2_p:.2g}): "
                f"scale from the scatter, s = {s:.2f} {pu}")
    return f"stated gauge sigma holds (two-sided chi-square p = {est.chi2_p:.2g})"


def summary(result, system: str = "us") -> str:
    """The table printed at the end: groups, C, interval, pipes, status; then suspect, then influential readings.

    A group the tests do not determine shows no C (a dash), what the tests do say (a one-sided limit
    or none) and the model's C that the exports keep.
    """
    from calib import units

    w = max(5, max(len(n) for n in result.grouping.names))
    lines = [f"{'group':<{w}s} {'C':>6s} {'95% interval':>15s} {'pipes':>6s}  status"]
    model_c = result.grouping.length_weighted(result.network, result.network.roughness)
    n_pipes = result.grouping.n_pipes()
    for g, name in enumerate(result.grouping.names):
        lo, hi = result.c_low[g], result.c_high[g]
        lo_open, hi_open = bool(result.c_low_open[g]), bool(result.c_high_open[g])
        if result.c_determined[g]:
            c_text = f"{result.c[g]:6.1f}"
            # an end on a C bound is no limit: say the one side the fit bounds
            interval = (f"at least {lo:.1f}" if hi_open else f"at most {hi:.1f}" if lo_open
                        else f"{lo:6.1f}-{hi:6.1f}")
            note = result.status[g]
            if result.prior is not None:
                note += f" ({result.informed[g]:.0%} from the tests)"
            if result.c_method[g] != "linearized":
                note += ", profile-likelihood interval"
        else:
            c_text = "-"
            interval = ("no limit" if lo_open and hi_open else f"at most {hi:.0f}" if lo_open
                        else f"at least {lo:.0f}" if hi_open else f"({lo:.0f}-{hi:.0f})")
            note = "undetermined"
            if result.c_at_bound[g] and not (lo_open and hi_open):
                note += f", fit goes to the bound {result.c[g]:.0f}"
            note += f"; model C {model_c[g]:.0f} kept"
        lines.append(f"{name:<{w}s} {c_text:>6s} {interval:>15s} {int(n_pipes[g]):6d}  {note}")
    pu = units.display_unit("pressure", system)
    rmse = units.from_si(result.rmse, "pressure", pu)
    lines.append(f"RMSE of pressures {rmse:.2f} {pu} over {int(result.estimate.used.sum())} readings; "
                 + scale_words(result, system))
    t, net = result.tests, result.network
    flagged = [(i, f) for i, f in enumerate(result.flag) if f]
    rule = result.options.get("flag_rule")
    if rule:
        lines.append(f"suspect-reading flag: {rule}")
    if flagged:
        lines.append("suspect readings (flag):")
        for i, f in flagged:
            lines.append(f"  {t.test_ids[t.test[i]]} {net.node_ids[t.node[i]]} {t.kind[i]}: {f}")
    else:
        lines.append("no suspect readings")
    leaning = [(i, f) for i, f in enumerate(getattr(result, "influence", []) or []) if f]
    if leaning:
        lines.append("influential readings (the fit leans on them; not suspect, keep them):")
        for i, f in leaning:
            lines.append(f"  {t.test_ids[t.test[i]]} {net.node_ids[t.node[i]]} {t.kind[i]}: {f}")
    return "\n".join(lines)


def run(args) -> int:
    worker = None
    if not args.no_report:
        # first thing: a process that loads matplotlib while this one loads the fit's numerics,
        # makes the figures' canvases and draws them later, beside the fit
        from calib.figure_worker import FigureWorker
        worker = FigureWorker.start()
    try:
        return _checked(args, worker)
    finally:
        if worker is not None:
            worker.close()


def _checked(args, worker) -> int:
    from calib import fileio
    c_bounds = _bounds(args.c_bounds)
    sigma = _sigma(args.sigma)
    if args.threshold is not None and not (math.isfinite(args.threshold) and args.threshold > 0):
        raise InputError(f"{args.threshold} is not a positive threshold", field="--threshold",
                         expected="about 3 standardized units")
    if not (math.isfinite(args.flag_level) and 0.0 < args.flag_level < 1.0):
        raise InputError(f"{args.flag_level} is not a family-wise level", field="--flag-level",
                         expected="a level between 0 and 1, e.g. 0.05")
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        # checked before the fit, not after minutes of solving
        raise InputError(f"'{out}' is a file, not a folder", field="--out",
                         expected="a folder for the outputs (created when missing)")
    fileio.check_outputs({"--out": [out / name for name in OUTPUTS]},
                         fileio.input_files(args.network, args.tests))
    return _run(args, out, c_bounds, sigma, worker)


def _run(args, out, c_bounds, sigma, worker) -> int:
    from calib import fileio
    from calib.calibration import export, fit, read_tests
    from calib.network.io import read_network

    network = read_network(args.network)
    tests = read_tests(args.tests, network, sigma=sigma)
    if worker is not None:
        from calib.calibration.report import announce
        announce(worker, tests)
    # about 100 solves a test on the demo day (fit, refits, interval checks, leave-one-out)
    bar = None if args.quiet else ProgressBar(expected=100 * tests.n_tests)
    report_parts, report_solves = [], []

    def solve_report(fitted):
        # the fitted C are final: the report's curves and fire-flow rows are solved by the fit
        # beside its interval checks and leave-one-out refits, each curve drawn as it comes
        from calib.calibration.report import Solves
        report_solves.append(Solves(fitted, args.units, worker=worker))
        return report_solves[-1].jobs

    def prepare_report(result):
        # the fit is final but for its leave-one-out notes: hand the figures to the worker now, so
        # that it draws them beside those refits instead of after the fit
        from calib.calibration.report import prepare
        report_parts.append(prepare(result, args.units, worker=worker,
                                    solves=report_solves[0] if report_solves else None))

    def readings_figures(readings):
        # the readings' figures are final before the interval checks: drawn beside them
        from calib.calibration.report import submit_readings
        submit_readings(worker, readings, args.units)

    try:
        result = fit(network, tests, group_by=args.group_by, prior=args.prior, c_bounds=c_bounds,
                     loss=args.loss, demand_factor=args.demand_factor,
                     source_offsets=args.source_offsets, threshold=args.threshold,
                     flag_level=args.flag_level, progress=bar,
                     on_result=None if args.no_report else prepare_report,
                     on_fitted=None if args.no_report else solve_report,
                     on_readings=None if worker is None else readings_figures)
    finally:
        if bar is not None:
            bar.close()
    with fileio.output_folder(out, OUTPUTS) as stage:  # all or none, no stale file of ours
        paths = export.write_outputs(result, stage, args.units)
        if not args.no_report:
            from calib.calibration.report import write_report
            paths.append(write_report(result, stage, args.units, worker=worker,
                                      parts=report_parts[0] if report_parts else None))
    paths = [out / Path(p).name for p in paths]
    print(summary(result, args.units))
    print("wrote " + ", ".join(str(p) for p in paths))
    print(CAUTION)
    return 0
