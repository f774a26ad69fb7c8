"""One bounded weighted least-squares solution, its scale, covariance and intervals (the statistics of a fit).

- Weights 1/sigma. With the linear loss the Gauss-Newton model plus a structured secant estimate of
  the residuals' curvature (Dennis, Gay and Welsch 1981, NL2SOL; ``secant.secant_least_squares``),
  which converges superlinearly where Gauss-Newton steps shrink only by about half (a weakly
  determined C pulled by the prior); a robust loss (``soft_l1``, ``huber``) with
  ``scipy.optimize.least_squares`` (trust-region reflective). A profile point refits the others by
  Gauss-Newton iterations, ``least_squares`` only where they fail; the leave-one-out refits keep
  ``least_squares`` (the secant model did not pay in either).
- The readings' scale. When nobody stated the gauges' accuracy (no ``sigma`` column, no ``--sigma``)
  the readings' variance comes from their scatter, ``s^2 = S_r / (n_r - p)`` (S_r the weighted sum of
  squares of the readings at the nominal 1 psi, n_r readings, p the parameters they determine: the trace
  of the hat matrix over the reading rows, p itself without a prior), and intervals use the t quantile
  on n_r - p degrees of freedom. When the accuracy was stated, a two-sided chi-square test of S_r on
  n_r - p degrees of freedom at 5 % decides (the global test of the variance factor of adjustment
  computations): not rejected, the stated sigma holds and intervals use the normal quantile; rejected
  (either side), ``s^2 = S_r / (n_r - p)`` with the t quantile. Prior rows keep their own stated
  spread: only the readings' rows are rescaled, and with a prior the fit is repeated with the rescaled
  weights until s^2 settles (it moves the balance between readings and prior).
- Covariance ``(J^T W J)^-1`` (Bard 1974, *Nonlinear Parameter Estimation*) from the final analytic
  Jacobian, reading rows weighted 1/(s sigma), by an SVD pseudo-inverse that cuts singular values below
  ``eps * max(m, n) * s_max`` (as ``scipy.optimize.curve_fit`` does); a parameter with a part in the
  cut space is undetermined (infinite variance), never given a narrow interval.
- Intervals (``refine_intervals``): the linearized 95 % interval ``theta +/- q sd`` where it can be
  trusted; a profile-likelihood interval where it cannot - the C at a bound, an interval reaching past
  the C bounds, an undetermined C, or a sum of squares that is far from quadratic at the linearized
  ends. The profile refits the other parameters with that C held fixed and finds where the weighted sum
  of squares has risen by ``q^2`` (the profile t of Bates and Watts 1988, *Nonlinear Regression
  Analysis and Its Applications*, ch. 6; the endpoint search of Venzon and Moolgavkar 1988, *Applied
  Statistics* 37(1); with a known sigma the cut-off is the chi-square(1) 95 % point 3.84). The
  profile never leaves the C bounds: an end that reaches a bound is the bound, and the tests then give
  a one-sided limit only. The end search takes Newton steps on the signed root of the rise with its
  slope from the envelope theorem; a profile point whose start (moved along the last point's own
  profile trace) is within a small Gauss-Newton step of the conditional minimum takes that step
  instead of a refit (one evaluation of the snapshots a point; ``_profile_point``); a start
  further away takes Gauss-Newton iterations (one evaluation each) until such a step, and only
  where they fail (a step that raises the sum of squares or leaves the bounds) a refit. A point within
  1 % of the cut-off's root ends the search at its Newton step, unevaluated (its error is second
  order; ``PROFILE_NEWTON_TOL``); an end at a C bound whose start already lies below the cut-off
  is decided from its residuals, without the point's Jacobian. The columns' searches run as tasks
  on the machine's cores (``tasks.on_problem``); a column whose linearized interval fails on its
  face (no evaluation needed) has its two ends as two tasks.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, special

from calib.calibration.secant import secant_least_squares
from calib.calibration.tasks import on_problem, problem_job

#: Far from quadratic: the rise of the sum of squares at a linearized interval end, along the
#: linearized profile trace, outside this share of the expected q^2 (the half-width off by about a
#: quarter or more). A project choice, not a published threshold.
QUADRATIC_RANGE = (0.64, 1.56)
#: Stopping tolerances of the least-squares fits (scipy's xtol, ftol, gtol). Measured: at 1e-7
#: groups.csv is the one of 1e-8 to its last digit on the demo town and the 7,938-pipe grid, with
#: 10 % and 1 % fewer solves; at 1e-6 the fit stops early along a weakly determined direction (a C
#: with sd 6 moved by 0.03 on the grid). Below that the sum of squares' change between steps nears
#: what the solver's own tolerance (heads to 1e-6 m) moves it by.
LSQ_TOL = 1e-7
#: The fit's stop with the linear loss (``secant.secant_least_squares``' ``ftol``): the next
#: quasi-Newton step would lower the weighted sum of squares by at most this share of it. Measured
#: against fits to 1e-14 with a solver 1e5 times tighter: C within 4e-5 on the 7,938-pipe grid (8
#: evaluations; ``least_squares`` at ``LSQ_TOL``: 9e-3 in 15) and 2e-6 on the demo town (18
#: evaluations with the refit; 2.4e-4 in 20). At 1e-10 the grid stops one evaluation earlier with
#: a C 4.6e-4 off (main's 4.0e-4).
SECANT_TOL = 1e-11
LINEARIZED = "linearized"
PROFILE = "profile likelihood"


@dataclass
class Estimate:
    """One least-squares solution with its covariance."""

    x: np.ndarray
    sd: np.ndarray  # inf where undetermined
    low: np.ndarray
    high: np.ndarray
    cov: np.ndarray
    undetermined: np.ndarray  # bool
    at_bound: np.ndarray  # bool
    s2: float  # variance factor of the readings relative to their stated (or nominal) sigma
    scaled: bool  # True when s2 comes from the readings' scatter (not the stated sigma)
    chi2: float  # weighted sum of squares S at the stated (or nominal) sigma, readings and prior rows
    dof: float  # n_r - p (the parameters the readings determine)
    chi2_p: float  # two-sided p of the chi-square test of the stated sigma (nan when none was stated)
    t: float  # quantile of the 95 % intervals (normal with a stated sigma that holds, else t)
    nfev: int
    message: str
    jac: np.ndarray  # weighted Jacobian at x (readings then prior rows), readings at s * sigma
    residual: np.ndarray  # weighted residuals at x, readings at s * sigma
    used: np.ndarray  # bool over all readings
    sigma_stated: bool = True
    scale_note: str = ""  # which scale the intervals use, and why
    method: list = field(default_factory=list)  # per parameter: LINEARIZED or PROFILE
    low_open: np.ndarray | None = None  # per parameter: the low end is the C bound (no lower limit)
    high_open: np.ndarray | None = None  # per parameter: the high end is the C bound
    n_profile_fits: int = 0


def covariance(J: np.ndarray, rcond: float | None = None):
    """Pseudo-inverse of ``J^T J`` by SVD, and which parameters the cut singular values leave undetermined.

    Returns ``(cov, undetermined)``; variances of undetermined parameters are set to inf.
    """
    J = np.asarray(J, float)
    p = J.shape[1]
    if J.shape[0] == 0 or not np.any(J):
        return np.full((p, p), np.inf), np.ones(p, dtype=bool)
    _, s, vt = np.linalg.svd(J, full_matrices=False)
    cut = (np.finfo(float).eps * max(J.shape) if rcond is None else rcond) * s[0]
    keep = s > cut
    vk = vt[keep]
    cov = (vk.T / s[keep] ** 2) @ vk
    # theta_i has a finite variance only when e_i lies in the row space kept: |V_k^T e_i|^2 = 1
    undetermined = 1.0 - np.sum(vk ** 2, axis=0) > 1e-6
    cov[undetermined, :] = np.nan
    cov[:, undetermined] = np.nan
    cov[undetermined, undetermined] = np.inf
    return cov, undetermined


def _hat_trace_readings(J: np.ndarray, n_r: int) -> float:
    """Trace of the hat matrix over the first ``n_r`` rows: the parameters the readings determine."""
    if J.size == 0:
        return 0.0
    U, s, _ = np.linalg.svd(J, full_matrices=False)
    keep = s > np.finfo(float).eps * max(J.shape) * (s[0] if s.size else 0.0)
    return float(np.sum(U[:n_r, keep] ** 2))


def _scale(S_r: float, dof: float, stated: bool):
    """(s2, scaled, chi2_p, q, note) for the readings' sum of squares ``S_r`` on ``dof`` degrees of freedom."""
    # the quantiles through scipy.special, the functions scipy.stats's norm.ppf, t.ppf, chi2.cdf and
    # chi2.sf call (same values to the last bit); importing scipy.stats costs the command ~0.4 s
    zq = float(special.ndtri(0.975))
    if dof < 0.5:
        note = ("no degrees of freedom left to judge the readings' scatter: intervals use the "
                + ("stated sigma" if stated else "nominal 1 psi (no accuracy was stated)"))
        return 1.0, False, float("nan"), zq, note
    s2 = S_r / dof
    tq = float(special.stdtrit(dof, 0.975))
    if not stated:
        note = (f"no gauge accuracy was stated, so the readings' scale comes from their scatter: "
                f"s = {np.sqrt(s2):.2f} x the nominal 1 psi (s^2 = S/(n-p) = {S_r:.1f}/{dof:.1f}), "
                f"t quantile {tq:.3f} on {dof:.1f} degrees of freedom")
        return s2, True, float("nan"), tq, note
    p_low, p_high = float(special.chdtr(dof, S_r)), float(special.chdtrc(dof, S_r))
    p = min(1.0, 2.0 * min(p_low, p_high))
    test = (f"the weighted sum of squares {S_r:.1f} on {dof:.1f} degrees of freedom (two-sided "
            f"chi-square p = {p:.3g})")
    if p >= 0.05:
        return 1.0, False, p, zq, f"the stated gauge sigma holds: {test} does not reject it"
    side = "larger" if p_high < p_low else "smaller"
    note = (f"the readings scatter {side} than the stated gauge sigma: {test} rejects it, so the "
            f"intervals use s^2 = S/(n-p) = {s2:.2f} and the t quantile {tq:.3f}")
    return s2, True, p, tq, note


