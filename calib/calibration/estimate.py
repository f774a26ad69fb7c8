"""One bounded weighted least-squares solution and its covariance (the statistics of one fit).

- ``scipy.optimize.least_squares`` (trust-region reflective), weights 1/sigma, optional robust loss.
- Covariance ``Cov = s^2 (J^T W J)^-1`` (Bard 1974, *Nonlinear Parameter Estimation*) from the final
  analytic Jacobian by an SVD pseudo-inverse that cuts singular values below ``eps * max(m, n) * s_max``
  (as ``scipy.optimize.curve_fit`` does); a parameter with a part in the cut space is undetermined
  (infinite variance), never given a narrow interval.
- ``s^2 = 1`` (the stated sigma) unless a chi-square test of the weighted sum of squares S on n - p
  degrees of freedom rejects it on the high side at 5 %; then ``s^2 = S / (n - p)``. Prior rows count
  as observations. 95 % intervals ``theta +/- t(0.975, n - p) sqrt(Cov_ii)``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

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
    s2: float  # variance factor used (1.0 = stated sigma)
    scaled: bool
    chi2: float  # weighted sum of squares S
    dof: int
    chi2_p: float
    t: float
    nfev: int
    message: str
    jac: np.ndarray  # weighted Jacobian at x (readings then prior rows)
    residual: np.ndarray  # weighted residuals at x
    used: np.ndarray  # bool over all readings


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


def estimate(problem, x0, loss, f_scale, max_nfev, used) -> Estimate:
    sol = optimize.least_squares(problem.residuals, x0, jac=problem.jacobian,
                                 bounds=(problem.lower, problem.upper), method="trf", loss=loss,
                                 f_scale=f_scale, x_scale="jac", max_nfev=max_nfev,
                                 xtol=1e-8, ftol=1e-8, gtol=1e-8)
    x = sol.x
    r = problem.residuals(x)
    J = problem.jacobian(x)
    cov1, undetermined = covariance(J)
    n_rows, p = J.shape
    # prior rows are observations too (of the parameters), so they count in n
    dof = int(n_rows - p)
    S = float(r @ r)
    if dof > 0:
        chi2_p = float(stats.chi2.sf(S, dof))
        scaled = chi2_p < 0.05
        s2 = S / dof if scaled else 1.0
        t = float(stats.t.ppf(0.975, dof))
    else:
        chi2_p, scaled, s2, t = float("nan"), False, 1.0, float(stats.norm.ppf(0.975))
    cov = cov1 * s2
    sd = np.sqrt(np.where(np.isfinite(np.diag(cov)), np.diag(cov), np.inf))
    sd[undetermined] = np.inf
    tol = 1e-6 * np.maximum(1.0, np.abs(problem.upper - problem.lower))
    at_bound = ((np.asarray(sol.active_mask) != 0) | (x - problem.lower < tol)
                | (problem.upper - x < tol))
    return Estimate(x=x, sd=sd, low=x - t * sd, high=x + t * sd, cov=cov, undetermined=undetermined,
                    at_bound=at_bound, s2=s2, scaled=scaled, chi2=S, dof=dof, chi2_p=chi2_p, t=t,
                    nfev=int(sol.nfev), message=str(sol.message), jac=J, residual=r, used=used)
