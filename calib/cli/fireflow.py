"""``python -m calib fireflow NETWORK --out fireflow.csv``: fire flow available at every hydrant.

Thin: read the network and (``--fit`` / ``--roughness``) the C-factors, scan the hydrants
(``calib.fireflow``: in this process with ``--workers 0``, else on Dask), write fireflow.csv and,
beside it, fireflow.geojson and fireflow.html; print a short summary and the cautions. Bad input
exits 2; a batch that failed after its retry is named, its hydrants are rows with the error in their
note, and the command exits 1.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

from calib import fileio, limits, units
from calib.errors import InputError

CAUTION = ("Model estimates: they do not replace flow tests, local codes, the authority having "
           "jurisdiction or a licensed engineer's review for fire-protection design.")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "fireflow", help="fire flow available at every hydrant from the (calibrated) model",
        description="For each hydrant: static pressure, the flow at which its own residual reaches "
                    "--residual, the flow at which the lowest pressure elsewhere in its zone "
                    "reaches --system-minimum (and where), the smaller of the two (available), "
                    "its NFPA 291 class, and with --fit a 95 %% interval.", epilog=CAUTION)
    p.add_argument("network", metavar="NETWORK", help="network folder of CSV tables or a .geojson file")
    p.add_argument("--out", required=True, metavar="FILE.csv",
                   help="table to write; fireflow.geojson and fireflow.html go beside it")
    src = p.add_mutually_exclusive_group()
    src.add_argument("--fit", metavar="FITDIR", help="a fit's output folder: its C and C covariance")
    src.add_argument("--roughness", metavar="FILE.csv", help="a roughness.csv of C per pipe")
    p.add_argument("--residual", default="20 psi", metavar="P",
                   help="target residual at the hydrant (default 20 psi)")
    p.add_argument("--system-minimum", default="20 psi", metavar="P",
                   help="lowest pressure allowed elsewhere in the hydrant's zone (default 20 psi)")
    p.add_argument("--demand-factor", default="1", metavar="F",
                   help="multiply every base demand by F during the fire (default 1)")
    p.add_argument("--system-search", choices=("binding", "always"), default="binding",
                   help="binding (default): find the system-limited flow only where it can limit "
                        "the available flow (same available flow; flow_system left empty "
                        "elsewhere); always: at every hydrant (slower)")
    p.add_argument("--zones", choices=("hydraulic", "column"), default="hydraulic",
                   help="where a hydrant's zone for the system minimum comes from: hydraulic "
                        "(default: the model's pressure zones, split at active reducing, "
                        "sustaining and flow-limiting valves) or column (junctions.csv zone)")
    p.add_argument("--nodes", default="hydrants", metavar="WHICH",
                   help="hydrants (default: junctions marked as hydrants), all, or ids J1,J2,...")
    run_on = p.add_mutually_exclusive_group()
    run_on.add_argument("--workers", type=int, default=None, metavar="N",
                        help="Dask local cluster of N processes (default: this machine's cores; "
                             "0: no Dask, in this process)")
    run_on.add_argument("--scheduler", metavar="ADDRESS",
                        help="an existing Dask cluster, e.g. tcp://10.0.0.5:8786 (its workers need "
                             "this package installed)")
    p.add_argument("--batch-size", type=int, default=None, metavar="K",
                   help="hydrants per batch (default: about 8 batches per worker, at most 100)")
    p.add_argument("--units", choices=("us", "si"), default="us", help="units of the outputs")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)


def _pressure(text: str, option: str) -> float:
    try:
        value = units.to_si(text, "pressure", "psi")
    except ValueError as exc:
        raise InputError(str(exc), field=option, expected="a pressure such as 20psi or 140kPa") from None
    if limits.PRESSURE.refuses(value):
        raise InputError(f"'{text}' is not a plausible pressure", field=option,
                         expected=limits.PRESSURE.expected() + "; 20 psi for fire flow")
    return value


def _factor(text: str) -> float:
    try:
        value = units.parse_number(text)  # a plain number: no comma, no expression
    except ValueError:
        value = math.nan
    if limits.DEMAND_FACTOR.refuses(value):
        raise InputError(f"demand factor '{text}' is not plausible", field="--demand-factor",
                         expected=limits.DEMAND_FACTOR.expected() + ", e.g. 1.0 (average day) or "
                         "1.5 (peak)")
    return value


def run(args) -> int:
    from calib.fireflow import ScanOptions, hydrant_nodes
    from calib.fireflow.scan import ZONE_SOURCES
    from calib.fireflow import distribute, outputs
    from calib.fireflow.fitdir import read_fit
    from calib.network.io import read_network

    options = ScanOptions(residual=_pressure(args.residual, "--residual"),
                          system_minimum=_pressure(args.system_minimum, "--system-minimum"),
                          demand_factor=_factor(args.demand_factor),
                          system_search=args.system_search, zones=args.zones)
    if args.workers is not None and args.workers < 0:
        raise InputError(f"--workers {args.workers} is negative", field="--workers",
                         expected="0 (no Dask) or a number of processes")
    if args.batch_size is not None and args.batch_size < 1:
        raise InputError(f"--batch-size {args.batch_size} is below 1", field="--batch-size",
                         expected="1 or more hydrants per batch")
    out = Path(args.out)
    if out.is_dir():
        raise InputError(f"'{out}' is a folder", field="--out", expected="a .csv file to write")
    # of a fit's folder only the two files read are inputs: the fire-flow outputs of an earlier
    # run may sit beside them and are written anew
    fit_read = [Path(args.fit) / n for n in ("roughness.csv", "covariance.csv")] if args.fit else []
    fileio.check_outputs({"--out": [out, out.with_suffix(".geojson"), out.with_suffix(".html")]},
                         fileio.input_files(*(p for p in (args.network, args.roughness) if p),
                                            *fit_read))
    network = read_network(args.network)
    nodes = hydrant_nodes(network, args.nodes)
    fit = read_fit(args.fit, args.roughness, network)
    result = distribute.run(network, nodes, roughness=fit.roughness, options=options,
                            covariance=fit.covariance, workers=args.workers,
                            scheduler=args.scheduler, batch_size=args.batch_size,
                            progress=not args.quiet)
    pu, fu = units.display_unit("pressure", args.units), units.display_unit("flow", args.units)
    show = lambda v: f"{units.from_si(v, 'pressure', pu):.1f} {pu}"  # noqa: E731
    settings = {
        "network": args.network, "C-factors": fit.note, "target residual": show(options.residual),
        "system minimum": show(options.system_minimum) + " at any other junction of the hydrant's "
        f"zone ({options.zones}: {ZONE_SOURCES[options.zones]})",
        "demand factor": f"{options.demand_factor:g} x base demand",
        "system search": ("every hydrant" if options.system_search == "always" else
                          "only where it can limit the available flow (flow_system empty elsewhere: "
                          "there it is larger than the flow at residual)"),
        "interval": ("95 %, normal, first-order; from the fitted C-factors' uncertainty only "
                     "(not demands, valve positions or tank levels)")
        if fit.covariance is not None else "none",
        "run": (f"{len(nodes)} hydrants, {result.solves} solves, {result.seconds:.1f} s, "
                + (f"{result.workers} Dask workers" if result.workers else "in one process")),
    }
    csv_path = outputs.write_csv(result.flows, out, args.units)
    geo = outputs.write_geojson(network, result.flows, out.with_suffix(".geojson"), args.units)
    page = outputs.write_html(network, result.flows, out.with_suffix(".html"), settings,
                              args.units, result.failures)
    ok = [f for f in result.flows if math.isfinite(f.available)]
    if ok:
        low = min(ok, key=lambda f: f.available)
        print(f"{len(result.flows)} hydrants; lowest available "
              f"{units.from_si(low.available, 'flow', fu):.0f} {fu} at {low.node}; "
              f"{sum(1 for f in ok if f.available < f.flow_at_residual)} limited by the system "
              f"minimum elsewhere; {result.seconds:.1f} s")
    for name, value in settings.items():
        print(f"  {name}: {value}")
    print(f"wrote {csv_path}, {geo}, {page}")
    print(CAUTION)
    for failure in result.failures:
        print(f"error: {failure}", file=sys.stderr)
    return 1 if result.failures else 0
