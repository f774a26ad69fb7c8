"""The SuperLU fallback (no CHOLMOD: e.g. the Android build) fits the demo town as CHOLMOD does.

CI installs CHOLMOD, so the suite's fits take that path; the fallback is what a machine without
SuiteSparse runs. A fit with it must end where CHOLMOD's ends: both solve the same equations to
the same tolerances, only their round-off differs (the solver's reference tests check each
backend against scipy's dense Cholesky: tests/hydraulics/test_factor.py)."""

import numpy as np

from calib.hydraulics import factor


def _fit(net, tests):
    from calib.calibration import fit
    return fit(net, tests, influence=False)


def test_the_demo_fit_with_superlu_is_the_fit_with_the_default_backend(demo_day, monkeypatch):
    net, tests = demo_day
    monkeypatch.setenv(factor.ENV, "superlu")
    slu = _fit(net, tests)
    monkeypatch.delenv(factor.ENV)
    ref = _fit(net, tests)  # CHOLMOD where installed (CI), else SuperLU again
    # C and the intervals' ends within 1e-6 (seen here: 1.5e-10; groups.csv prints two decimals),
    # the same readings flagged, the same statuses, simulated pressures within 0.01 Pa
    np.testing.assert_allclose(slu.c, ref.c, rtol=0, atol=1e-6)
    assert slu.flag == ref.flag
    assert slu.status == ref.status
    np.testing.assert_allclose(slu.c_low, ref.c_low, rtol=0, atol=1e-6)
    np.testing.assert_allclose(slu.c_high, ref.c_high, rtol=0, atol=1e-6)
    np.testing.assert_allclose(slu.simulated, ref.simulated, rtol=0, atol=0.01)