def estimate(problem, x0, loss, f_scale, max_nfev, used) -> Estimate:
    stated = bool(getattr(problem.tests, "sigma_stated", None) is None
                  or np.all(problem.tests.sigma_stated))
    n_r = problem.n_readings
    nominal = np.array(problem.sigma_h, float)
    k2 = 1.0  # readings' variance factor the weights carry now
    x_start = np.asarray(x0, float)
    nfev = 0
    curv = None  # the secant estimate of the readings' curvature term, at the weights of k2
    for _ in range(5):
        problem.sigma_h = nominal * np.sqrt(k2)
        if loss == "linear":
            sol = secant_least_squares(problem.residuals, problem.jacobian, x_start, problem.lower,
                                       problem.upper, ftol=SECANT_TOL, max_nfev=max_nfev, S0=curv)
            curv = sol.S
        else:
            sol = optimize.least_squares(problem.residuals, x_start, jac=problem.jacobian,
                                         bounds=(problem.lower, problem.upper), method="trf",
                                         loss=loss, f_scale=f_scale, x_scale="jac",
                                         max_nfev=max_nfev, xtol=LSQ_TOL, ftol=LSQ_TOL, gtol=LSQ_TOL)
        nfev += int(sol.nfev)
        x = sol.x
        r = problem.residuals(x)
        J = problem.jacobian(x)
        S_r = float(r[:n_r] @ r[:n_r]) * k2  # at the stated (or nominal) sigma
        dof = n_r - _hat_trace_readings(J, n_r)
        s2, scaled, chi2_p, q, note = _scale(S_r, dof, stated)
        target = s2 if scaled else 1.0
        # without a prior the solution does not depend on a common scale of the weights; with one the
        # readings' weight against the prior does: refit until the scale settles
        if problem.n_prior_rows == 0 or abs(target - k2) <= 0.02 * max(target, 1e-12):
            break
        if curv is not None:
            curv = curv * (k2 / target)  # the readings' r_i Hess(r_i) go with 1/k2; the prior's are 0
        k2, x_start = target, x
    if abs((s2 if scaled else 1.0) - k2) > 1e-12:
        k2 = s2 if scaled else 1.0
        problem.sigma_h = nominal * np.sqrt(k2)
        r = problem.residuals(x)
        J = problem.jacobian(x)
    cov, undetermined = covariance(J)
    S = S_r + float(r[n_r:] @ r[n_r:])
    sd = np.sqrt(np.where(np.isfinite(np.diag(cov)), np.diag(cov), np.inf))
    sd[undetermined] = np.inf
    at_bound = _at_bound(problem, x, sol.active_mask)
    p = len(x)
    return Estimate(x=x, sd=sd, low=x - q * sd, high=x + q * sd, cov=cov, undetermined=undetermined,
                    at_bound=at_bound, s2=float(s2 if scaled else 1.0), scaled=scaled, chi2=S,
                    dof=float(dof), chi2_p=chi2_p, t=q, nfev=nfev, message=str(sol.message), jac=J,
                    residual=r, used=used, sigma_stated=stated, scale_note=note,
                    method=[LINEARIZED] * p, low_open=np.zeros(p, dtype=bool),
                    high_open=np.zeros(p, dtype=bool))


