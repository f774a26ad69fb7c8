"""Intervals that stay physical and honest, and the readings' scale when nobody stated the gauges' accuracy.

Outside references: scipy.stats (binomial bounds on coverage, chi-square and t quantiles), a closed form
of two pipes in series (the SI Hazen-Williams form of check-values.md) profiled with scipy.optimize.brentq.
"""

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from calib import units
from calib.calibration import export, fit
from calib.calibration.synthetic import plan_tests, synthetic_tests
from calib.cli.fit import summary
from calib.hydraulics import NetworkSolver

TRUTH = np.array([120.0, 90.0, 70.0])


def _unstated(tests):
    """The readings as a crew exports them without a sigma column: nominal 1 psi, accuracy not stated."""
    tests.sigma[:] = units.PSI
    tests.sigma_stated = np.zeros(tests.n_readings, dtype=bool)
    return tests


def test_scale_from_the_scatter_when_nobody_stated_sigma_coverage_at_0_3_psi(small):
    # gauges that read to 0.3 psi, nobody said so: s^2 = S/(n-p) with the t quantile gives intervals
    # as wide as the data support and still 95 % coverage; 25 seeds x 3 groups = 75 intervals. Bounds
    # (scipy.stats.binom, were they independent): a share below 0.85 has probability ~1e-3, all 75
    # covering (share above 0.99) 0.95^75 = 2 %.
    # On the old rule (1 psi kept unless a one-sided test rejected it) they came out ~3.3 x too wide
    # and covered every time.
    net, grp, plan, solver = small
    hits, ratio, from_scatter = [], [], []
    for seed in range(25):
        tests = synthetic_tests(net, TRUTH[grp.index], plan, seed=3000 + seed, solver=solver,
                                sigma=0.3 * units.PSI)
        res = fit(net, _unstated(tests), grouping=grp, prior="none", solver=solver, refit=False,
                  influence=False)
        hits.extend((res.c_low <= TRUTH) & (TRUTH <= res.c_high))
        # the scale used against the true 0.3 psi (the sd scale with it): close to 1, not 3.3
        ratio.append(np.sqrt(res.estimate.s2) * 1.0 / 0.3)
        from_scatter.append(res.estimate.scaled and not getattr(res.estimate, "sigma_stated", True))
    share = float(np.mean(hits))
    assert 0.7 < float(np.median(ratio)) < 1.3, np.median(ratio)
    assert 0.85 <= share <= 0.99, share
    assert all(from_scatter)
    assert "scatter" in res.estimate.scale_note and "no gauge accuracy was stated" in res.estimate.scale_note


def test_a_stated_sigma_is_tested_on_both_sides(small):
    # the gauges claim 1 psi but read to 0.3 psi: the two-sided chi-square test rejects on the low side
    # (S/(n-p) near 0.09; scipy.stats.chi2 puts that far below the 2.5 % point) and the intervals shrink
    net, grp, plan, solver = small
    tests = synthetic_tests(net, TRUTH[grp.index], plan, seed=13, sigma=0.3 * units.PSI, solver=solver)
    tests.sigma[:] = units.PSI
    res = fit(net, tests, grouping=grp, prior="none", solver=solver, refit=False, influence=False)
    est = res.estimate
    assert est.sigma_stated and est.scaled and 0.03 < est.s2 < 0.25
    assert est.chi2_p < 0.05 and est.t == pytest.approx(stats.t.ppf(0.975, est.dof))
    assert any("scatter smaller than the stated gauge sigma" in f for f in res.findings)
    # the same readings stated at their true 0.3 psi: the test does not reject, the normal quantile
    tests.sigma[:] = 0.3 * units.PSI
    res2 = fit(net, tests, grouping=grp, prior="none", solver=solver, refit=False, influence=False)
    assert not res2.estimate.scaled and res2.estimate.t == pytest.approx(stats.norm.ppf(0.975))


def test_prior_rows_keep_their_own_spread_when_the_scale_comes_from_the_scatter(small):
    # only the district at x <= 150 m is tested: G3 is loaded by no test and keeps the prior's width
    # (1.96 x 15), neither shrunk nor stretched by the readings' scale of 0.3 psi
    from calib.calibration.priors import GroupPrior
    net, grp, plan, solver = small
    west = [j for j in range(net.n_junctions) if net.x[j] <= 150.0 and j > 0]
    plan_w = plan_tests(net, 6, seed=3, spread_over=west)
    tests = _unstated(synthetic_tests(net, TRUTH[grp.index], plan_w, seed=5, solver=solver,
                                      sigma=0.3 * units.PSI))
    prior = GroupPrior(c=np.array([110.0, 100.0, 100.0]), spread=np.array([15.0, 15.0, 15.0]),
                       source="test prior")
    res = fit(net, tests, grouping=grp, prior=prior, solver=solver)
    g3 = grp.names.index("G3")
    assert res.estimate.s2 < 0.3  # the readings' own scale, well below the nominal 1 psi
    half = (res.c_high[g3] - res.c_low[g3]) / 2
    assert half == pytest.approx(res.estimate.t * 15.0, rel=0.1)


