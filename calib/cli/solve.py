"""``python -m calib solve NETWORK --out NODES.csv``: one steady state of a network, written to CSV.

Thin: read and check the network (``calib.network.io``), solve one snapshot
(``calib.hydraulics.NetworkSolver``), write the node table and optionally the pipe table (atomic,
through ``calib.fileio``), print a one-line summary and the caution. A bad network exits 2 with
every problem listed; a solve that does not converge exits 1 naming the worst nodes and pipes.
Nothing is written unless the solve succeeded.
"""

from __future__ import annotations

import argparse
import math
import sys

import numpy as np
import pandas as pd

from calib import fileio, limits, units
from calib.errors import InputError
from calib.units import DISPLAY, from_si

CAUTION = ("Model results are estimates from the network as described; they do not replace flow "
           "tests, local codes, the authority having jurisdiction or a licensed engineer's review "
           "for fire-protection design.")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "solve", help="solve one steady state of a network and write heads and pressures",
        description="Solve one steady state of a network (base demands times a factor) and write "
                    "node heads and pressures, optionally pipe flows.", epilog=CAUTION)
    p.add_argument("network", metavar="NETWORK",
                   help="folder with junctions.csv, sources.csv, pipes.csv (pumps.csv), or a "
                        ".geojson file")
    p.add_argument("--out", required=True, metavar="FILE.csv", help="node table to write")
    p.add_argument("--pipes", metavar="PIPES.csv", help="also write pipe flows, velocities, losses")
    p.add_argument("--units", choices=("us", "si"), default="us",
                   help="units of the output columns (default us: ft, psi, gpm)")
    p.add_argument("--demand-factor", type=str, default="1", metavar="F",
                   help="multiply every base demand by F (default 1)")
    p.add_argument("--headloss", choices=("hazen-williams", "darcy-weisbach"),
                   default="hazen-williams", help="head-loss law (default hazen-williams)")
    p.set_defaults(func=run)


def _demand_factor(text: str) -> float:
    try:
        value = units.parse_number(text)
    except ValueError:
        value = math.nan
    if limits.DEMAND_FACTOR.refuses(value):
        raise InputError(f"demand factor '{text}' is not a number in the plausible range",
                         field="--demand-factor", expected=f"{limits.DEMAND_FACTOR.expected()}: "
                         "e.g. 1.0 for base demand, 2.5 for a peak hour")
    if limits.DEMAND_FACTOR.unusual(value):
        print(f"warning: {limits.DEMAND_FACTOR.warning(value, '--demand-factor')}", file=sys.stderr)
    return value


def node_table(network, result, units: str) -> pd.DataFrame:
    u = DISPLAY[units]
    return pd.DataFrame({
        "node": network.node_ids.astype(str),
        f"head [{u['head']}]": from_si(result.head, "head", u["head"]),
        f"pressure [{u['pressure']}]": from_si(result.pressure, "pressure", u["pressure"]),
    })


def pipe_table(network, result, units: str) -> pd.DataFrame:
    """Pipes, then pumps (velocity empty; headloss = head at from minus head at to, < 0 for a gain)."""
    u = DISPLAY[units]
    pumps = network.pumps
    pump_loss = result.head[pumps.from_node] - result.head[pumps.to_node]
    return pd.DataFrame({
        "pipe": np.concatenate([network.pipe_ids, pumps.ids]).astype(str),
        f"flow [{u['flow']}]": from_si(np.concatenate([result.flow, result.pump_flow]), "flow",
                                       u["flow"]),
        f"velocity [{u['velocity']}]": from_si(np.concatenate(
            [result.velocity, np.full(len(pumps), np.nan)]), "velocity", u["velocity"]),
        f"headloss [{u['headloss']}]": from_si(np.concatenate([result.headloss, pump_loss]),
                                               "headloss", u["headloss"]),
    })


def summary(network, result, units: str) -> str:
    u = DISPLAY[units]
    nj = network.n_junctions
    pressure = result.pressure[:nj]
    live = np.ones(nj, dtype=bool)
    isolated = result.isolated
    if isolated:
        live[network.nodes(isolated)] = False
    low = int(np.flatnonzero(live)[np.argmin(pressure[live])]) if live.any() else 0
    negative = list(result.negative_pressure)
    text = (f"solved {network.name}: {nj} junctions, {network.n_pipes} pipes, "
            f"{result.iterations} iterations, max mass error "
            f"{from_si(result.max_mass_error, 'flow', u['flow']):.3g} {u['flow']}, lowest pressure "
            f"{from_si(pressure[low], 'pressure', u['pressure']):.1f} {u['pressure']} at "
            f"{network.node_ids[low]}, negative pressures: "
            + (f"{len(negative)} ({', '.join(map(str, negative[:5]))}"
               f"{', ...' if len(negative) > 5 else ''})" if negative else "none"))
    if isolated:
        text += f", cut off by closed links: {len(isolated)} junction(s)"
    return text


def run(args: argparse.Namespace) -> int:
    from calib.hydraulics import NetworkSolver, Snapshot
    from calib.network.io import read_network

    factor = _demand_factor(args.demand_factor)
    fileio.check_outputs({"--out": args.out, "--pipes": args.pipes},
                         fileio.input_files(args.network))
    network = read_network(args.network)
    solver = NetworkSolver(network, headloss=args.headloss)
    result = solver.solve(Snapshot(demand_factor=factor, label="solve"))
    nodes = node_table(network, result, args.units)
    pipes = pipe_table(network, result, args.units) if args.pipes else None
    for option, path, table in (("--out", args.out, nodes), ("--pipes", args.pipes, pipes)):
        if table is None:
            continue
        try:
            fileio.write_csv(path, table, float_format="%.8g")
        except OSError as exc:
            raise InputError(f"cannot write '{path}': {exc.strerror or exc}", field=option,
                             expected="a file path in a folder you can write to") from None
    print(summary(network, result, args.units))
    print(CAUTION)  # as ``fit`` does: the figures may be read as a basis for fire-flow decisions
    return 0
