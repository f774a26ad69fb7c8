"""Exports of a fit: groups.csv, roughness.csv, readings.csv and pipes.geojson, all written atomically.

- ``groups.csv``: one row per group - fitted C with its 95 % interval, pipes, prior, how informed, the
  C of the fit with every reading (when readings were left out), whether C sits at a bound.
- ``roughness.csv``: one row per pipe (``pipe_id, group, c_factor, c_low, c_high``), ready for a bulk
  import into an office model; pipes in no group keep their C and have empty interval cells.
- ``readings.csv``: ``test_id, node, kind, observed, simulated, residual`` (observed minus simulated)
  in the chosen pressure unit, the standardized residual, and ``flag`` (empty when the reading fits).
- ``covariance.csv``: the covariance of the group C-factors (``group`` then one column per group).
- ``pipes.geojson``: the network with the calibrated C (``calib.network.io.write_network_geojson``),
  written when the network came with coordinates or pipe geometry.
Text cells are neutralized against spreadsheet formulas by ``calib.fileio.write_csv``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from calib import fileio, units


def groups_frame(result) -> pd.DataFrame:
    """The groups table (C, interval, pipes, prior, informed share, status, first-fit C)."""
    g = result.grouping
    frame = pd.DataFrame({
        "group": g.names,
        "c_factor": np.round(result.c, 2),
        "c_low": np.round(result.c_low, 2),
        "c_high": np.round(result.c_high, 2),
        "n_pipes": g.n_pipes(),
        "length [ft]": np.round(g.lengths(result.network) / units.FT, 0),
        "prior_c": np.round(result.prior.c, 1) if result.prior is not None else np.nan,
        "prior_spread": np.round(result.prior.spread, 1) if result.prior is not None else np.nan,
        "informed": np.round(result.informed, 3),
        "status": result.status,
        "at_bound": result.c_at_bound,
    })
    if result.first is not None:
        frame["c_all_readings"] = np.round(result.first.x[result.c_cols], 2)
    frame["model_c"] = np.round(g.length_weighted(result.network, result.network.roughness), 1)
    return frame


def other_parameters_frame(result) -> pd.DataFrame:
    """Demand factors and source grade offsets, when fitted (empty frame otherwise)."""
    est = result.estimate
    rows = [{"parameter": p.name, "value": round(float(est.x[i]), 4), "low": round(float(est.low[i]), 4),
             "high": round(float(est.high[i]), 4), "unit": "[-]" if p.kind == "demand" else "[m]"}
            for i, p in enumerate(result.params) if p.kind != "c"]
    return pd.DataFrame(rows, columns=["parameter", "value", "low", "high", "unit"])


def covariance_frame(result) -> pd.DataFrame:
    """Covariance of the group C-factors [C^2] (``estimate.py``), one row and column per group in
    groups.csv order; blank where a group is undetermined (no finite variance). Read by
    ``calib.fireflow`` to carry the C uncertainty into the fire flow."""
    names = list(result.grouping.names)
    cov = np.asarray(result.estimate.cov, float)[np.ix_(result.c_cols, result.c_cols)]
    cov = np.where(np.isfinite(cov), cov, np.nan)
    frame = pd.DataFrame(cov, columns=names)
    frame.insert(0, "group", names)
    return frame


def roughness_frame(result) -> pd.DataFrame:
    """One row per pipe with its calibrated C and its group's interval."""
    net, g = result.network, result.grouping
    idx = g.index
    c = result.roughness()
    low = np.where(idx >= 0, result.c_low[np.maximum(idx, 0)], np.nan)
    high = np.where(idx >= 0, result.c_high[np.maximum(idx, 0)], np.nan)
    return pd.DataFrame({
        "pipe_id": net.pipe_ids.astype(str),
        "group": [g.names[i] if i >= 0 else "" for i in idx],
        "c_factor": np.round(c, 2), "c_low": np.round(low, 2), "c_high": np.round(high, 2),
    })


def readings_frame(result, system: str = "us") -> pd.DataFrame:
    """Every reading with observed and simulated pressure in the display unit of ``system``."""
    t, net = result.tests, result.network
    pu = units.display_unit("pressure", system)
    conv = lambda v: np.round(units.from_si(np.asarray(v, float), "pressure", pu), 2)  # noqa: E731
    return pd.DataFrame({
        "test_id": [t.test_ids[i] for i in t.test],
        "node": net.node_ids[t.node].astype(str),
        "kind": t.kind.astype(str),
        f"observed [{pu}]": conv(t.pressure),
        f"simulated [{pu}]": conv(result.simulated),
        f"residual [{pu}]": conv(result.residual),
        "standardized": np.round(result.z, 2),
        "used": result.estimate.used,
        "flag": result.flag,
    })


def has_geometry(network) -> bool:
    """True when the network has node coordinates or pipe vertices to draw a map from."""
    return bool(network.pipe_geometry) or bool(np.all(np.isfinite(network.x)) and
                                                np.all(np.isfinite(network.y)))


def write_outputs(result, out, system: str = "us") -> list[Path]:
    """Write the csv exports (and pipes.geojson when there is geometry) into folder ``out``."""
    out = Path(out)
    paths = [fileio.write_csv(out / "groups.csv", groups_frame(result)),
             fileio.write_csv(out / "roughness.csv", roughness_frame(result)),
             fileio.write_csv(out / "readings.csv", readings_frame(result, system)),
             fileio.write_csv(out / "covariance.csv", covariance_frame(result))]
    other = other_parameters_frame(result)
    if len(other):
        paths.append(fileio.write_csv(out / "parameters.csv", other))
    if has_geometry(result.network):
        from calib.network.io import write_network_geojson
        calibrated = result.network.replace(roughness=result.roughness())
        paths.append(write_network_geojson(calibrated, out / "pipes.geojson", units=system))
    return paths
