"""The calibration fit: bounded weighted least squares, honest intervals, flags, fit statistics.

Method (published names kept):
- Bounded nonlinear weighted least squares, weights 1/sigma per reading: the Gauss-Newton model with
  a structured secant estimate of the residuals' curvature (Dennis, Gay and Welsch 1981, NL2SOL;
  ``secant.py``), or ``scipy.optimize.least_squares`` (trust-region reflective) with an optional
  robust loss (``soft_l1``, ``huber``); C bounded (40-160 by default). Weighted least squares
  over several loadings after Lansey and Basnet (1991), J. Water Resour. Plann. Manage. 117(1).
- Intervals, the variance factor and undetermined parameters: ``estimate.py``.
- A gross error must not drag the others: readings flagged by the face checks are left out from the
  start; then one reading at a time whose standardized residual exceeds the threshold (of the three
  largest, the one whose refit fits the rest best, when that removes a gross misfit) is left out and the
  fit repeated; both fits are reported and the last is the result.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
from scipy import optimize

from calib import parallel, units
from calib.calibration import criteria as _criteria
from calib.calibration import flags as _flags
from calib.calibration import zones
from calib.calibration.groups import Grouping, make_groups
from calib.calibration.priors import GroupPrior, group_prior
from calib.calibration.estimate import (LSQ_TOL, PROFILE, Estimate, estimate, interval_job,
                                        refine_intervals)
from calib.calibration.problem import CalibrationProblem
from calib.calibration.tasks import closing_pools, problem_job, run_jobs
from calib.errors import CalibrationError, InputError

LOSSES = ("linear", "soft_l1", "huber", "cauchy")
#: Solver tolerances of the fit's own solver. The fit reads heads and their sensitivities, not
#: flows, so the solve stops on what is left of the heads' error: after a Newton step the mass
#: balance holds (to the mass tolerance) and the heads' remaining error is what the energy
#: residual drives (S dH = -A21 D^-1 F1); on the 7,938-pipe grid fit's 1,029 solves at most 7
#: times the largest residual, so an energy residual of 1e-6 m keeps the heads well inside 0.1 mm
#: (``head_tol``). The last head step is left out of the rule (``head_step=False``; kept where
#: control valves are): it lags one iteration behind the error, and the first iterate's heads are
#: always far from the start, so it alone made every warm solve take two steps or more. The flow
#: step is only a guard (1e-3 of the largest flow; the former 1e-6 asked for one more iteration in
#: about 4 solves of 10). Measured against solves at 1e-9 m (benchmarks/README.md, "B3"): heads
#: within 5e-6 m (was 1.4e-9; the readings' sigma is 0.35 m or more), the grid fit's Newton
#: iterations 3.00 -> 2.05 a solve; groups.csv and readings.csv unchanged on the demo town and
#: the grid, the full-precision C within 2e-8 relative.
FIT_TOLERANCES = dict(head_tol=1e-4, flow_tol=1e-3, energy_tol=1e-6, head_step=False)


class _GroupC:
    """The fitted C per group of a fit's ``params``, ``estimate``, ``grouping`` and ``network``
    (``FitResult``, ``FittedModel``)."""

    @property
    def c(self) -> np.ndarray:
        """Fitted C per group."""
        return self.estimate.x[self.c_cols]

    @cached_property
    def c_cols(self) -> np.ndarray:
        """Columns of the group C-factors among the parameters (built once; ``params`` is fixed)."""
        return np.array([i for i, p in enumerate(self.params) if p.kind == "c"], dtype=np.int64)

    def roughness(self) -> np.ndarray:
        """Per-pipe C of the fit as solved (pipes in no group keep the model's)."""
        return self.grouping.per_pipe(self.c, self.network.roughness)


@dataclass
class FitResult(_GroupC):
    """Everything the exports, the report and the command line show."""

    network: object
    tests: object
    grouping: Grouping
    prior: GroupPrior | None
    params: list
    estimate: Estimate  # the result (without the gross errors)
    first: Estimate | None  # the fit with every reading that passed the face checks, when a refit was made
    corr: np.ndarray
    move_together: list  # (name_i, name_j, r)
    informed: np.ndarray  # per group: share of its precision from the tests (0-1); nan without a prior
    status: list  # per group: "informed" | "weakly informed" | "undetermined"
    simulated: np.ndarray  # per reading: simulated gauge pressure [Pa]
    z: np.ndarray  # per reading: standardized residual
    cook: np.ndarray  # per reading: Cook's distance (nan for readings left out)
    flag: list  # per reading: "" or why the reading is suspect (face check, gross error)
    rmse: float  # [Pa] over readings used
    criteria: list
    max_headloss: float  # [m], largest head loss across the system in a static snapshot
    findings: list = field(default_factory=list)
    # per reading: "" or how much it weighs on the fit (Cook's distance, leave-one-out shift): a
    # property of the test layout, not of the reading's quality; never a flag
    influence: list = field(default_factory=list)
    n_solves: int = 0
    options: dict = field(default_factory=dict)
    solutions: dict = field(default_factory=dict, repr=False)  # snapshot label -> SolveResult, final x

    # --- convenience views (``c``, ``c_cols``, ``roughness``: ``_GroupC``) -----------------------
    @property
    def c_at_bound(self) -> np.ndarray:
        """Per group: True where the fitted C sits at a bound."""
        return self.estimate.at_bound[self.c_cols]

    @property
    def c_low(self) -> np.ndarray:
        return self.estimate.low[self.c_cols]

    @property
    def c_high(self) -> np.ndarray:
        return self.estimate.high[self.c_cols]

    @property
    def c_sd(self) -> np.ndarray:
        return self.estimate.sd[self.c_cols]

    @property
    def c_determined(self) -> np.ndarray:
        """Per group: True where the tests determine C (not undetermined, not on a bound)."""
        return np.array([s != "undetermined" for s in self.status], dtype=bool)

    @property
    def c_method(self) -> list:
        """Per group: how its interval was found ("linearized" or "profile likelihood")."""
        return [self.estimate.method[i] for i in self.c_cols]

    @property
    def c_low_open(self) -> np.ndarray:
        """Per group: the interval's low end is the C bound (the tests give no lower limit)."""
        return self.estimate.low_open[self.c_cols]

    @property
    def c_high_open(self) -> np.ndarray:
        return self.estimate.high_open[self.c_cols]

    def limit(self, g: int) -> str:
        """What the tests say about group ``g``'s C, in words (interval or one-sided limit)."""
        return limit_text(self.estimate, int(self.c_cols[g]))

    def roughness_export(self) -> np.ndarray:
        """Per-pipe C for the office model: calibrated where the tests determine the group, else the model's."""
        c = self.roughness()
        keep = (self.grouping.index >= 0) & ~self.c_determined[np.maximum(self.grouping.index, 0)]
        return np.where(keep, np.asarray(self.network.roughness, float), c)

    @property
    def residual(self) -> np.ndarray:
        """Observed minus simulated gauge pressure per reading [Pa]."""
        return self.tests.pressure - self.simulated


def _resolve_prior(prior, network, grouping, tests, year):
    if prior is None or (isinstance(prior, str) and prior.lower() == "none"):
        return None
    if isinstance(prior, GroupPrior):
        return prior
    if isinstance(prior, str) and prior.lower() == "handbook":
        if year is None:
            year = _test_year(tests)
        return group_prior(network, grouping, year)
    raise InputError(f"unknown prior '{prior}'", field="--prior", expected="handbook or none")


def _test_year(tests) -> float:
    """Year of the tests (from tests.csv dates), else this year; used to age cast iron."""
    years = []
    for d in tests.days:
        try:
            years.append(_dt.date.fromisoformat(d[:10]).year)
        except (ValueError, TypeError):
            pass
    return float(np.median(years)) if years else float(_dt.date.today().year)


@dataclass
class FitReadings:
    """The readings' part of a fit, final before its interval checks (``fit``'s ``on_readings``):
    what the report's observed-against-simulated and residual figures show. The same names and
    values as in the ``FitResult`` (``threshold``: its ``options["threshold"]``)."""

    tests: object
    simulated: np.ndarray  # per reading: simulated gauge pressure [Pa]
    z: np.ndarray  # per reading: standardized residual, observed minus simulated [-]
    flag: list  # per reading: why it is suspect, or ""
    threshold: float  # the flag's cut-off on |z| [-]


@dataclass
class FittedModel(_GroupC):
    """The fit as final before its interval checks (``fit``'s ``on_fitted``): its parameters, the
    readings' flags and the snapshots' solutions at the result, what the report's hydrant curves
    and fire-flow rows solve from. The same names and values as in the ``FitResult``; its
    ``estimate`` is the same object, whose intervals the checks fill in while the jobs run (read
    its x, covariance and sd, not its intervals)."""

    network: object
    tests: object
    grouping: Grouping
    params: list
    estimate: Estimate
    flag: list  # per reading: why it is suspect, or ""
    solutions: dict = field(default_factory=dict, repr=False)  # snapshot label -> SolveResult


#: Where the work after the fit comes in its one run of tasks (``fit``'s ``on_fitted``;
#: ``calib.parallel.Job.rank``, lower first): the caller's work whose results are drawn (the
#: report's hydrant curves, 0) before the interval checks of whole columns (each its linearized
#: check and both profile ends: the longest tasks), then the leave-one-out refits, then the
#: single profile ends of columns ruled out on their face, then short work whose results are
#: only written (the report's fire-flow rows, 4), which evens out the processes' shares at the end.
RANK_COLUMN, RANK_LOO, RANK_END = 1, 2, 3


@closing_pools  # the snapshots' worker processes (``tasks.SnapshotPool``) end with the fit
def fit(network, tests, group_by: str | None = None, grouping: Grouping | None = None,
        prior="handbook", c_bounds=(40.0, 160.0), loss: str = "linear", demand_factor: bool = False,
        source_offsets: bool = False, threshold: float | None = None, refit: bool = True,
        influence: bool = True, solver=None, progress=None, year: float | None = None,
        max_nfev: int = 60, flag_level: float = _flags.FLAG_LEVEL, on_result=None,
        on_readings=None, on_fitted=None) -> FitResult:
    """Fit group C-factors (and optional demand factors, source grade offsets) to a ``TestSet``.

    ``prior``: ``"handbook"`` (``priors.group_prior``), ``"none"``/None, or a ``GroupPrior``.
    ``threshold``: |standardized residual| above which a reading is flagged and left out of the refit;
    None (default): the Bonferroni outlier cut over the fitted readings at family-wise level
    ``flag_level`` (``flags.outlier_cut``; Cook and Weisberg 1982), stated in the flags and findings.
    ``influence``: leave-one-out refits of the most influential remaining readings (Cook's D > 4/n, at
    most two) to say how far each moves the C-factors.
    ``progress(n_solves, stage)`` is called after every solver call, and once with the solves so
    far as the work after the refits starts (its first tasks may solve none of the fit's
    snapshots); ``stage`` names the phase, with a detail after a colon where the phase repeats
    (``"interval checks and leave-one-out: T04 J316"``).
    ``on_result(result)`` is called with the ``FitResult`` as soon as the interval checks are done,
    while the leave-one-out refits may still run; they then only add their notes to
    ``result.influence`` (and their solves to ``n_solves``, which is final when ``fit`` returns):
    what needs the rest, such as the report's figures, can start then. ``on_readings(readings)``
    is called earlier still, once with a ``FitReadings`` as soon as the simulated readings,
    standardized residuals and flags are final: before the interval checks, which change none of
    them.
    ``on_fitted(fitted)`` is called once with a ``FittedModel`` as soon as the parameters, their
    covariance and the flags are final (before the interval checks, unless the problem of every
    reading solves snapshots of its own: then after them) and returns ``calib.parallel.Job``s (or
    None): independent work with the fitted C, such as the report's solves. They run with the
    interval checks and the leave-one-out refits in one run of tasks on the machine's cores
    (``tasks.run_jobs``; theirs first), each task from its own job's state (``Job.reset``), so
    that their numbers do not depend on the order or the number of processes; their ``done``
    and ``finished`` are called in this process, before ``fit`` returns.
    """
    if loss not in LOSSES:
        raise InputError(f"unknown loss '{loss}'", field="--loss", expected=", ".join(LOSSES))
    if threshold is not None and not threshold > 0:
        raise InputError(f"threshold {threshold} must be positive", field="threshold",
                         expected="about 3 standardized units")
    if not 0.0 < flag_level < 1.0:
        raise InputError(f"flag level {flag_level} is out of range", field="flag_level",
                         expected="a family-wise level between 0 and 1, e.g. 0.05")
    grouping = grouping if grouping is not None else make_groups(network, group_by)
    gp = _resolve_prior(prior, network, grouping, tests, year)
    if solver is None:
        from calib.hydraulics import NetworkSolver
        solver = NetworkSolver(network, headloss="hazen-williams", **FIT_TOLERANCES)
    count = {"n": 0, "stage": "fit"}

    def tick(n_total):
        count["n"] += 1
        if progress is not None:
            progress(count["n"], count["stage"])

    def make(subset_mask, x0=None):
        pr = CalibrationProblem(network, tests.subset(subset_mask), grouping, prior=gp,
                                c_bounds=c_bounds, demand_factor=demand_factor,
                                source_offsets=source_offsets, solver=solver,
                                progress=tick if progress is not None else None, x0=x0, warm=warm)
        if problems:
            # same snapshots: the kept solutions are exact at the same x, and warm starts elsewhere
            pr.share(problems[-1])
        problems.append(pr)
        return pr

    problems: list[CalibrationProblem] = []
    warm: dict = {}  # last solution per snapshot, shared by every problem of this fit

    n = tests.n_readings
    if n == 0:
        raise CalibrationError("the tests folder has no gauge readings to fit")
    face = _flags.face_checks(network, tests)
    flag = [""] * n
    for i, reason in face.items():
        flag[i] = reason
    used0 = np.array([f == "" for f in flag])
    if not used0.any():
        raise CalibrationError("every reading fails a face check; nothing left to fit")
    f_scale = 2.0  # robust losses act beyond about 2 standardized units
    n_family = int(used0.sum())  # the readings tested for a gross error

    def cut_for(e) -> float:
        """The flag's cut-off for the residuals of fit ``e``: fixed, else Bonferroni over the readings
        (t on n - p - 1 when the scale comes from them and the residuals are external, else normal)."""
        if threshold is not None:
            return float(threshold)
        return _flags.outlier_cut(n_family, flag_level, e.dof - 1.0 if e.scaled else None)

    count["stage"] = "fit"
    prob = make(used0)
    est = estimate(prob, prob.x0, loss, f_scale, max_nfev, used0)
    first = None
    z_used, cook_used = _diagnostics(est, prob)
    gross = np.zeros(n, dtype=bool)
    z_with = np.full(n, np.nan)  # standardized residual in the fit that still held the reading
    cut_with = np.full(n, np.nan)  # the cut-off it was judged against there
    # leave out one reading beyond the threshold and refit, one at a time, so that a gross error's
    # neighbours (dragged in the first fit) are not left out with it. Which one: of the (at most three)
    # largest standardized residuals, the one whose leave-one-out refit fits the rest best - a
    # high-leverage good reading can look as bad as the gross error that pulls the fit towards it.
    max_out = max(1, n // 10)
    while refit and gross.sum() < max_out:
        idx = np.flatnonzero(est.used)
        order = np.argsort(-np.abs(z_used))
        cut = cut_for(est)
        cand = [int(k) for k in order[:3] if abs(z_used[k]) > cut]
        if not cand or est.used.sum() - 1 <= prob.n_params:
            break
        count["stage"] = "refit without flagged readings"
        best = None
        for k in cand:
            used1 = est.used.copy()
            used1[idx[k]] = False
            pk = make(used1, x0=est.x)
            ek = estimate(pk, est.x, loss, f_scale, max_nfev, used1)
            if best is None or ek.chi2 < best[2].chi2:
                best = (k, pk, ek, pk.solve(ek.x))  # its solutions, kept past the next candidate's
        k, pk, new_est, at_new = best
        if (est.chi2 - new_est.chi2) / est.s2 < cut ** 2:
            # leaving it out does not remove a gross misfit (a genuine outlier takes about z^2 of
            # S with it): keep it, flagged by its standardized residual only
            break
        if first is None:
            first = est  # the fit with every reading that passed the face checks
        prob = pk
        i = int(idx[k])
        gross[i] = True
        z_with[i] = -z_used[k]
        cut_with[i] = cut
        est = new_est
        prob.recall(est.x, at_new)
        z_used, cook_used = _diagnostics(est, prob)

    # the snapshots' solutions at the result, as ``estimate`` left them
    at_result = prob.solve(est.x)
    # every reading (left-out ones too) at the final parameters: the problem of all readings
    full = make(np.ones(n, dtype=bool), x0=est.x)

    def simulate():
        """Simulated values, standardized residuals and flags of every reading at ``est.x``; none
        of them depends on the intervals (the interval checks change no ``est.x``, ``s2`` or
        ``used``)."""
        count["stage"] = "simulate every reading"
        h_sim = full.simulated_head(est.x)
        results = full.solve(est.x)
        simulated = units.head_to_pressure(h_sim - tests.elevation - tests.gauge_height)
        # shown as observed minus simulated; for left-out readings it is the prediction error
        z = (tests.hgl - h_sim) / (tests.sigma_head * np.sqrt(est.s2))
        z[est.used] = -z_used
        cut = cut_for(est)
        for i in np.flatnonzero(gross):
            flag[i] = (f"standardized residual {z_with[i]:+.1f} beyond +/-{cut_with[i]:.2f} "
                       f"({z[i]:+.1f} against the refit); left out")
        # a reading that survives the refit but is still beyond the cut-off
        for i in np.flatnonzero(est.used & (np.abs(z) > cut)):
            flag[i] = f"standardized residual {z[i]:+.1f} beyond +/-{cut:.2f}"
        if on_readings is not None:
            on_readings(FitReadings(tests=tests, simulated=simulated, z=z, flag=list(flag),
                                    threshold=cut))
        return results, simulated, z, cut

    # Before the interval checks where the problem of all readings shares the fit's kept solutions
    # (the same snapshots): it reads the solutions at ``est.x`` and solves nothing, so the checks
    # start from the same state. Otherwise (a test with every reading left out) it solves, and
    # does that after the checks, as it always did, from the warm starts they leave.
    early = full.shares_solutions_with(prob)
    if early:
        results, simulated, z, cut = simulate()
    cook = np.full(n, np.nan)
    cook[est.used] = cook_used
    p = prob.n_params
    # influence: Cook's distance, then leave-one-out refits of the strongest candidates
    n_used = int(est.used.sum())
    used_idx = np.flatnonzero(est.used)
    leaning = [""] * n  # the influence notes (``influence`` is the option)
    for i in used_idx[cook[used_idx] > 1.0]:
        leaning[i] = f"Cook's distance {cook[i]:.2f} > 1"
    # the leave-one-out candidates: from the fit's x, covariance and Jacobian, which the interval
    # checks leave as they are
    cand = []
    if influence and n_used > p + 1:
        cand = [i for i in used_idx[np.argsort(-cook[used_idx])][:2] if cook[i] > 4.0 / n_used]
        # the one-step estimate moves no C by a third of an sd: no flag, no refit
        cand = [i for i in cand
                if _loo_screen(est, prob, int(np.searchsorted(used_idx, i)), loss) >= LOO_SCREEN]
    done: dict = {}  # "result": the FitResult; "refits": the leave-one-out refits

    def loo_job(stage):
        """The leave-one-out refits as a job (``tasks.problem_job``), each from the state of the
        fit's problems now; the progress names each refit's reading after ``stage``."""
        if not cand:
            return None
        loo_probs = []
        for i in cand:
            mask = est.used.copy()
            mask[i] = False
            loo_prob = make(mask, x0=est.x)
            # case deletion at the fit's weights: the readings at the scale the fit settled on
            # (s * sigma), so that with a prior the readings' weight against it stays the fit's
            loo_prob.sigma_h = loo_prob.sigma_h * np.sqrt(est.s2)
            loo_probs.append(loo_prob)

        def announce(k):
            i = cand[k]
            count["stage"] = (f"{stage}: {tests.test_ids[tests.test[i]]} "
                              f"{network.node_ids[tests.node[i]]}")

        def refit_one(k):
            announce(k)
            return loo_refit(est, loo_probs[k], int(np.searchsorted(used_idx, cand[k])), loss,
                             f_scale)

        return problem_job(loo_probs, refit_one, range(len(cand)), announce=announce,
                           finished=lambda refits: done.__setitem__("refits", refits),
                           rank=RANK_LOO)

    def report_jobs():
        """``on_fitted``'s jobs: the caller's work with the fitted C (the report's solves)."""
        if on_fitted is None:
            return []
        fitted = FittedModel(network=network, tests=tests, grouping=grouping, params=prob.params,
                             estimate=est, flag=list(flag),
                             solutions={res.snapshot.label: res for res in results})
        return [j for j in on_fitted(fitted) or () if j is not None]

    def conclude(est):
        """The ``FitResult`` (everything but the leave-one-out notes), handed to ``on_result``."""
        rule = (f"fixed cut-off +/-{cut:g}" if threshold is not None else
                f"Bonferroni cut-off +/-{cut:.2f} over {n_family} readings at family-wise level {flag_level:g}")
        findings: list[str] = []

        # identifiability
        cov = est.cov
        d = np.sqrt(np.abs(np.diag(cov)))
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = cov / np.outer(d, d)
        corr[~np.isfinite(corr)] = np.nan
        np.fill_diagonal(corr, 1.0)
        names = [q.name for q in prob.params]
        together = [(names[a], names[b], float(corr[a, b])) for a in range(p) for b in range(a + 1, p)
                    if np.isfinite(corr[a, b]) and abs(corr[a, b]) > 0.9]
        sd_c = est.sd[prob.c_cols]
        cc = prob.c_cols
        c_bound = est.at_bound[cc]
        both_open = est.low_open[cc] & est.high_open[cc]
        if gp is not None:
            # share of each group's precision that comes from the tests: 1 - posterior var / prior var
            # (the readings' rows carry their scale s^2 already; the prior's rows their stated spread)
            post_var = sd_c ** 2
            informed = np.clip(1.0 - post_var / gp.spread ** 2, 0.0, 1.0)
            informed[~np.isfinite(informed)] = 0.0
            status = ["informed" if s > 0.5 else "weakly informed" if s > 0.1 else "undetermined"
                      for s in informed]
        else:
            # no prior to compare with: judge by the final interval's half-width (share left undefined)
            half = (est.high[cc] - est.low[cc]) / 2.0
            informed = np.full(len(sd_c), np.nan)
            status = ["undetermined" if not np.isfinite(h) or h > 50 else
                      "weakly informed" if h > 15 or est.low_open[c] or est.high_open[c] else "informed"
                      for h, c in zip(half, cc)]
        # a C on a bound is not a fitted value, and an interval from bound to bound says nothing: the tests
        # do not determine such a group (they may give a one-sided limit)
        status = ["undetermined" if c_bound[g] or both_open[g] else st for g, st in enumerate(status)]

        # statistics and criteria over the readings used
        resid_pa = tests.pressure - simulated
        rmse = float(np.sqrt(np.mean(resid_pa[est.used] ** 2)))
        # largest head loss across the system: highest source grade minus lowest junction grade
        nj = network.n_junctions
        max_hl = 0.0
        if nj and network.n_sources:
            static_heads = [np.asarray(res.head, float) for (_t, kind), res in zip(full.pairs, results)
                            if kind == "static"]
            max_hl = max([0.0] + [float(h[nj:].max() - h[:nj].min()) for h in static_heads])
        head_err = units.pressure_to_head(resid_pa[est.used])
        crit = _criteria.wrc_1989(head_err, max_hl) + _criteria.awwa_ecac_1999(resid_pa[est.used])

        # findings in words
        findings.append(est.scale_note[0].upper() + est.scale_note[1:] + ".")
        model_c = grouping.length_weighted(network, network.roughness)
        for g, name in enumerate(grouping.names):
            col = prob.c_cols[g]
            limit = limit_text(est, col)
            if status[g] == "undetermined":
                if est.at_bound[col] and not (est.low_open[col] and est.high_open[col]):
                    why = (f"its C goes to the bound {est.x[col]:.0f} of {c_bounds[0]:g}-{c_bounds[1]:g}, "
                           "which is no fitted value. Check the model (closed valves, diameters) there")
                elif gp is not None:
                    why = f"its C stays near its prior {gp.c[g]:.0f} with the prior's width"
                else:
                    why = "the readings hardly change with its C"
                findings.append(f"Group {name}: the tests do not determine it ({limit}); {why}. The exports "
                                f"keep the model's C ({model_c[g]:.0f}) for its pipes.")
                lo, hi = est.low[col], est.high[col]
                if not est.low_open[col] and model_c[g] < lo or not est.high_open[col] and model_c[g] > hi:
                    findings.append(f"Group {name}: the model's C {model_c[g]:.0f} is outside what the tests "
                                    f"allow ({limit}): review that group before using the model.")
            elif status[g] == "weakly informed":
                if gp is not None:
                    findings.append(f"Group {name}: the tests inform it weakly ({informed[g]:.0%} of its "
                                    "precision comes from them; its C leans on the prior).")
                else:
                    findings.append(f"Group {name}: the tests inform it weakly (95 % interval "
                                    f"{est.low[col]:.0f}-{est.high[col]:.0f}).")
            if est.method[col] == PROFILE and status[g] != "undetermined":
                findings.append(f"Group {name}: the linearized interval could not be trusted (at or past a C "
                                "bound, or a sum of squares far from quadratic); its interval is the profile "
                                "likelihood one (Venzon and Moolgavkar 1988; Bates and Watts 1988).")
        for a, b, r in together:
            findings.append(f"{a} and {b} move together (correlation {r:+.2f}): the tests determine a "
                            "combination of them better than each alone.")
        findings.append(_flag_rule_text(threshold, cut, n_family, flag_level, est.scaled))
        if first is not None:
            moved = np.abs(first.x[prob.c_cols] - est.x[prob.c_cols])
            findings.append(f"{int(gross.sum())} reading(s) beyond the cut-off were left out one at a "
                            f"time and the fit repeated; C moved by up to {moved.max():.1f} between the fit "
                            "with every reading and the result (both are in groups.csv).")
        for (t, kind), res in zip(full.pairs, results):
            neg = list(getattr(res, "negative_pressure", []) or [])
            if neg:
                findings.append(f"Test {tests.test_ids[t]} ({kind}): the calibrated model gives negative "
                                f"pressure at {', '.join(neg[:5])}{' ...' if len(neg) > 5 else ''}; it "
                                "cannot carry the test's flows as modelled (check diameters and valves).")
        on_flowing = sorted({(int(t), int(nd)) for t, nd, k in zip(tests.test, tests.node, tests.kind)
                             if k == "residual" and int(nd) in tests.flows[int(t)]})
        for t, nd in on_flowing:
            findings.append(f"Test {tests.test_ids[t]}: the gauge at {network.node_ids[nd]} is on a flowing "
                            "hydrant; its residual includes the loss in the hydrant lateral, which the "
                            "model does not hold (common practice: gauge a neighbouring hydrant).")
        for i, reason in face.items():
            findings.append(f"Reading {tests.test_ids[tests.test[i]]} / {network.node_ids[tests.node[i]]} "
                            f"({tests.kind[i]}) fails a face check: {reason}; left out.")
        sig_m = float(np.median(tests.sigma_head)) * (np.sqrt(est.s2) if not est.sigma_stated else 1.0)
        if sig_m > 0.5:
            what = ("The gauges' stated accuracy" if est.sigma_stated
                    else "The readings' scatter (no accuracy was stated)")
            findings.append(f"{what} ({sig_m:.2f} m of head) is coarser than the "
                            "WRc 0.5 m tolerance: that criterion cannot be met by these gauges alone.")
        if loss != "linear":
            findings.append(f"Robust loss '{loss}' (f_scale {f_scale:g} standardized units): the intervals "
                            "are the linearized ones at the solution.")
        findings.extend(zones.test_findings(network, tests, full, results))  # valves and zones
        findings.extend(tests.notes)

        result = FitResult(network=network, tests=tests, grouping=grouping, prior=gp, params=prob.params,
                         estimate=est, first=first, corr=corr, move_together=together, informed=informed,
                         status=status, simulated=simulated, z=z, cook=cook, flag=flag, rmse=rmse,
                         criteria=crit, max_headloss=max_hl, findings=findings, influence=leaning,
                         n_solves=sum(pr.n_solves for pr in problems),
                         options=dict(group_by=group_by or "group column", prior=prior if isinstance(prior, str)
                                      else ("none" if prior is None else "given"), c_bounds=tuple(c_bounds),
                                      loss=loss, demand_factor=demand_factor, source_offsets=source_offsets,
                                      threshold=cut, flag_level=None if threshold is not None else flag_level,
                                      flag_rule=rule),
                         solutions={res.snapshot.label: res for res in results})
        done["result"] = result
        if on_result is not None:
            on_result(result)  # all but the leave-one-out notes is final: e.g. draw the figures now

    # The work after the fit, independent once x is final: the interval checks, the caller's jobs
    # (the report's hydrant curves and fire-flow rows) and the leave-one-out refits, each task
    # from the same state as alone (``tasks.problem_job``), so every number is the same on one
    # core or several and in any order. Where the problem of every reading shared the fit's
    # solutions (``early``) they share one run of tasks (``tasks.run_jobs``): no process waits at
    # the end of one phase for the other's last task. The caller's jobs go first, so that what
    # is drawn from them (the curves) is drawn while the rest is solved.
    workers = parallel.workers_for(network)

    def enter(stage):
        # the phase starts now: its first tasks may solve nothing of the fit's (the report's)
        count["stage"] = stage
        if progress is not None:
            progress(count["n"], stage)

    if early:
        extra = report_jobs()
        names = ["interval checks"] + (["report data"] if extra else []) + \
            (["leave-one-out"] if cand else [])
        stage = (", ".join(names[:-1]) + " and " + names[-1] if len(names) > 1
                 else "interval checks (profile likelihood where needed)")
        enter(stage)
        run_jobs(extra + [interval_job(prob, est, prob.c_cols, finished=conclude,
                                       rank=(RANK_COLUMN, RANK_END)), loo_job(stage)], workers)
        prob.recall(est.x, at_result)
    else:
        # the problem of every reading solves (a test whose every reading is left out): after the
        # interval checks, from the warm starts they leave, as it always did
        count["stage"] = "interval checks (profile likelihood where needed)"
        est = refine_intervals(prob, est, prob.c_cols)
        prob.recall(est.x, at_result)  # the interval checks solved elsewhere since
        results, simulated, z, cut = simulate()
        extra = report_jobs()
        conclude(est)
        names = (["report data"] if extra else []) + (["leave-one-out"] if cand else [])
        stage = " and ".join(names)
        if stage:
            enter(stage)
        run_jobs(extra + [loo_job(stage)], workers)
    result = done["result"]

    sd_c = est.sd[prob.c_cols]
    for i, loo in zip(cand, done.get("refits", ())):
        shift = np.abs(loo.x[prob.c_cols] - est.x[prob.c_cols])
        rel = np.where(np.isfinite(sd_c) & (sd_c > 0), shift / np.where(sd_c > 0, sd_c, 1), 0.0)
        g = int(np.argmax(rel))
        if rel[g] > 1.0:
            text = (f"leaving it out moves C of {grouping.names[g]} by "
                    f"{shift[g]:.1f} ({rel[g]:.1f} sd)")
            leaning[i] = leaning[i] + "; " + text if leaning[i] else text

    result.n_solves = sum(pr.n_solves for pr in problems)
    return result


def _flag_rule_text(threshold, cut: float, n: int, level: float, scaled: bool) -> str:
    """The suspect-reading rule in words, for the findings (no hidden default)."""
    if threshold is not None:
        return (f"Suspect readings: |standardized residual| beyond the fixed cut-off {cut:g} (given); "
                f"over {n} readings some genuine ones may pass it by chance.")
    ref = ("t distribution on n - p - 1 degrees of freedom (scale from the readings' scatter)" if scaled
           else "normal distribution (the stated gauge sigma)")
    return (f"Suspect readings: |standardized residual| beyond {cut:.2f}, the Bonferroni outlier cut-off "
            f"over the {n} readings at family-wise level {level:g} ({ref}; Cook and Weisberg 1982, "
            f"Weisberg 2005): with no gross error, the chance that any reading is flagged is at most "
            f"{level:.0%}.")


# Leave-one-out screen: below this estimated shift [sd of C] a refit cannot reach the 1 sd flag
# unless the one-step estimate is low by more than a factor 3 (measured on the demo town and
# generated grids: within 12 % of the refit for 6 of 7 candidates, 2.9 x low for one strongly
# nonlinear one, 2.4 against 6.8 sd); at or above it, the exact refit decides.
LOO_SCREEN = 1.0 / 3.0


def _case_deletion_step(est: Estimate, row: int, loss: str):
    """The one-step (Gauss-Newton) change of the parameters when reading ``row`` (its row among the
    readings used) is left out: ``dx = (J^T J)^-1 j_i r_i / (1 - h_ii)`` at the fit, with ``J`` and
    ``r`` the weighted Jacobian and residuals (simulated minus observed) the covariance came from
    (Cook and Weisberg (1982), Residuals and Influence in Regression, sec. 3.4; exact for linear
    least squares). None where it does not apply: a robust loss, a parameter at a bound or
    undetermined, a leverage of 1."""
    if loss != "linear" or est.at_bound.any() or est.undetermined.any():
        return None
    J, r = est.jac, est.residual
    # est.cov is (J^T J)^-1 of the Jacobian as stored (reading rows already at s * sigma)
    cov = est.cov
    h = float(J[row] @ cov @ J[row])
    if not 0.0 <= h < 1.0 - 1e-9:
        return None
    dx = cov @ J[row] * r[row] / (1.0 - h)
    return dx if np.all(np.isfinite(dx)) else None


def _loo_screen(est: Estimate, problem: CalibrationProblem, row: int, loss: str) -> float:
    """Largest shift of a group C, in sd, that leaving out reading ``row`` (its row among the
    readings used) makes to first order (``_case_deletion_step``). ``inf`` (refit) where the
    one-step estimate does not apply."""
    dx = _case_deletion_step(est, row, loss)
    if dx is None:
        return np.inf
    cols = problem.c_cols
    sd = est.sd[cols]
    rel = np.abs(dx[cols]) / np.where(sd > 0, sd, np.nan)
    return float(np.max(rel)) if np.all(np.isfinite(rel)) else np.inf


def _loo_start(est: Estimate, problem: CalibrationProblem, row: int, loss: str) -> np.ndarray:
    """Start of the leave-one-out refit: the fit moved by the one-step case-deletion estimate, kept
    inside the bounds; the fit itself where that estimate does not apply."""
    dx = _case_deletion_step(est, row, loss)
    return np.asarray(est.x, float) if dx is None else _inside(problem, est.x + dx)


def _inside(problem: CalibrationProblem, x: np.ndarray) -> np.ndarray:
    """``x`` kept strictly inside the parameters' bounds (a start on a bound would pin it there)."""
    lo, hi = problem.lower, problem.upper
    margin = 1e-6 * (hi - lo)
    return np.clip(x, lo + margin, hi - margin)


#: A leave-one-out refit ends at an evaluated point whose Gauss-Newton step moves every parameter
#: by at most this share of its sd, and by at most this much in its own unit (C, a demand factor,
#: metres): the step is then taken, unevaluated. The refit only feeds the influence note, which
#: prints the shift to 0.1 (C and sd): the step is a fifth of that at most, and what it leaves is
#: about rho / (1 - rho) of it (rho the ratio of successive steps, 0.57 measured on the 7,938-pipe
#: grid: a quarter of the printed digit at most). Measured: the grid's refits' last, evaluated
#: step moved C by 2e-3 at most (least-squares' tolerance ``LSQ_TOL`` asked for it).
LOO_STEP_TOL = 0.02


def loo_refit(est: Estimate, problem: CalibrationProblem, row: int, loss: str = "linear",
              f_scale: float = 2.0, max_nfev: int = 10):
    """The leave-one-out refit of ``problem`` (the fit's readings without the one in ``row``, its row
    among the readings ``est`` used): ``scipy.optimize.least_squares`` as in the fit.

    It starts where the one-step case-deletion estimate puts it (``_loo_start``), moved on by
    ``_extrapolated_start`` where the steps shrink slowly; the least-squares fit decides the result,
    but ends (with the linear loss) at the first evaluated point whose Gauss-Newton step is within
    ``LOO_STEP_TOL``, that step taken (``status`` 3: the step is small). Measured: 2-3 evaluations
    of the snapshots a refit on the demo town and the 7,938-pipe grid, against 5-7 and 10 (the
    grid's stopped at ``max_nfev`` short of the optimum) from the fit's x.
    """
    start = _loo_start(est, problem, row, loss)
    known: dict = {}  # the Jacobian last computed (at the start, if the fit starts there)
    if loss == "linear":
        start = _extrapolated_start(problem, start, start - est.x, known)

    def jacobian(x):
        if known and np.array_equal(x, known["x"]):
            return known["J"]
        J = problem.jacobian(x)
        known["x"], known["J"] = np.array(x, float), J
        return J

    sd = np.where(np.isfinite(est.sd), est.sd, np.inf)
    tol = LOO_STEP_TOL * np.minimum(sd, 1.0)
    ended: dict = {}

    def small_step(x):
        """``x`` plus its Gauss-Newton step where that step is within ``tol`` and inside the
        bounds, else None. ``x`` was evaluated: its residuals and Jacobian are kept."""
        r = problem.residuals(x)
        dx = np.linalg.lstsq(jacobian(x), -r, rcond=None)[0]
        end = x + dx
        if np.all(np.isfinite(dx)) and np.all(np.abs(dx) <= tol) and \
                np.all(end > problem.lower) and np.all(end < problem.upper):
            return end
        return None

    def stop_at_small_step(intermediate_result):
        end = small_step(intermediate_result.x)
        if end is not None:
            ended["x"] = end
            raise StopIteration

    linear = loss == "linear"
    if linear:
        end = small_step(start)
        if end is not None:
            return optimize.OptimizeResult(x=end, status=3, nfev=1, njev=1,
                                           message="the start's Gauss-Newton step is small")
    sol = optimize.least_squares(problem.residuals, start, jac=jacobian,
                                 bounds=(problem.lower, problem.upper), method="trf", loss=loss,
                                 f_scale=f_scale, x_scale="jac", max_nfev=max_nfev,
                                 xtol=LSQ_TOL, ftol=LSQ_TOL, gtol=LSQ_TOL,
                                 callback=stop_at_small_step if linear else None)
    if "x" in ended:
        sol.x, sol.status = ended["x"], 3
        sol.message = "the Gauss-Newton step from the last point is small (taken, unevaluated)"
    return sol


#: Below this ratio of the second Gauss-Newton step to the first (along the first), the refit starts
#: at the one-step estimate itself: its residuals and Jacobian are then already computed (measured:
#: 0.57 on the 7,938-pipe grid's leave-one-out refits, where starting there took 10 evaluations or
#: more, under 0.1 on the demo town's, where 2-3 do).
RHO_EXTRAPOLATE = 0.2


def _extrapolated_start(problem: CalibrationProblem, x1: np.ndarray, step: np.ndarray,
                        known: dict | None = None) -> np.ndarray:
    """A start for the refit of ``problem`` past ``x1``, reached from the fit by ``step``.

    Where the sum of squares is far from quadratic along ``step`` (a C-factor's head loss goes
    with C^-1.852), Gauss-Newton steps from the fit shrink by a near-constant ratio rho and the
    trust-region fit needs many of them (10 or more on the 7,938-pipe grid, rho about 0.57). One
    Gauss-Newton step at ``x1`` measures rho along ``step``; the rest of the geometric series of
    steps, ``dx2 / (1 - rho)``, is taken at once (Aitken's extrapolation of a linearly converging
    sequence). The least-squares fit from there decides the result; this only moves its start.
    Where ``x1`` is returned, ``known`` (a dict, if given) receives its Jacobian: ``x`` and ``J``.
    """
    norm2 = float(step @ step)
    if norm2 == 0.0:
        return x1
    r = problem.residuals(x1)
    J = problem.jacobian(x1)
    dx2 = np.linalg.lstsq(J, -r, rcond=None)[0]
    rho = float(dx2 @ step) / norm2 if np.all(np.isfinite(dx2)) else 0.0
    if not RHO_EXTRAPOLATE <= rho < 0.9:
        if known is not None:
            known["x"], known["J"] = np.array(x1, float), J
        return x1  # near the optimum already (or no steady ratio): the fit starts here, evaluated
    return _inside(problem, x1 + dx2 / (1.0 - rho))


def _diagnostics(est: Estimate, problem: CalibrationProblem):
    """Standardized residuals and Cook's distances of the readings used in ``est``."""
    n = problem.n_readings
    h = _flags.leverage(est.jac, n)
    z = _flags.standardized(est.residual[:n], h)
    cook = _flags.cooks_distance(z, h, problem.n_params)
    if est.scaled:
        # the scale came from these readings: judge each against the scale of the others
        z = _flags.externally_studentized(z, est.dof)
    return z, cook


def limit_text(est: Estimate, col: int) -> str:
    """What the tests say about parameter ``col`` in words: its 95 % interval or one-sided limit."""
    lo, hi = est.low[col], est.high[col]
    lo_open, hi_open = bool(est.low_open[col]), bool(est.high_open[col])
    if lo_open and hi_open:
        return f"no limit within the C bounds {lo:g}-{hi:g}"
    if lo_open:
        return f"C at most {hi:.0f} at 95 %"
    if hi_open:
        return f"C at least {lo:.0f} at 95 %"
    return f"95 % interval {lo:.0f}-{hi:.0f}"
