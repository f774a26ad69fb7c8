"""Closed-pipe ranking (calib.loop.closures): the adjoint screen against direct sensitivities and
central differences, and generated days with a pipe closed in the truth but open in the model.

The adjoint identity used by the screen is that of a symmetric linear system (the global gradient
system of Todini and Pilati 1988 is symmetric: A21 = A12^T): e_g^T M^-1 b = (M^-1 e_g)^T b.
"""

import numpy as np
import pytest
import scipy.sparse as sp

from calib.calibration import make_groups
from calib.hydraulics import Snapshot
from calib.hydraulics.headloss import HW_FLOW_EXPONENT
from calib.loop.closures import ClosureFinder
from calib.loop.linear import Linearizer, split_tests
from calib.loop.trials import closure_trial


def test_adjoint_screen_matches_direct_sensitivities_and_differences(demo):
    net, tests, grouping, _ = demo
    lin = Linearizer(net, grouping)
    test = split_tests(tests)[0]
    x = lin.nominal(grouping.length_weighted(net, net.roughness), test)
    res = lin.solve(x, test, "residual")
    rough = lin.roughness(x[: lin.G])
    dhdp = -np.asarray(lin.solver.dheadloss_droughness(res)) * rough / HW_FLOW_EXPONENT
    ks = [10, 50, 200]
    node = int(test.node[1])
    dF1 = sp.csc_matrix((dhdp[ks], (ks, range(3))), shape=(lin.n_links, 3))
    dH, _ = lin.solver.sensitivities(res, dF1, sp.csc_matrix((net.n_junctions, 3)))
    dH = dH.toarray() if sp.issparse(dH) else np.asarray(dH)
    unit = sp.csc_matrix(([1.0], ([node], [0])), shape=(net.n_junctions, 1))
    _, a = lin.solver.sensitivities(res, sp.csc_matrix((lin.n_links, 1)), unit)
    a = a.toarray() if sp.issparse(a) else np.asarray(a)
    assert np.allclose(a[ks, 0] * dhdp[ks], dH[node], rtol=1e-8, atol=1e-12)
    heads = {str(net.source_ids[s]): x[lin.G + s] for s in range(lin.S)}
    flows = {str(net.node_ids[n]): q for n, q in test.flows.items()}
    for k in ks:  # resistance times e^eps: C times e^(-eps/1.852)
        r2 = rough.copy()
        r2[k] *= np.exp(-1e-4 / HW_FLOW_EXPONENT)
        h2 = lin.solver.solve(Snapshot(extra_demand=flows, source_head=heads), roughness=r2).head[node]
        assert (h2 - res.head[node]) / 1e-4 == pytest.approx(a[k, 0] * dhdp[k], rel=2e-3, abs=1e-8)


def _rank_of_closed(seed):
    tr = closure_trial(seed)
    if tr is None:
        return None
    g = make_groups(tr.network)
    finder = ClosureFinder(tr.network, g)
    test = next(t for t in split_tests(tr.tests) if t.test_id == tr.tests.test_ids[tr.test])
    state = finder.lin.nominal(g.length_weighted(tr.network, tr.network.roughness), test)
    ranked = finder.rank(test, state)
    chains = finder._series_chains(test)
    hits = [i + 1 for i, c in enumerate(ranked) if chains[c.pipe] == chains[tr.closed]]
    return hits[0] if hits else 99


@pytest.mark.parametrize("seed", [0, 1, 3, 5])
def test_the_closed_pipe_ranks_first_on_generated_days(seed):
    """Seeds where the closure is inside the grid near a test (benchmarks/closures.py reports the
    share over many seeds, with the trials where it does not rank first)."""
    assert _rank_of_closed(seed) == 1


def test_closures_command_on_the_demo_day(tmp_path, demo):
    import pandas as pd
    from calib.cli import main
    out = tmp_path / "closures.csv"
    from pathlib import Path
    root = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
    planted = demo[3]["planted"]["test_id"]  # the test with the planted wrong reading
    assert main(["closures", f"{root}/network", f"{root}/tests", "--test", planted, "--out", str(out)]) == 0
    frame = pd.read_csv(out)
    assert list(frame.columns) == ["rank", "pipe", "from", "to", "misfit_before", "misfit_after", "note"]
    assert list(frame["rank"]) == list(range(1, len(frame) + 1))
    assert (frame["misfit_after"].diff().dropna() >= 0).all()
    assert (frame["misfit_after"] <= frame["misfit_before"]).all()
    # that test's misfit is a misread gauge (truth.json), not a closure: no pipe explains much of it
    assert frame["note"].str.contains("explains little").all()
    assert main(["closures", f"{root}/network", f"{root}/tests", "--test", "T99"]) == 2


def test_effective_resistance_estimate_matches_the_exact_one(demo, monkeypatch):
    """The Sherman-Morrison factor 1 / (1 - g R) from random projections (Spielman and Srivastava 2011:
    64 vectors give R within about sqrt(2/64) = 18 % in the typical case) against the dense inverse."""
    import calib.loop.closures as closures
    net, tests, grouping, _ = demo
    finder = ClosureFinder(net, grouping)
    test = split_tests(tests)[0]
    x = finder.lin.nominal(grouping.length_weighted(net, net.roughness), test)
    res = finder.lin.solve(x, test, "residual")
    exact = finder._beta(res)
    monkeypatch.setattr(closures, "EXACT_NODES", 0)
    approx = finder._beta(res)
    gr_exact, gr_approx = 1 - 1 / exact, 1 - 1 / approx
    assert np.all(exact >= 1.0)
    assert np.median(np.abs(gr_approx - gr_exact) / np.maximum(gr_exact, 1e-3)) < 0.25
    # a dead-end pipe is a bridge: closing it cuts its junction off (g R = 1, clipped at 0.999)
    assert np.isclose(gr_exact.max(), 0.999)