def _at_bound(problem, x, active_mask=None) -> np.ndarray:
    """True where a parameter sits on a bound as printed (within 0.05 % of its range: 0.06 for C 40-160)."""
    tol = 5e-4 * np.abs(problem.upper - problem.lower)
    on = (x - problem.lower <= tol) | (problem.upper - x <= tol)
    if active_mask is not None:
        on |= np.asarray(active_mask) != 0
    return on


# --- intervals that can be trusted ---------------------------------------------------------------
def _profile_rise(problem, est, i, value, x_warm, max_nfev=8, tol=1e-4):
    """Rise of the weighted sum of squares when parameter ``i`` is held at ``value`` and the others refit.

    Returns ``(rise, x)``; the weights are those of ``est`` (``problem.sigma_h`` as ``estimate`` left it).
    ``max_nfev`` and ``tol`` (scipy's xtol, ftol, gtol) are the refit's: loose, as a profile point
    needs (a reference profile refits tightly: benchmarks/profile_points.py).
    """
    x_full = np.array(x_warm, float)
    x_full[i] = value
    free = np.flatnonzero(np.arange(len(x_full)) != i)
    S0 = float(est.residual @ est.residual)
    if free.size:
        def embed(z):
            full = x_full.copy()
            full[free] = z
            return full

        lo, hi = problem.lower[free], problem.upper[free]
        z0 = np.clip(x_full[free], lo + 1e-9 * (hi - lo), hi - 1e-9 * (hi - lo))
        sol = optimize.least_squares(lambda z: problem.residuals(embed(z)), z0,
                                     jac=lambda z: problem.jacobian(embed(z))[:, free],
                                     bounds=(lo, hi), method="trf", x_scale="jac",
                                     max_nfev=max_nfev, xtol=tol, ftol=tol, gtol=tol)
        x_full = embed(sol.x)
    r = problem.residuals(x_full)
    return max(float(r @ r) - S0, 0.0), x_full


