"""The fit's suspect-reading cut-off (calib.calibration.flags.outlier_cut): the Bonferroni outlier
test of Cook and Weisberg (1982), *Residuals and Influence in Regression*, sec. 2.2.3 (Weisberg 2005,
*Applied Linear Regression*, sec. 9.1.3), checked against scipy.stats and by counting false flags
over many generated data sets of the size of the demo day, with no gross error among them."""

import numpy as np
import pytest
from scipy import stats

from calib.calibration import flags

N, P = 55, 5  # readings and fitted parameters of about the demo day's fit
DRAWS = 4000
LEVEL = 0.05


def test_cut_is_the_bonferroni_quantile_of_scipy():
    # scipy.stats.t and norm: each of the n readings tested at level / n, two-sided
    assert flags.outlier_cut(N, LEVEL, dof=N - P - 1) == pytest.approx(stats.t.isf(LEVEL / (2 * N), N - P - 1))
    assert flags.outlier_cut(N, LEVEL) == pytest.approx(stats.norm.isf(LEVEL / (2 * N)))
    assert flags.outlier_cut(N, LEVEL) == pytest.approx(3.317, abs=1e-3)
    assert flags.outlier_cut(1, LEVEL) == pytest.approx(stats.norm.isf(0.025))  # one reading: 1.96
    assert flags.outlier_cut(N, 0.01) > flags.outlier_cut(N, LEVEL) > flags.outlier_cut(10, LEVEL)
    assert flags.outlier_cut(N, LEVEL, dof=0) == np.inf and flags.outlier_cut(0, LEVEL) == np.inf
    with pytest.raises(ValueError, match="level"):
        flags.outlier_cut(N, 1.5)


def _draws(seed=0):
    """Externally studentized residuals (flags' own pipeline: leverage, standardized, external) of
    DRAWS linear least-squares fits with N(0, 1) errors and the scale from the residuals."""
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(N), rng.normal(size=(N, P - 1))])
    h = flags.leverage(X)
    E = rng.normal(size=(DRAWS, N))
    R = E - (E @ np.linalg.pinv(X).T) @ X.T  # (I - H) e for every draw
    s = np.sqrt(np.sum(R ** 2, axis=1) / (N - P))
    Z = flags.standardized(R / s[:, None], h)
    return np.array([flags.externally_studentized(z, N - P) for z in Z])


def test_family_wise_false_alarms_near_the_stated_level_where_a_fixed_3_cut_flags_many():
    T = _draws()
    # each externally studentized residual follows t on n - p - 1 degrees of freedom (Cook and
    # Weisberg 1982, sec. 2.2.2): the share beyond 3 matches scipy.stats.t
    per_reading = np.mean(np.abs(T) > 3.0)
    assert per_reading == pytest.approx(2 * stats.t.sf(3.0, N - P - 1), rel=0.15)
    cut = flags.outlier_cut(N, LEVEL, dof=N - P - 1)
    fixed = np.mean(np.any(np.abs(T) > 3.0, axis=1))  # days with at least one genuine reading flagged
    bonferroni = np.mean(np.any(np.abs(T) > cut, axis=1))
    # Bonferroni bounds the family-wise rate by the level; for n = 55 nearly independent tests it is
    # close to it (1 - (1 - 0.05/55)^55 = 0.0488); 4000 draws: sd 0.0034
    assert 0.035 < bonferroni < LEVEL + 0.01, bonferroni
    assert fixed > 0.15 and fixed > 4 * bonferroni, (fixed, bonferroni)
    print(f"days with a false flag: fixed +/-3 {fixed:.3f}, Bonferroni +/-{cut:.2f} {bonferroni:.3f}")


def test_a_gross_error_is_still_found_beyond_the_cut():
    # an 8 sigma error planted in one reading (the demo day plants 8 psi on 1 psi gauges)
    rng = np.random.default_rng(3)
    X = np.column_stack([np.ones(N), rng.normal(size=(N, P - 1))])
    h = flags.leverage(X)
    found = 0
    for _ in range(200):
        e = rng.normal(size=N)
        e[7] += 8.0
        r = e - X @ np.linalg.lstsq(X, e, rcond=None)[0]
        s = np.sqrt(r @ r / (N - P))
        t = flags.externally_studentized(flags.standardized(r / s, h), N - P)
        found += int(np.argmax(np.abs(t)) == 7 and abs(t[7]) > flags.outlier_cut(N, LEVEL, dof=N - P - 1))
    assert found >= 195
