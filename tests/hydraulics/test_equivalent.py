"""Equivalent pipes (series, parallel, equivalent diameter) against the solver and closed forms."""

import numpy as np
import pytest

from calib.errors import InputError
from calib.hydraulics import (NetworkSolver, equivalent_diameter, hazen_williams_resistance,
                              parallel_resistance, series_resistance)
from calib.units import FT, INCH


def test_series_pipes_against_the_equivalent_pipe(make):
    # equivalent-pipe method: pipes in series add their K; one pipe of that K passes the same flow
    segments = [(300.0, 0.3, 120.0), (500.0, 0.25, 100.0), (200.0, 0.2, 90.0)]
    junctions = [("J1", 0.0, 0.0), ("J2", 0.0, 0.0)]
    nodes = ["A", "J1", "J2", "B"]
    pipes = [(f"P{i}", nodes[i], nodes[i + 1], *seg) for i, seg in enumerate(segments)]
    chain = NetworkSolver(make(junctions, [("A", 60.0), ("B", 45.0)], pipes)).solve()
    k_eq = series_resistance([hazen_williams_resistance(*seg) for seg in segments])
    assert chain.flow[0] == pytest.approx((15.0 / k_eq) ** (1 / 1.852), rel=1e-9)
    d_eq = equivalent_diameter(k_eq, 1000.0, 100.0)
    one = NetworkSolver(make([], [("A", 60.0), ("B", 45.0)],
                             [("E", "A", "B", 1000.0, d_eq, 100.0)])).solve()
    assert one.flow[0] == pytest.approx(chain.flow[0], rel=1e-9)


def test_parallel_pipes_against_the_equivalent_pipe(make):
    # equivalent-pipe method: K_eq = (sum K_i^(-1/1.852))^(-1.852)
    branches = [(400.0, 0.2, 110.0), (600.0, 0.3, 80.0), (350.0, 0.15, 130.0)]
    pipes = [(f"P{i}", "A", "B", *b) for i, b in enumerate(branches)]
    net = make([], [("A", 55.0), ("B", 50.0)], pipes)
    res = NetworkSolver(net).solve()
    k_eq = parallel_resistance([hazen_williams_resistance(*b) for b in branches])
    assert res.flow.sum() == pytest.approx((5.0 / k_eq) ** (1 / 1.852), rel=1e-9)
    d_eq = equivalent_diameter(k_eq, 500.0, 100.0)
    one = NetworkSolver(make([], [("A", 55.0), ("B", 50.0)],
                             [("E", "A", "B", 500.0, d_eq, 100.0)])).solve()
    assert one.flow[0] == pytest.approx(res.flow.sum(), rel=1e-9)


def test_two_equal_pipes_in_parallel_closed_form():
    # closed form: K_eq = K / 2^1.852, so D_eq = D 2^(1.852/4.8704) for the same L and C
    k = hazen_williams_resistance(1000 * FT, 8 * INCH, 100.0)
    assert parallel_resistance([k, k]) == pytest.approx(k / 2 ** 1.852, rel=1e-13)
    d = equivalent_diameter(parallel_resistance([k, k]), 1000 * FT, 100.0)
    assert d / INCH == pytest.approx(8 * 2 ** (1.852 / 4.8704), rel=1e-12)
    assert d / INCH == pytest.approx(10.41, abs=0.005)


def test_equivalent_diameter_round_trip():
    # round trip: the diameter of K recomputed from a pipe's own K is its diameter
    for d in (0.1, 0.25, 0.6):
        assert equivalent_diameter(hazen_williams_resistance(700.0, d, 95.0), 700.0, 95.0) == \
            pytest.approx(d, rel=1e-13)


@pytest.mark.parametrize("bad", [[], [1.0, -2.0], [np.nan]])
def test_bad_resistances_are_refused(bad):
    # an InputError (a ValueError) that names the function, the field and the plausible range
    with pytest.raises(InputError, match=r"series_resistance: .*field 'k'|field 'k': series_"):
        series_resistance(bad)
    with pytest.raises(InputError, match=r"positive finite resistances"):
        parallel_resistance(bad)
    assert issubclass(InputError, ValueError)


# --- property-based: any chain or bundle of pipes (hypothesis) ---------------------------------
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

_pipe = st.tuples(st.floats(10.0, 3000.0), st.sampled_from([0.1, 0.15, 0.2, 0.3, 0.6]),
                  st.floats(40.0, 150.0))


@settings(max_examples=40, deadline=None,  # `make` is a pure builder: safe to share
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(segments=st.lists(_pipe, min_size=1, max_size=6), drop=st.floats(0.5, 60.0))
def test_any_series_chain_matches_its_equivalent_pipe(make, segments, drop):
    # equivalent-pipe method (series): Q = (dH / sum K_i)^(1/1.852) for any chain
    n = len(segments)
    junctions = [(f"J{i}", 0.0, 0.0) for i in range(1, n)]
    nodes = ["A"] + [j[0] for j in junctions] + ["B"]
    pipes = [(f"P{i}", nodes[i], nodes[i + 1], *seg) for i, seg in enumerate(segments)]
    res = NetworkSolver(make(junctions, [("A", 100.0), ("B", 100.0 - drop)], pipes)).solve()
    k_eq = series_resistance([hazen_williams_resistance(*seg) for seg in segments])
    np.testing.assert_allclose(res.flow, (drop / k_eq) ** (1 / 1.852), rtol=1e-8)


@settings(max_examples=40, deadline=None,  # `make` is a pure builder: safe to share
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(branches=st.lists(_pipe, min_size=1, max_size=6), drop=st.floats(0.5, 60.0))
def test_any_parallel_bundle_matches_its_equivalent_pipe(make, branches, drop):
    # equivalent-pipe method (parallel): total Q = (dH / K_eq)^(1/1.852)
    pipes = [(f"P{i}", "A", "B", *b) for i, b in enumerate(branches)]
    res = NetworkSolver(make([], [("A", 100.0), ("B", 100.0 - drop)], pipes)).solve()
    k_eq = parallel_resistance([hazen_williams_resistance(*b) for b in branches])
    assert res.flow.sum() == pytest.approx((drop / k_eq) ** (1 / 1.852), rel=1e-10)