#: A profile point takes the Gauss-Newton step of the other parameters from its start as its
#: refit when that step stays inside their bounds and lowers the weighted sum of squares by less
#: than this share of the cut-off (the start, moved along the last point's own profile trace, is
#: then close to the conditional minimum, and the step's error is far below the end search's
#: tolerance); else a least-squares refit from there decides (``_profile_rise``).
PROFILE_STEP_SHARE = 0.01
#: A point is taken as an interval end only where its Gauss-Newton step lowered the sum of squares
#: by at most this share of the cut-off: Gauss-Newton can miss the rest of the drop by about
#: rho / (1 - rho) of it (rho the ratio of successive steps, 0.57 measured on the 7,938-pipe grid),
#: which keeps the end's rise within 0.3 % and its root within 0.15 % (``PROFILE_ROOT_TOL``).
PROFILE_END_SHARE = 0.002
#: The end search stops where the signed root of the rise is within this share of the cut-off's
#: root (about this share of the interval's half-width in C).
PROFILE_ROOT_TOL = 0.001
#: A point within this share of the cut-off's root (its Gauss-Newton drop as small as an end's)
#: ends the search at its Newton step, which is not evaluated: the step's error is second order,
#: about (ratio / 2) x this share squared of the half-width, with ratio the half-width times the
#: root's curvature over its slope (about 1; the ratio would have to pass 20 for the step to miss
#: ``PROFILE_ROOT_TOL``). Where the search evaluated that step it took it as the end: the
#: 7,938-pipe grid's G2 low and G5 low ends are the same bits, one evaluation each fewer.
PROFILE_NEWTON_TOL = 0.01
#: Evaluations of a profile point's Gauss-Newton iterations (its start's included) before a
#: least-squares refit decides (``_profile_point``).
PROFILE_GN_ITERATIONS = 4