def test_profile_interval_matches_the_closed_form_profile_near_the_upper_bound(series_case):
    # smooth new pipe (C 150) and small flows: the sum of squares flattens towards high C, so the
    # linearized interval reaches past 160. Reference: the closed form's S(C) and scipy's brentq for
    # S(C) - S_min = chi2(0.95, 1) (Venzon and Moolgavkar 1988), the stated sigma holding.
    case = series_case(150.0, [10.0, 15.0, 20.0, 25.0], seed=5)
    net, tests, grp, S = case.net, case.tests, case.grp, case.S
    res = fit(net, tests, grouping=grp, prior="none", refit=False, influence=False)
    est = res.estimate
    assert not est.scaled  # this seed: the stated sigma holds, so the cut-off is chi2(1)
    c_hat = optimize.minimize_scalar(S, bounds=(40.0, 160.0), method="bounded",
                                     options={"xatol": 1e-6}).x
    cut = stats.chi2.ppf(0.95, 1)
    assert res.c[0] == pytest.approx(c_hat, abs=0.05)
    lin_high = est.x[0] + est.t * est.sd[0]
    assert lin_high > 160.0 and res.c_method == ["profile likelihood"]
    low_ref = optimize.brentq(lambda c: S(c) - S(c_hat) - cut, 40.0, c_hat)
    assert res.c_low[0] == pytest.approx(low_ref, abs=0.1)
    if S(160.0) - S(c_hat) < cut:  # the tests give no upper limit below the bound
        assert res.c_high[0] == 160.0 and res.c_high_open[0]
    else:
        high_ref = optimize.brentq(lambda c: S(c) - S(c_hat) - cut, c_hat, 160.0)
        assert res.c_high[0] == pytest.approx(high_ref, abs=0.1)


def test_a_c_below_the_bounds_is_at_bound_undetermined_with_a_one_sided_limit(series_case):
    # a main far rougher than the C bounds allow (C 25, e.g. a throttled valve): the fit goes to 40;
    # that is no fitted value. The interval never leaves 40-160, at_bound is true, the tests give an
    # upper limit only, and every output says so in words, never as a fitted C
    case = series_case(25.0, [10.0, 14.0, 18.0, 22.0], seed=2)
    net, tests, grp = case.net, case.tests, case.grp
    res = fit(net, tests, grouping=grp, prior="none", refit=False, influence=False)
    assert res.c_at_bound[0] and res.c[0] == pytest.approx(40.0, abs=0.06)
    assert res.status[0] == "undetermined" and not res.c_determined[0]
    assert 40.0 <= res.c_low[0] and res.c_high[0] <= 160.0 and res.c_low_open[0]
    assert res.limit(0).startswith("C at most ")
    groups = export.groups_frame(res)
    assert np.isnan(groups.c_factor[0]) and np.isnan(groups.c_low[0]) and bool(groups.at_bound[0])
    assert groups.interval_method[0] == "profile likelihood" and not groups.determined[0]
    rough = export.roughness_frame(res)
    assert list(rough.c_factor) == [120.0, 120.0]  # the model's C, not the bound
    assert set(rough.c_source) == {"model: not determined by the tests"}
    line = summary(res).splitlines()[1]
    assert line.split()[:2] == ["G", "-"] and "at most" in line and "model C 120 kept" in line


def test_a_group_no_test_reaches_keeps_the_model_c_in_every_export(small, tmp_path):
    # --prior none and a district no test loads (the G4 on a dead-end branch): undetermined,
    # blank C in groups.csv, the model's C (110 here) in roughness.csv and pipes.geojson
    net, grp, plan, solver = small
    g3 = grp.names.index("G3")
    model = net.replace(roughness=np.where(grp.index == g3, 110.0, net.roughness))
    west = [j for j in range(net.n_junctions) if net.x[j] <= 150.0 and j > 0]
    plan_w = plan_tests(model, 6, seed=3, spread_over=west)
    tests = synthetic_tests(model, TRUTH[grp.index], plan_w, seed=5, solver=NetworkSolver(model))
    res = fit(model, tests, grouping=grp, prior="none", solver=NetworkSolver(model))
    assert res.status[g3] == "undetermined" and not res.c_determined[g3]
    assert bool(res.c_at_bound[g3]) == bool(abs(res.c[g3] - 40) < 0.06 or abs(res.c[g3] - 160) < 0.06)
    paths = export.write_outputs(res, tmp_path)
    groups = pd.read_csv(tmp_path / "groups.csv").set_index("group")
    assert np.isnan(groups.loc["G3", "c_factor"]) and groups.loc["G3", "status"] == "undetermined"
    assert not groups.loc["G3", "determined"] and groups.loc["G3", "model_c"] == 110.0
    rough = pd.read_csv(tmp_path / "roughness.csv")
    mine = rough[rough.group == "G3"]
    assert len(mine) == int(grp.n_pipes()[g3]) and (mine.c_factor == 110.0).all()
    assert (mine.c_source == "model: not determined by the tests").all()
    assert (rough[rough.group == "G1"].c_source == "calibrated").all()  # the district tested
    assert any(p.name == "pipes.geojson" for p in paths)
    import json
    feats = json.loads((tmp_path / "pipes.geojson").read_text())["features"]
    g3_pipes = set(mine.pipe_id)
    c_geo = [f["properties"]["roughness"] for f in feats if f["properties"].get("id") in g3_pipes]
    assert c_geo and all(c == pytest.approx(110.0) for c in c_geo)
    line = next(ln for ln in summary(res).splitlines() if ln.startswith("G3"))
    assert line.split()[1] == "-" and "model C 110 kept" in line


