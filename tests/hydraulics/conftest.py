"""Builders of small networks for the solver checks (SI units, ids are plain strings)."""

import numpy as np
import pytest

from calib.network.model import Network, Pumps


def build(junctions, sources, pipes, status=None, minor_loss=None, roughness_height=None,
          pumps=None, name="test"):
    """junctions [(id, elevation m, demand m3/s)], sources [(id, head m)],
    pipes [(id, from, to, length m, diameter m, C)], pumps [(id, from, to, h0, r, n, speed)]."""
    ids = [j[0] for j in junctions] + [s[0] for s in sources]
    index = {k: i for i, k in enumerate(ids)}
    pumps_obj = Pumps()
    if pumps:
        pumps_obj = Pumps(ids=np.array([p[0] for p in pumps], dtype=object),
                          from_node=np.array([index[p[1]] for p in pumps]),
                          to_node=np.array([index[p[2]] for p in pumps]),
                          shutoff_head=np.array([p[3] for p in pumps], float),
                          curve_r=np.array([p[4] for p in pumps], float),
                          curve_n=np.array([p[5] for p in pumps], float),
                          speed=np.array([p[6] for p in pumps], float))
    return Network(
        node_ids=ids, n_junctions=len(junctions),
        elevation=[j[1] for j in junctions] + [s[1] for s in sources],
        demand=[j[2] for j in junctions], source_head=[s[1] for s in sources],
        pipe_ids=[p[0] for p in pipes], pipe_from=[index[p[1]] for p in pipes],
        pipe_to=[index[p[2]] for p in pipes], length=[p[3] for p in pipes],
        diameter=[p[4] for p in pipes], roughness=[p[5] for p in pipes],
        status=status, minor_loss=minor_loss, roughness_height=roughness_height,
        pumps=pumps_obj, name=name)


def random_looped(n_junctions, seed, extra_loops=None, n_sources=1):
    """A random connected looped network: a random spanning tree plus extra pipes, with random
    lengths, diameters, C, elevations and demands; sources join the first junctions."""
    rng = np.random.default_rng(seed)
    n = n_junctions
    junctions = [(f"J{i}", float(rng.uniform(0, 30)), float(rng.uniform(0, 5e-3))) for i in range(n)]
    sources = [(f"R{s}", float(80 - 5 * s)) for s in range(n_sources)]
    pipes = []
    for i in range(1, n):  # spanning tree
        j = int(rng.integers(0, i))
        pipes.append((i, j))
    extra = extra_loops if extra_loops is not None else n // 2
    seen = {tuple(sorted(p)) for p in pipes}
    while extra > 0:
        a, b = (int(v) for v in rng.integers(0, n, 2))
        if a != b and tuple(sorted((a, b))) not in seen:
            seen.add(tuple(sorted((a, b))))
            pipes.append((a, b))
            extra -= 1
    rows = []
    for k, (a, b) in enumerate(pipes):
        if rng.random() < 0.5:
            a, b = b, a
        rows.append((f"P{k}", f"J{a}", f"J{b}", float(rng.uniform(50, 500)),
                     float(rng.choice([0.1, 0.15, 0.2, 0.3])), float(rng.uniform(60, 140))))
    for s in range(n_sources):
        rows.append((f"PS{s}", f"R{s}", f"J{s}", 100.0, 0.4, 120.0))
    return build(junctions, sources, rows, name=f"random-{seed}")


@pytest.fixture
def two_loop():
    """Alperovits and Shamir (1977) two-loop network with the least-cost diameters
    (Savic and Walters 1997); data as in shared/reference/check-values.md (from memory, high)."""
    m3h = 1 / 3600
    junctions = [("2", 150, 100 * m3h), ("3", 160, 100 * m3h), ("4", 155, 120 * m3h),
                 ("5", 150, 270 * m3h), ("6", 165, 330 * m3h), ("7", 160, 200 * m3h)]
    inch = 0.0254
    links = [("1-2", "1", "2", 18), ("2-3", "2", "3", 10), ("2-4", "2", "4", 16),
             ("4-5", "4", "5", 4), ("4-6", "4", "6", 16), ("6-7", "6", "7", 10),
             ("3-5", "3", "5", 10), ("7-5", "7", "5", 1)]
    pipes = [(k, a, b, 1000.0, d * inch, 130.0) for k, a, b, d in links]
    return build(junctions, [("1", 210.0)], pipes, name="two-loop")


@pytest.fixture
def make():
    """The ``build`` function above, as a fixture (test modules do not import conftest)."""
    return build


@pytest.fixture
def make_random():
    """The ``random_looped`` function above, as a fixture."""
    return random_looped