def _profile_point(problem, est, i, value, warm):
    """The profile at parameter ``i`` held at ``value``: ``(rise, x, slope, trace, drop)``.

    ``rise`` is the weighted sum of squares' rise over the optimum with the other parameters at
    their conditional minimum ``x``; ``slope`` d(rise)/d(value) there (envelope theorem: the partial
    derivative ``2 j_i^T r``); ``trace`` how the others move with the value there
    (``-(J_f^T J_f)^-1 J_f^T j_i``), for the next point's start. Gauss-Newton iterations of the
    other parameters from ``warm`` (with the value set), one evaluation of the snapshots each
    (residuals and Jacobian, which the point needs anyway). A start whose step inside the bounds
    lowers the sum of squares by at most ``PROFILE_STEP_SHARE`` of the cut-off takes that step,
    unevaluated, as its refit; a later iterate takes its step once it lowers the sum by at most
    ``PROFILE_END_SHARE`` (converged as tightly as an end needs: a refitted point may be an end,
    and its slope and trace seed the next point). A step that leaves the bounds or raises the sum
    of squares, or no small step within ``PROFILE_GN_ITERATIONS`` evaluations: a least-squares
    refit from the last iterate decides (``_profile_rise``), as every start far from the
    conditional minimum did before (the 7,938-pipe grid's three such points: 2, 1 and 1
    evaluations after their start, where the refits took 3, 2 and 2).
    ``drop``: how much the Gauss-Newton step taken lowered the sum of squares (0 after a refit).
    """
    x = np.array(warm, float)
    x[i] = value
    free = np.flatnonzero(np.arange(len(x)) != i)
    S0 = float(est.residual @ est.residual)
    cut = est.t ** 2
    r = problem.residuals(x)
    J = problem.jacobian(x)
    drop = 0.0
    if free.size:
        lo, hi = problem.lower[free], problem.upper[free]
        for k in range(PROFILE_GN_ITERATIONS):
            Jf = J[:, free]
            dz = np.linalg.lstsq(Jf, -r, rcond=None)[0]
            z = x[free] + dz
            r_min = r + Jf @ dz
            drop = float(r @ r) - float(r_min @ r_min)
            inside = bool(np.all(np.isfinite(dz)) and np.all(z > lo) and np.all(z < hi))
            # the start by the one-step rule; an iterate as tight as an end needs (a refit's
            # point may be an end, so is this one; its slope and trace seed the next points)
            share = PROFILE_STEP_SHARE if k == 0 else PROFILE_END_SHARE
            if inside and drop <= share * cut:
                x = x.copy()
                x[free] = z  # the step's residuals r_min are the linear model's at z
                break
            if inside and k + 1 < PROFILE_GN_ITERATIONS:
                x_next = x.copy()
                x_next[free] = z
                r_next = problem.residuals(x_next)
                if float(r_next @ r_next) < float(r @ r):
                    x, r, J = x_next, r_next, problem.jacobian(x_next)
                    continue
            _rise, x = _profile_rise(problem, est, i, value, x)
            r_min = problem.residuals(x)
            J = problem.jacobian(x)
            Jf = J[:, free]
            drop = 0.0
            break
        trace = np.zeros(len(x))
        trace[free] = np.linalg.lstsq(Jf, -J[:, i], rcond=None)[0]
    else:
        r_min = r
        trace = np.zeros(len(x))
    trace[i] = 1.0
    rise = max(float(r_min @ r_min) - S0, 0.0)
    slope = 2.0 * float(J[:, i] @ r_min)
    return rise, x, slope, trace, drop