def _three_group_profile_case(small):
    """The small grid where all three groups need the profile (linearized intervals reach past 160),
    its fit before the intervals are refined, and the rise of the weighted sum of squares computed
    the long way: a tight least-squares refit of the other two C (scipy.optimize.least_squares,
    tolerances 1e-12) at each held value."""
    from calib.calibration.estimate import estimate
    from calib.calibration.problem import CalibrationProblem

    net, grp, plan, solver = small
    tests = synthetic_tests(net, np.array([70.0, 100.0, 130.0])[grp.index], plan, seed=2)
    prob = CalibrationProblem(net, tests, grp, solver=solver)
    est = estimate(prob, prob.x0, "linear", 2.0, 60, np.ones(tests.n_readings, dtype=bool))
    x_hat, S0 = est.x.copy(), float(est.residual @ est.residual)

    def rise(i, c):
        free = [k for k in range(3) if k != i]
        ref = CalibrationProblem(net, tests, grp, solver=solver)
        ref.sigma_h = prob.sigma_h

        def embed(z):
            x = x_hat.copy()
            x[free], x[i] = z, c
            return x
        sol = optimize.least_squares(lambda z: ref.residuals(embed(z)), x_hat[free],
                                     jac=lambda z: ref.jacobian(embed(z))[:, free],
                                     bounds=(ref.lower[free], ref.upper[free]), method="trf",
                                     x_scale="jac", xtol=1e-12, ftol=1e-12, gtol=1e-12)
        return float(sol.fun @ sol.fun) - S0

    return prob, est, x_hat, rise


def test_profile_point_rise_matches_a_tight_refit_from_near_and_far_starts(small):
    # one profile point: from a start on the linearized trace (a Gauss-Newton step suffices) and
    # from the optimum with the others left where they are (a refit is needed): the rise against
    # the long way's, to 0.1 % of the cut-off
    from calib.calibration.estimate import _profile_point

    prob, est, x_hat, rise = _three_group_profile_case(small)
    cut = est.t ** 2
    trace = est.cov[:, 1] / est.cov[1, 1]
    for value in (x_hat[1] - 0.5 * est.t * est.sd[1], x_hat[1] - 0.8 * est.t * est.sd[1]):
        ref = rise(1, value)
        for warm in (x_hat + (value - x_hat[1]) * trace, x_hat):
            got, x_at, slope, _trace, _drop = _profile_point(prob, est, 1, value, warm)
            assert got == pytest.approx(ref, abs=1e-3 * cut), (value, got, ref)
            assert x_at[1] == value
            # the slope (envelope theorem) against a central difference of the long way's rise
            h = 0.01
            assert slope == pytest.approx((rise(1, value + h) - rise(1, value - h)) / (2 * h),
                                          rel=0.02)


def test_profile_ends_match_a_tight_profile_on_three_groups(small):
    # every end found by the fit's Newton search (Gauss-Newton points where the step is small)
    # against the long way's profile, the end by scipy.optimize.brentq
    from calib.calibration.estimate import refine_intervals

    prob, est, x_hat, rise = _three_group_profile_case(small)
    cut = est.t ** 2
    est = refine_intervals(prob, est, prob.c_cols)
    assert est.method == ["profile likelihood"] * 3
    checked = 0
    for i in range(3):
        for end, bound, is_open in ((est.low[i], 40.0, est.low_open[i]),
                                    (est.high[i], 160.0, est.high_open[i])):
            if is_open:
                assert end == bound and rise(i, bound) < cut  # no limit on that side within the bounds
                continue
            a, b = sorted((x_hat[i], bound))
            ref = optimize.brentq(lambda c: rise(i, c) - cut, a, b, xtol=1e-4)
            assert end == pytest.approx(ref, abs=0.01), (i, end, ref)
            checked += 1
    assert checked >= 3
