"""Bounded nonlinear least squares with a structured secant estimate of the residuals' curvature.

A Gauss-Newton fit (``scipy.optimize.least_squares``' trust-region reflective steps) models the
Hessian of ``f = 1/2 |r|^2`` by ``J^T J`` alone. It converges linearly where the second-order term
``S = sum_i r_i Hess(r_i)`` is not small against ``J^T J``: on the 7,938-pipe grid the handbook
prior pulls a weakly determined C away from where its readings put it, the readings' curvature
along it is about half of ``J^T J``, and each Gauss-Newton step is about half the one before (15
evaluations of the snapshots). ``secant_least_squares`` keeps the analytic Jacobian and adds a
secant estimate of ``S`` built from the Jacobians already computed: the structured secant update
of Dennis, Gay and Welsch (1981, *An adaptive nonlinear least-squares algorithm*, ACM Trans. Math.
Software 7(3), 348-368: the NL2SOL method), with their sizing of ``S``, their choice step by step
of the model (Gauss-Newton or augmented) that predicted the last reduction better, and their
relative function convergence test. The bounded step is scipy's (``optimize.lsq_linear``).
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, optimize


def _model_step(g, H, D, mu, x, lower, upper):
    """Step ``p`` minimizing the model ``g^T p + 1/2 p^T (H + mu diag(D)) p`` within the bounds.

    With ``H + mu diag(D) = L L^T`` (Cholesky) the model is ``1/2 |L^T p + L^-1 g|^2`` less a
    constant, so the bounded step is the bounded linear least-squares problem solved by
    ``scipy.optimize.lsq_linear`` (bounded-variable least squares, Stark and Parker 1995); the
    unbounded minimizer where it lies strictly inside. A matrix that is singular but not indefinite
    (a parameter no residual depends on: a zero column of J) gets a ridge of 1e-12 of its largest
    diagonal entry, so that such a parameter's step is zero (its gradient is). None where the
    matrix is not positive definite even then.
    """
    M = H + mu * np.diag(D)
    try:
        L = linalg.cholesky(M, lower=True)
    except linalg.LinAlgError:
        try:
            L = linalg.cholesky(M + 1e-12 * np.max(np.abs(np.diag(M))) * np.eye(len(g)), lower=True)
        except linalg.LinAlgError:
            return None
    b = -linalg.solve_triangular(L, g, lower=True)
    p = linalg.solve_triangular(L.T, b, lower=False)
    lo, hi = lower - x, upper - x
    if np.all(p > lo) and np.all(p < hi):
        return p
    return np.clip(optimize.lsq_linear(L.T, b, bounds=(lo, hi), method="bvls", tol=1e-12).x, lo, hi)


def secant_least_squares(fun, jac, x0, lower, upper, ftol: float, max_nfev: int = 60, S0=None,
                         noise: float = 1e-8) -> optimize.OptimizeResult:
    """Minimize ``f = 1/2 |fun(x)|^2`` within ``lower <= x <= upper`` (NL2SOL's model Hessian).

    Model Hessian ``J^T J + S`` (``J = jac(x)``, analytic). ``S`` starts at zero (or ``S0``: the
    estimate of a fit of the same residuals at other weights) and after every accepted step ``s``
    takes the structured secant update of Dennis, Gay and Welsch (1981)::

        y  = J+^T r+ - J^T r              the change of the gradient
        y# = (J+ - J)^T r+                the part of it that S stands for
        S <- tau S,  tau = min(1, |s^T y#| / |s^T S s|)                 (their sizing)
        S <- S + (v y^T + y v^T) / (y^T s) - (v^T s) y y^T / (y^T s)^2,  v = y# - S s

    (symmetric, rank two, ``S s = y#`` after it; skipped where ``y^T s <= 0``). The next step uses
    the augmented model unless the Gauss-Newton model predicted the last actual reduction of ``f``
    better (their adaptive choice; after a Gauss-Newton step the updated ``S`` is tried again); it
    is Gauss-Newton where ``J^T J + S`` is not positive definite.
    Globalization: a Levenberg-Marquardt term ``mu diag(J^T J)`` (Marquardt's scaling); a step whose
    actual reduction is under a quarter of the model's prediction is retried with ``mu`` raised
    (the rejected point gets no Jacobian). Every ``fun`` call counts in ``nfev``; ``jac`` is called
    at the start and at each accepted point.

    Stops before evaluating a step whose predicted reduction is at most ``ftol * f`` (NL2SOL's
    relative function convergence: the quasi-Newton step's error is then second order), where a
    step predicted to lower ``f`` by under ``noise * f`` does not lower it as predicted (the
    residuals' own noise, from the solver's tolerance, decides there), or at ``max_nfev``.
    Returns an ``OptimizeResult``: ``x``, ``fun``, ``jac`` (at ``x``), ``nfev``, ``njev``,
    ``status`` (0 budget, 1 no step, 2 converged, 3 noise), ``message``, ``active_mask`` (-1 / 1
    on the lower / upper bound, as ``least_squares``') and ``S`` (the curvature estimate at ``x``).
    """
    x = np.clip(np.asarray(x0, float), lower, upper)
    r = np.asarray(fun(x), float)
    J = np.asarray(jac(x), float)
    nfev, njev = 1, 1
    f = 0.5 * float(r @ r)
    g = J.T @ r
    S = np.zeros((x.size, x.size)) if S0 is None else np.array(S0, float)
    augmented = S0 is not None  # the first step from a zero S is Gauss-Newton's anyway
    mu = 0.0
    status, message = 0, "the evaluation budget ran out"
    while nfev < max_nfev:
        JtJ = J.T @ J
        D = np.maximum(np.diag(JtJ), np.finfo(float).tiny)
        H = JtJ + S if augmented else JtJ
        p = _model_step(g, H, D, mu, x, lower, upper)
        if p is None:  # the augmented model is not convex here
            H, augmented = JtJ, False
            p = _model_step(g, H, D, mu, x, lower, upper)
        if p is None or not np.any(p):
            status, message = 1, "no step: the projected gradient vanishes"
            break
        pred = -float(g @ p + 0.5 * p @ H @ p)
        if pred <= ftol * f:
            status, message = 2, "the predicted reduction is small (relative function convergence)"
            break
        x_new = np.clip(x + p, lower, upper)
        r_new = np.asarray(fun(x_new), float)
        nfev += 1
        f_new = 0.5 * float(r_new @ r_new)
        actual = f - f_new
        if not (np.isfinite(f_new) and actual > 0.25 * pred):
            if pred <= noise * f:
                status, message = 3, "the predicted reduction is below the residuals' noise"
                break
            mu = max(4.0 * mu, 1e-3)
            continue
        J_new = np.asarray(jac(x_new), float)
        njev += 1
        s = x_new - x
        g_new = J_new.T @ r_new
        y = g_new - g
        y_sharp = (J_new - J).T @ r_new
        # the model that predicted this reduction better takes the next step (S before its update)
        pred_gn = -float(g @ s + 0.5 * s @ JtJ @ s)
        pred_aug = -float(g @ s + 0.5 * s @ (JtJ + S) @ s)
        augmented = not augmented or abs(actual - pred_aug) < abs(actual - pred_gn)
        sSs = float(s @ S @ s)
        if sSs != 0.0:
            S = S * min(1.0, abs(float(s @ y_sharp)) / abs(sSs))
        ys = float(y @ s)
        if ys > 0.0:
            v = y_sharp - S @ s
            S = S + (np.outer(v, y) + np.outer(y, v)) / ys - float(v @ s) * np.outer(y, y) / ys ** 2
        if actual > 0.75 * pred:
            mu = mu / 4.0 if mu > 4e-6 else 0.0
        x, r, J, f, g = x_new, r_new, J_new, f_new, g_new
    active = np.where(x <= lower, -1, np.where(x >= upper, 1, 0))
    return optimize.OptimizeResult(x=x, fun=r, jac=J, nfev=nfev, njev=njev, status=status,
                                   message=message, active_mask=active, S=S, success=status > 0)