def _below_cut_at_start(problem, est, i, value, warm, root_cut) -> bool:
    """True when the profile point at ``value`` (parameter ``i``, the others at ``warm``) lies
    below the cut-off by more than the end search's tolerance already at its start: the point's
    Gauss-Newton step or refit only lowers the sum of squares, so the point would decide the same
    (below the cut, not within ``PROFILE_ROOT_TOL`` of it) and its Jacobian is not needed. One
    evaluation of the snapshots' residuals (the point itself solves there first anyway)."""
    x = np.array(warm, float)
    x[i] = value
    r = problem.residuals(x)
    rise = float(r @ r) - float(est.residual @ est.residual)
    return rise < (root_cut * (1.0 - PROFILE_ROOT_TOL)) ** 2


def _profile_end(problem, est, i, direction, cut):
    """One end of the profile-likelihood interval of parameter ``i``: ``(value, reaches_bound, points)``.

    Newton steps on the signed root of the rise (close to linear in C: Bates and Watts' profile t),
    with its slope from the envelope theorem (Venzon and Moolgavkar 1988 solve the same end
    conditions), starting at the linearized end and kept inside a bracket once the cut-off is
    passed (secant, then bisection, where a step would leave it); an end that reaches the bound
    below the cut-off is the bound (decided from the point's residuals where they already lie
    below it: ``_below_cut_at_start``). Each point starts from the last point moved along its own
    profile trace (the first along the linearized trace at the optimum). The search ends at a
    point within ``PROFILE_ROOT_TOL`` of the cut-off's root, or at the Newton step from a point
    within ``PROFILE_NEWTON_TOL`` of it, unevaluated.
    """
    x0 = est.x
    bound = problem.lower[i] if direction < 0 else problem.upper[i]
    room = abs(bound - x0[i])
    if room <= 5e-4 * (problem.upper[i] - problem.lower[i]):
        return float(bound), True, 0
    with np.errstate(invalid="ignore", divide="ignore"):
        trace = est.cov[:, i] / est.cov[i, i]
    trace = trace if np.all(np.isfinite(trace)) else np.eye(len(x0))[i]

    half = est.t * est.sd[i]
    step = min(half, room) if np.isfinite(half) and half > 0 else room / 2.0
    root_cut = np.sqrt(cut)
    inside, outside = (float(x0[i]), 0.0), None  # (C, root) with root < / >= the cut's
    value = float(x0[i] + direction * step)
    near, x_near = float(x0[i]), np.asarray(x0, float)
    points = 0
    for k in range(12):
        if k == 0:
            warm = _linearized_end(problem, est, direction * step, trace)
        else:
            warm = np.clip(x_near + (value - near) * trace, problem.lower, problem.upper)
        if abs(value - bound) <= 1e-9 * room and _below_cut_at_start(problem, est, i, value, warm,
                                                                      root_cut):
            return float(bound), True, points + 1  # what the point would decide, without its Jacobian
        rise, x_at, slope, trace_at, drop = _profile_point(problem, est, i, value, warm)
        points += 1
        root = np.sqrt(rise)
        if abs(root - root_cut) <= PROFILE_ROOT_TOL * root_cut and drop <= PROFILE_END_SHARE * cut:
            return value, False, points
        if root < root_cut:
            if abs(value - bound) <= 1e-9 * room:
                return float(bound), True, points  # the tests do not bound it on this side
            inside = (value, root)
        else:
            outside = (value, root)
        if outside is not None and abs(outside[0] - inside[0]) < 0.05:
            break
        near, x_near, trace = value, x_at, trace_at
        # Newton on the root: d(root)/dC = d(rise)/dC / (2 root), outwards positive
        d_root = direction * slope / (2.0 * root) if root > 0 else 0.0
        guess = value + direction * (root_cut - root) / d_root if d_root > 0 else np.nan
        lo_c, hi_c = sorted((inside[0], outside[0] if outside is not None else float(bound)))
        if lo_c < guess < hi_c and abs(root - root_cut) <= PROFILE_NEWTON_TOL * root_cut \
                and drop <= PROFILE_END_SHARE * cut:
            return float(guess), False, points  # one Newton step from the end (see the constant)
        if not lo_c < guess < hi_c:
            if outside is None:
                (ca, ra), (cb, rb) = (float(x0[i]), 0.0), inside
                guess = cb + (root_cut - rb) * (cb - ca) / (rb - ra) if rb != ra else float(bound)
                if not lo_c < guess < hi_c:
                    guess = float(bound)
            else:
                (ca, ra), (cb, rb) = inside, outside
                guess = ca + (root_cut - ra) * (cb - ca) / (rb - ra) if rb != ra else np.nan
                if not lo_c < guess < hi_c:
                    guess = 0.5 * (inside[0] + outside[0])
        value = float(guess)
    a, b = inside, outside if outside is not None else inside
    value = a[0] + (root_cut - a[1]) * (b[0] - a[0]) / (b[1] - a[1]) if b[1] != a[1] else a[0]
    return float(value), False, points


