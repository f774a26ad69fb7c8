"""Time reading and writing network files on generated square grids (run by hand, never in tests).

    python benchmarks/network_files.py [--sizes 1000 10000 50000]

For each size: write the grid as CSV tables and as GeoJSON (through calib.network.io), read each back
with every check, and print the median of three runs. The grids are invented test networks.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from calib.network import Network  # noqa: E402
from calib.network.io import read_network, write_network_geojson, write_network_tables  # noqa: E402


def grid(n_pipes: int) -> Network:
    """A k x k grid of 100 m, 200 mm pipes fed by one reservoir at a corner (about n_pipes pipes)."""
    k = max(2, int(round((n_pipes / 2) ** 0.5)))
    index = np.arange(k * k).reshape(k, k)
    a = np.concatenate([index[:, :-1].ravel(), index[:-1, :].ravel(), [k * k]])
    b = np.concatenate([index[:, 1:].ravel(), index[1:, :].ravel(), [0]])
    p = len(a)
    col, row = (index % k).ravel() * 100.0, (index // k).ravel() * 100.0
    return Network(
        node_ids=np.array([f"J{i}" for i in range(k * k)] + ["R1"], dtype=object),
        n_junctions=k * k, elevation=np.zeros(k * k + 1), demand=np.full(k * k, 1e-4),
        source_head=[50.0], pipe_ids=np.array([f"P{i}" for i in range(p)], dtype=object),
        pipe_from=a, pipe_to=b, length=np.full(p, 100.0), diameter=np.full(p, 0.2),
        roughness=np.full(p, 100.0), x=np.append(col, -100.0), y=np.append(row, 0.0))


def median_time(action, repeat=3) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[1000, 10000, 50000])
    args = parser.parse_args(argv)
    print(f"{'pipes':>7} {'write csv':>10} {'read csv':>10} {'write geojson':>14} "
          f"{'read geojson':>13}  [s, median of 3]")
    with tempfile.TemporaryDirectory() as tmp:
        for size in args.sizes:
            net = grid(size)
            folder, path = Path(tmp) / f"csv{size}", Path(tmp) / f"g{size}.geojson"
            w_csv = median_time(lambda: write_network_tables(net, folder))
            r_csv = median_time(lambda: read_network(folder))
            w_geo = median_time(lambda: write_network_geojson(net, path, length_unit="m"))
            r_geo = median_time(lambda: read_network(path))
            print(f"{net.n_pipes:>7} {w_csv:>10.3f} {r_csv:>10.3f} {w_geo:>14.3f} {r_geo:>13.3f}")


if __name__ == "__main__":
    main()
