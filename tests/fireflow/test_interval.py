"""The 95 % interval of the available flow: linearised propagation of the groups' C covariance,
against finite differences and against a sampled (Monte Carlo) propagation on the demo town."""

import numpy as np
import pytest

from calib.fireflow import FireFlowScan, ScanOptions
from calib.fireflow.fitdir import read_covariance, read_fit


@pytest.fixture(scope="module")
def scan(town, fit_dir):
    inputs = read_fit(fit_dir, network=town)
    assert inputs.covariance is not None and not inputs.covariance.undetermined.any()
    # the full system search: the system flow's gradient is checked too
    return FireFlowScan(town, roughness=inputs.roughness, covariance=inputs.covariance,
                        options=ScanOptions(system_search="always"))


def _with_groups(scan, c_groups):
    cov = scan.covariance
    c = scan.roughness.copy()
    sel = cov.pipe_group >= 0
    c[sel] = np.asarray(c_groups)[cov.pipe_group[sel]]
    return FireFlowScan(scan.network, roughness=c, options=scan.options, solver=scan.solver)


def _group_c(scan):
    cov = scan.covariance
    sel = cov.pipe_group >= 0
    return np.array([scan.roughness[sel][cov.pipe_group[sel] == g][0] for g in range(cov.n_groups)])


@pytest.mark.parametrize("node", ["J017", "J322"])
def test_gradients_match_central_differences(scan, node):
    got = scan.hydrant(node)
    c0 = _group_c(scan)
    for g in range(len(c0)):
        h = 0.05
        up, down = c0.copy(), c0.copy()
        up[g] += h
        down[g] -= h
        a, b = _with_groups(scan, up).hydrant(node), _with_groups(scan, down).hydrant(node)
        fd_res = (a.flow_at_residual - b.flow_at_residual) / (2 * h)
        fd_sys = (a.flow_system - b.flow_system) / (2 * h)
        scale = max(abs(got.grad_residual).max(), 1e-9)
        assert got.grad_residual[g] == pytest.approx(fd_res, rel=1e-3, abs=1e-3 * scale)
        # the system flow comes from a search stopped within 0.02 psi: looser
        scale = max(abs(got.grad_system).max(), 1e-9)
        assert got.grad_system[g] == pytest.approx(fd_sys, rel=0.02, abs=0.02 * scale)


def test_linearised_interval_matches_sampled_propagation(scan):
    # Monte Carlo: draw the group C-factors from N(C, Cov) (JCGM 101:2008 propagation of
    # distributions), recompute the available flow, and compare its spread with the first-order
    # sd. 150 draws: the sampled sd itself is uncertain by about 1/sqrt(2 x 150) = 6 %, so 20 %.
    rng = np.random.default_rng(7)
    c0 = _group_c(scan)
    draws = rng.multivariate_normal(c0, scan.covariance.cov, size=150)
    for node in ("J017", "J113"):
        got = scan.hydrant(node)
        assert got.sd > 0 and got.low < got.available < got.high
        flows = np.array([_with_groups(scan, c).hydrant(node).available for c in draws])
        assert np.std(flows, ddof=1) == pytest.approx(got.sd, rel=0.20)
        assert np.mean(flows) == pytest.approx(got.available, abs=0.5 * got.sd)
        inside = np.mean((flows >= got.low) & (flows <= got.high))
        assert 0.88 <= inside <= 1.0  # about 95 % of the draws fall inside


def test_undetermined_group_gives_no_interval_and_says_why(scan, tmp_path):
    cov = scan.covariance
    names = cov.names
    lines = ["group," + ",".join(names)]
    for g, n in enumerate(names):
        cells = ["" if (g == 0 or k == 0) else f"{cov.cov[g, k]:.6g}" for k in range(len(names))]
        lines.append(n + "," + ",".join(cells))
    path = tmp_path / "covariance.csv"
    path.write_text("\n".join(lines) + "\n")
    groups = np.array([names[g] if g >= 0 else "" for g in cov.pipe_group], dtype=object)
    blanked = read_covariance(path, groups)
    assert blanked.undetermined.tolist() == [True] + [False] * (len(names) - 1)
    s = FireFlowScan(scan.network, roughness=scan.roughness, covariance=blanked, solver=scan.solver)
    got = s.hydrant("J017")  # J017's flow depends on the first group (CI-1930s mains)
    assert np.isnan(got.low) and names[0] in got.note


def test_exported_covariance_agrees_with_the_group_intervals(fit_dir):
    # groups.csv gives C +/- t sd; covariance.csv's diagonal must give the same sd for every group
    # (one t quantile per fit), to the 2 decimals groups.csv is rounded to
    import pandas as pd
    groups = pd.read_csv(fit_dir / "groups.csv")
    cov = pd.read_csv(fit_dir / "covariance.csv")
    assert cov["group"].tolist() == groups["group"].tolist()
    sd = np.sqrt(np.diag(cov[groups["group"].tolist()].to_numpy(float)))
    t = (groups["c_high"] - groups["c_low"]).to_numpy() / (2 * sd)
    assert np.allclose(t, t[0], atol=0.01 / sd.min()) and 1.9 < t[0] < 2.3


def test_roughness_csv_read_by_column_name_with_blanks(town, tmp_path):
    from calib.errors import InputError
    from calib.fireflow.fitdir import read_roughness
    path = tmp_path / "roughness.csv"
    # columns in another order, an extra column, a blank C (keeps the network's C)
    path.write_text("c_high,c_factor,pipe_id,extra,group\n,88.5,P001,x,CI-1950s\n,,P002,,\n")
    c, groups = read_roughness(path, town)
    k1, k2 = town.pipe_index["P001"], town.pipe_index["P002"]
    assert c[k1] == 88.5 and c[k2] == town.roughness[k2] and groups[k1] == "CI-1950s"
    path.write_text("pipe_id,c_factor\nNOPE,90\nP001,900\n")
    with pytest.raises(InputError) as err:
        read_roughness(path, town)
    text = str(err.value)
    assert "NOPE" in text and "row 2" in text and "row 3" in text and "1 to 200" in text