def _linear_ruled_out(problem, est, i) -> bool:
    """True when the linearized interval of parameter ``i`` fails on its face, before any
    evaluation: undetermined, at a bound, reaching past a bound, or without a profile trace."""
    lo, hi = est.x[i] - est.t * est.sd[i], est.x[i] + est.t * est.sd[i]
    if est.undetermined[i] or not np.isfinite(est.sd[i]) or est.at_bound[i]:
        return True
    if lo < problem.lower[i] or hi > problem.upper[i]:
        return True
    with np.errstate(invalid="ignore", divide="ignore"):
        direction = est.cov[:, i] / est.cov[i, i]
    return not np.all(np.isfinite(direction))


def linear_trustworthy(problem, est, i, cut, kept: dict | None = None) -> bool:
    """True when the linearized interval of parameter ``i`` can stand (see the module docstring).

    ``kept`` (a dict, if given) receives per end evaluated (-1.0, 1.0) ``(x, solutions)``: where
    the profile search then starts at that end, it is not solved again (``refine_intervals``)."""
    if _linear_ruled_out(problem, est, i):
        return False
    # along the linearized profile trace (the other parameters moving as the covariance says), the
    # rise at each end should be q^2 when the sum of squares is quadratic
    direction = est.cov[:, i] / est.cov[i, i]
    S0 = float(est.residual @ est.residual)
    for end in (-1.0, 1.0):
        x = _linearized_end(problem, est, end * (est.t * est.sd[i]), direction)
        r = problem.residuals(x)
        if kept is not None:
            kept[end] = (x, problem.solve(x))
        ratio = (float(r @ r) - S0) / cut
        if not QUADRATIC_RANGE[0] <= ratio <= QUADRATIC_RANGE[1]:
            return False
    return True


