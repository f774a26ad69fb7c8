"""Readings that do not fit: face checks before the fit, residual and influence measures after it.

- Face checks (no model needed): a residual reading above the static of the same gauge and test; a
  static grade above the highest source grade of the test (impossible without a pump).
- Standardized residual: ``r_i / (sigma_i sqrt(1 - h_ii))`` with leverage ``h_ii`` the diagonal of the
  hat matrix of the weighted Jacobian (Belsley, Kuh and Welsch 1980, *Regression Diagnostics*; the
  internally studentized residual with the stated sigma).
- Where the scale s comes from the readings' own scatter, a gross error inflates it; the screen then uses
  the externally studentized residual ``t_i = z_i sqrt((nu - 1) / (nu - z_i^2))`` with nu = n - p, the
  residual against the scale of the other readings (Belsley, Kuh and Welsch 1980, "RSTUDENT").
- The cut-off for a suspect reading is multiplicity-aware: among n readings a few genuine ones lie
  beyond a fixed +/-3 by chance (about n x 0.27 % with a known scale). The outlier test of Cook and
  Weisberg (1982, *Residuals and Influence in Regression*, sec. 2.2.3) and Weisberg (2005, *Applied
  Linear Regression*, 3rd ed., sec. 9.1.3) flags the readings whose |t_i| exceeds the Bonferroni
  bound ``t(1 - alpha / (2 n), n - p - 1)`` (``outlier_cut``): with no gross error, the chance that
  any of the n readings is flagged is at most ``alpha`` (the family-wise level, ``FLAG_LEVEL``).
  With the stated gauge sigma (the scale not estimated) the reference distribution is the normal.
- Cook's distance ``D_i = z_i^2 h_ii / (p (1 - h_ii))`` (Cook 1977, Technometrics 19(1)); the usual
  screening rule calls D > 1 influential, candidates for a leave-one-out refit above 4/n (common
  practice). Influence says how much the fit leans on a reading (the test layout), not that the
  reading is wrong: the fit reports it apart from the flags, which mark suspect readings only.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from calib import units

#: Family-wise level of the suspect-reading flag: the chance, with no gross error among the readings,
#: that any of them is flagged (Bonferroni; see ``outlier_cut``). A project choice, stated in the output.
FLAG_LEVEL = 0.05


def face_checks(network, tests, tolerance_sigmas: float = 3.0) -> dict[int, str]:
    """Reading index -> reason, for readings inconsistent on their face.

    The static-above-source check allows ``tolerance_sigmas`` times the reading's sigma and is skipped
    when the network has a running pump (a pump can lift the grade above every source).
    """
    reasons: dict[int, str] = {}
    by_key: dict[tuple[int, int], dict[str, int]] = {}
    for i, (t, n, k) in enumerate(zip(tests.test, tests.node, tests.kind)):
        by_key.setdefault((int(t), int(n)), {})[str(k)] = i
    for (t, n), kinds in by_key.items():
        if "static" in kinds and "residual" in kinds:
            s, r = kinds["static"], kinds["residual"]
            if tests.pressure[r] > tests.pressure[s]:
                reasons[r] = (f"residual {tests.pressure[r] / units.PSI:.1f} psi above static "
                              f"{tests.pressure[s] / units.PSI:.1f} psi")
    pumps_on = len(network.pumps) and np.any(np.asarray(network.pumps.speed) > 0)
    if not pumps_on and network.n_sources:
        hgl = tests.hgl
        nj = network.n_junctions
        for i in np.flatnonzero(tests.kind == "static"):
            t = int(tests.test[i])
            heads = network.source_head.copy()
            for s, h in tests.source_head[t].items():
                heads[s - nj] = h
            top = float(np.max(heads))
            if hgl[i] > top + tolerance_sigmas * tests.sigma_head[i]:
                reasons.setdefault(int(i), f"static grade {hgl[i] / units.FT:.1f} ft above the highest "
                                           f"source grade {top / units.FT:.1f} ft")
    return reasons


def leverage(J: np.ndarray, n_rows: int | None = None) -> np.ndarray:
    """Diagonal of the hat matrix ``J (J^T J)^+ J^T`` for the first ``n_rows`` rows of weighted ``J``."""
    J = np.asarray(J, float)
    n_rows = J.shape[0] if n_rows is None else n_rows
    if J.size == 0:
        return np.zeros(n_rows)
    U, s, _ = np.linalg.svd(J, full_matrices=False)
    keep = s > np.finfo(float).eps * max(J.shape) * (s[0] if s.size else 0.0)
    return np.sum(U[:n_rows, keep] ** 2, axis=1)


def standardized(weighted_residual: np.ndarray, h: np.ndarray) -> np.ndarray:
    """Internally studentized residuals ``r / sqrt(1 - h)`` (r already divided by sigma)."""
    return np.asarray(weighted_residual, float) / np.sqrt(np.clip(1.0 - h, 1e-12, None))


def cooks_distance(z: np.ndarray, h: np.ndarray, p: int) -> np.ndarray:
    """Cook's distance from standardized residuals ``z`` and leverages ``h`` for ``p`` parameters."""
    h = np.clip(h, 0.0, 1.0 - 1e-12)
    return z ** 2 * h / (max(p, 1) * (1.0 - h))


def externally_studentized(z: np.ndarray, dof: float) -> np.ndarray:
    """Externally studentized residuals from internally studentized ``z`` on ``dof`` = n - p (see module)."""
    z = np.asarray(z, float)
    if dof <= 1.0:
        return z
    return z * np.sqrt((dof - 1.0) / np.clip(dof - z ** 2, 1e-12, None))


def outlier_cut(n: int, level: float = FLAG_LEVEL, dof: float | None = None) -> float:
    """Bonferroni cut-off for |studentized residual| over ``n`` readings at family-wise ``level``.

    ``t(1 - level / (2 n), dof)`` [-] (two-sided, each reading tested at ``level / n``): the outlier
    test of Cook and Weisberg (1982), *Residuals and Influence in Regression*, sec. 2.2.3, and Weisberg
    (2005), *Applied Linear Regression*, 3rd ed., sec. 9.1.3, for the externally studentized residual
    on ``dof = n - p - 1`` degrees of freedom (the scale estimated from the readings). ``dof`` None or
    inf: the normal quantile ``z(1 - level / (2 n))``, for residuals against a known (stated) sigma.
    Holds for ``n >= 1``, ``0 < level < 1``. Example: n = 55, level 0.05, known sigma: 3.32 (a fixed
    +/-3 would flag a genuine reading of such a day with probability about 1 - 0.9973^55 = 14 %).
    """
    if n < 1:
        return float("inf")
    if not 0.0 < level < 1.0:
        raise ValueError(f"family-wise level {level} must lie strictly between 0 and 1")
    # scipy.special's quantiles, the ones scipy.stats's norm.ppf and t.ppf call: the fit does not
    # import scipy.stats (about 0.4 s; see estimate._scale)
    q = 1.0 - level / (2.0 * n)
    if dof is None or not np.isfinite(dof):
        return float(special.ndtri(q))
    if dof <= 0.0:
        return float("inf")  # no degrees of freedom left to judge a reading against the others
    return float(special.stdtrit(dof, q))
