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


def _rank_of_closed(tr, alone=False):
    """Rank of the closed pipe (or a pipe in series with it) when ``tr``'s most affected test is
    ranked with the day's other tests (``alone``: without them); 99 when it is not among the ten listed."""
    g = make_groups(tr.network)
    finder = ClosureFinder(tr.network, g)
    day = split_tests(tr.tests)
    test = next(t for t in day if t.test_id == tr.tests.test_ids[tr.test])
    state = finder.lin.nominal(g.length_weighted(tr.network, tr.network.roughness), test)
    others = () if alone else day
    ranked = finder.rank(test, state, others=others)
    chains = finder._series_chains(test, others)
    hits = [i + 1 for i, c in enumerate(ranked) if chains[c.pipe] == chains[tr.closed]]
    return hits[0] if hits else 99


def test_the_closed_pipe_ranks_first_mostly_and_never_below_third_on_the_older_town():
    """Generated days (calib.loop.trials.closure_trial, seeds 0-11 and 23, 27: a pipe closed in the
    truth, open in the model). benchmarks/loop.py closures reports the share over 80 seeds; this is the
    same check on a few. The old method ranked it 8th and 4th on seeds 23 and 27; scored on the one
    test alone (others=()), seed 23 still ranks it 8th: the day's other tests are what fixes it."""
    trials = [t for t in (closure_trial(seed) for seed in [*range(12), 23, 27]) if t is not None]
    ranks = [_rank_of_closed(t) for t in trials]
    assert len(ranks) >= 6, ranks
    assert max(ranks) <= 3, ranks
    assert sum(r == 1 for r in ranks) >= 0.6 * len(ranks), ranks


def test_the_closed_pipe_ranks_within_three_on_the_demo_town():
    """The demo town's day (its flows and gauges) with one pipe closed in the truth
    (calib.loop.trials.demo_closure_trial); benchmarks/loop.py closures-demo counts 60 seeds."""
    from calib.loop.trials import demo_closure_trial
    ranks = [_rank_of_closed(t) for t in (demo_closure_trial(seed) for seed in (0, 2, 3)) if t is not None]
    assert len(ranks) == 3 and max(ranks) <= 3, ranks


def test_a_partly_closed_setting_pays_for_its_fitted_unknown(demo):
    # Akaike (1974): a setting chosen among 10x, 100x and closed is one more unknown; its score is the
    # misfit plus SETTING_PENALTY, a closed one's the misfit alone
    from calib.loop import closures
    from calib.loop.trials import closure_trial
    tr = closure_trial(0)
    g = make_groups(tr.network)
    finder = ClosureFinder(tr.network, g)
    day = split_tests(tr.tests)
    test = day[tr.test]
    ranked = finder.rank(test, finder.lin.nominal(g.length_weighted(tr.network, tr.network.roughness), test),
                         others=day)
    assert ranked and all(c.score == pytest.approx(c.day_after + (0 if c.multiplier == closures.CLOSED
                                                                  else closures.SETTING_PENALTY))
                          for c in ranked)
    assert [c.score for c in ranked] == sorted(c.score for c in ranked)
    assert all(c.misfit_after < c.misfit_before - closures.TIE for c in ranked)


def test_closures_command_on_the_demo_day(tmp_path, demo):
    import pandas as pd
    from calib.cli import main
    from calib.cli.closures import COLUMNS
    out = tmp_path / "closures.csv"
    from pathlib import Path
    root = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
    planted = demo[3]["planted"]
    tid = (planted[0] if isinstance(planted, list) else planted)["test_id"]
    assert main(["closures", f"{root}/network", f"{root}/tests", "--test", tid, "--out", str(out)]) == 0
    frame = pd.read_csv(out)
    assert list(frame.columns) == COLUMNS
    assert COLUMNS[:7] == ["rank", "pipe", "from", "to", "misfit_before", "misfit_after", "note"]
    # the planted test's misfit is a misread gauge (truth.json), not a closure: no pipe lowers it
    # significantly, so none is listed
    assert len(frame) == 0
    assert main(["closures", f"{root}/network", f"{root}/tests", "--test", "T99"]) == 2


def test_closures_command_finds_a_closed_pipe_on_the_demo_town(tmp_path, capsys):
    """End to end: the demo town's day read with a pipe closed in the truth, written as a tests
    folder; the command (handbook prior, running fit of the tests before) lists that pipe in its
    first three, ranked on the day's readings."""
    import pandas as pd
    from pathlib import Path
    from calib.calibration.synthetic import write_tests_folder
    from calib.cli import main
    from calib.loop.trials import demo_closure_trial
    tr = demo_closure_trial(0)
    folder = tmp_path / "tests"
    write_tests_folder(tr.tests, tr.network, folder)
    root = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
    out = tmp_path / "closures.csv"
    tid = tr.tests.test_ids[tr.test]
    assert main(["closures", f"{root}/network", str(folder), "--test", tid, "--out", str(out)]) == 0
    frame = pd.read_csv(out, keep_default_na=False)
    assert str(tr.network.pipe_ids[tr.closed]) in list(frame["pipe"][:3]), frame
    assert (frame.day_misfit_after.diff().dropna() >= -2.0 - 1e-9).all()  # by score: + 2 if partly closed
    text = capsys.readouterr().out
    assert f"other test(s) of the same day" in text


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