def _linearized_end(problem, est, step, trace):
    """The point ``step`` from the optimum along the linearized profile ``trace``, inside the
    bounds: the check of a linearized end evaluates it, and a profile search that starts at that
    end begins there (the same bits, so its kept solutions serve: ``CalibrationProblem.solve``)."""
    return np.clip(est.x + step * trace, problem.lower, problem.upper)


def refine_intervals(problem, est: Estimate, columns) -> Estimate:
    """Replace untrustworthy linearized intervals of ``columns`` (the C-factors) by profile intervals.

    Every interval is clipped to the parameter's bounds. ``problem`` must be the one ``est`` came from.
    """
    task, items, apply = _interval_plan(problem, est, columns)
    return apply(on_problem(problem, task, items))


def interval_job(problem, est: Estimate, columns, finished=None, rank=(1, 3)):
    """``refine_intervals`` as a ``parallel.Job`` (``tasks.problem_job``), to run beside other
    independent work (``tasks.run_jobs``): ``est`` gets its intervals once the job's last task is
    in, then ``finished(est)`` is called (where given). ``rank``: of a column's task (its check,
    then both ends: the longer tasks) and of a single end's task (a column ruled out on its
    face)."""
    task, items, apply = _interval_plan(problem, est, columns)

    def done(found):
        apply(found)
        if finished is not None:
            finished(est)
    return problem_job(problem, task, items, finished=done,
                       rank=lambda item: rank[0] if item[1] is None else rank[1])


def _interval_plan(problem, est: Estimate, columns):
    """``(task, items, apply)``: the interval checks of ``columns`` as independent tasks, and
    ``apply(values)``, which writes their ends into ``est`` and returns it."""
    cut = est.t ** 2
    low = np.clip(est.low, problem.lower, problem.upper)
    high = np.clip(est.high, problem.lower, problem.upper)
    low_open = np.isclose(low, problem.lower) & ~np.isfinite(est.sd)
    high_open = np.isclose(high, problem.upper) & ~np.isfinite(est.sd)
    method = list(est.method) or [LINEARIZED] * len(est.x)

    def task(item):
        """``(i, end)``: that profile end of parameter ``i``. ``(i, None)``: None where the
        linearized interval stands, else both profile ends, the check's points kept for them."""
        i, end = item
        if end is not None:
            return [_profile_end(problem, est, i, end, cut)]
        kept: dict = {}
        if linear_trustworthy(problem, est, i, cut, kept):
            return None
        ends = []
        for end in (-1.0, 1.0):
            if end in kept:  # its first point is that linearized end, solved by the check
                problem.recall(*kept[end])
            ends.append(_profile_end(problem, est, i, end, cut))
        return ends

    # the columns are independent: shared out between processes, each from the same state of the
    # problem (``tasks.on_problem``), so they come out the same on one core or several. A column
    # whose linearized interval fails on its face (``_linear_ruled_out``: no evaluation) has its
    # two ends as two tasks, which share nothing: finer tasks even out the processes' shares
    # (the 7,938-pipe grid: 273 of its 546 solves in the longer share, was 294)
    columns = [int(i) for i in columns]
    items = []
    for i in columns:
        split = _linear_ruled_out(problem, est, i)
        items += [(i, -1.0), (i, 1.0)] if split else [(i, None)]

    def apply(values):
        found: dict = {}
        for (i, _end), ends in zip(items, values):
            if ends is not None:
                found.setdefault(i, []).extend(ends)
        fits = 0
        for i, ends in found.items():
            (low[i], low_open[i], f1), (high[i], high_open[i], f2) = ends
            fits += f1 + f2
            method[i] = PROFILE
        est.low, est.high, est.low_open, est.high_open = low, high, low_open, high_open
        est.method, est.n_profile_fits = method, fits
        return est
    return task, items, apply
