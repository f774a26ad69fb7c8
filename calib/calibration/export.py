"""Exports of a fit: groups.csv, roughness.csv, readings.csv and pipes.geojson, all written atomically.

- ``groups.csv``: one row per group (other programs read it: the column names are a contract):
  ``group``; ``c_factor`` the fitted C, *empty* where the tests do not determine the group;
  ``c_low, c_high`` the 95 % interval, or the one-sided limit the tests give (the other end empty: a C
  bound is no limit); ``n_pipes``; ``length [ft]``; ``prior_c, prior_spread`` (empty without a prior);
  ``informed`` share of the group's precision from the tests (empty without a prior); ``status``
  (informed, weakly informed, undetermined); ``determined`` (true/false: false when undetermined or on
  a C bound); ``at_bound`` (true whenever the fit's C sits on a C bound); ``interval_method``
  (linearized, or profile likelihood where the linearized interval cannot be trusted);
  ``interval_text`` (the interval or limit in words, e.g. "C at most 62 at 95 %"); ``c_all_readings``
  (the fit with every reading, when readings were left out); ``model_c`` (the network's C before,
  length-weighted).
- ``roughness.csv``: one row per pipe (``pipe_id, group, c_factor, c_low, c_high, c_source``), ready for
  a bulk import into an office model: ``c_factor`` is the calibrated C where the tests determine the
  group and the model's own C where they do not or the pipe is in no group; ``c_source`` says which
  ("calibrated", "model: not determined by the tests", "model: in no group").
- ``readings.csv``: ``test_id, node, kind, observed, simulated, residual`` (observed minus simulated)
  in the chosen pressure unit, the standardized residual, ``used`` (in the final fit), ``flag`` (why
  the reading is suspect: a face check or a gross error; empty when it is not), ``cook_distance``
  (empty for a reading left out) and ``influence`` (why the fit leans on it: Cook's distance above 1,
  a leave-one-out refit that moves a C; empty otherwise). Influence is a property of where the tests
  were made, not of the reading's quality: an influential reading is often the only one that informs a
  group. Filter on ``flag`` for suspects, never on ``influence``.
- ``covariance.csv``: the covariance of the group C-factors (``group`` then one column per group).
- ``pipes.geojson``: the network with the C of roughness.csv (``calib.network.io.write_network_geojson``),
  written when the network came with coordinates or pipe geometry.
Text cells are neutralized against spreadsheet formulas by ``calib.fileio.write_csv``.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from calib import fileio, units

if TYPE_CHECKING:
    import pandas as pd

# Each table is made as named columns (``*_columns``: arrays, lists, a scalar for a whole column),
# written by ``fileio.write_table`` without pandas (a quarter of a fit command's start-up); the
# ``*_frame`` functions give the same tables as DataFrames for other callers.


def _frame(columns) -> pd.DataFrame:
    import pandas as pd
    return pd.DataFrame(dict(columns))


def groups_frame(result) -> pd.DataFrame:
    """The groups table (columns in the module docstring); undetermined groups carry no fitted C."""
    return _frame(groups_columns(result))


def groups_columns(result) -> dict:
    """``groups_frame``'s columns."""
    g = result.grouping
    det = result.c_determined
    low = np.where(result.c_low_open, np.nan, result.c_low)  # a bound is no limit the tests gave
    high = np.where(result.c_high_open, np.nan, result.c_high)
    columns = {
        "group": g.names,
        "c_factor": np.where(det, np.round(result.c, 2), np.nan),
        "c_low": np.round(low, 2),
        "c_high": np.round(high, 2),
        "n_pipes": g.n_pipes(),
        "length [ft]": np.round(g.lengths(result.network) / units.FT, 0),
        "prior_c": np.round(result.prior.c, 1) if result.prior is not None else np.nan,
        "prior_spread": np.round(result.prior.spread, 1) if result.prior is not None else np.nan,
        "informed": np.round(result.informed, 3),
        "status": result.status,
        "determined": det,
        "at_bound": result.c_at_bound,
        "interval_method": result.c_method,
        "interval_text": [result.limit(i) for i in range(g.n_groups)],
    }
    if result.first is not None:
        columns["c_all_readings"] = np.round(result.first.x[result.c_cols], 2)
    columns["model_c"] = np.round(g.length_weighted(result.network, result.network.roughness), 1)
    return columns


OTHER_PARAMETERS = ("parameter", "value", "low", "high", "unit")


def other_parameters_frame(result) -> pd.DataFrame:
    """Demand factors and source grade offsets, when fitted (empty frame otherwise)."""
    import pandas as pd
    return pd.DataFrame(other_parameters_rows(result), columns=list(OTHER_PARAMETERS))


def other_parameters_rows(result) -> list[list]:
    """``other_parameters_frame``'s rows, cells in ``OTHER_PARAMETERS`` order."""
    est = result.estimate
    return [[p.name, round(float(est.x[i]), 4), round(float(est.low[i]), 4),
             round(float(est.high[i]), 4), "[-]" if p.kind == "demand" else "[m]"]
            for i, p in enumerate(result.params) if p.kind != "c"]


def covariance_frame(result) -> pd.DataFrame:
    """Covariance of the group C-factors [C^2] (``estimate.py``), one row and column per group in
    groups.csv order; blank where a group is undetermined (no finite variance). Read by
    ``calib.fireflow`` to carry the C uncertainty into the fire flow."""
    import pandas as pd
    names = list(result.grouping.names)
    frame = pd.DataFrame(_covariance(result), columns=names)
    frame.insert(0, "group", names)
    return frame


def covariance_columns(result) -> list[tuple]:
    """``covariance_frame``'s columns, as ``(name, values)`` pairs."""
    names = list(result.grouping.names)
    cov = _covariance(result)
    return [("group", names)] + [(name, cov[:, j]) for j, name in enumerate(names)]


def _covariance(result) -> np.ndarray:
    cov = np.asarray(result.estimate.cov, float)[np.ix_(result.c_cols, result.c_cols)]
    return np.where(np.isfinite(cov), cov, np.nan)


def roughness_frame(result) -> pd.DataFrame:
    """One row per pipe: the C to import (calibrated, or the model's where undetermined) and its source."""
    return _frame(roughness_columns(result))


def roughness_columns(result) -> dict:
    """``roughness_frame``'s columns."""
    net, g = result.network, result.grouping
    idx = g.index
    gi = np.maximum(idx, 0)
    det = np.where(idx >= 0, result.c_determined[gi], False)
    low = np.where(result.c_low_open, np.nan, result.c_low)
    high = np.where(result.c_high_open, np.nan, result.c_high)
    source = np.where(idx < 0, "model: in no group",
                      np.where(det, "calibrated", "model: not determined by the tests"))
    return {
        "pipe_id": net.pipe_ids.astype(str),
        "group": [g.names[i] if i >= 0 else "" for i in idx],
        "c_factor": np.round(result.roughness_export(), 2),
        "c_low": np.round(np.where(idx >= 0, low[gi], np.nan), 2),
        "c_high": np.round(np.where(idx >= 0, high[gi], np.nan), 2),
        "c_source": source,
    }


def readings_frame(result, system: str = "us") -> pd.DataFrame:
    """Every reading with observed and simulated pressure in the display unit of ``system``."""
    return _frame(readings_columns(result, system))


def readings_columns(result, system: str = "us") -> dict:
    """``readings_frame``'s columns."""
    t, net = result.tests, result.network
    pu = units.display_unit("pressure", system)
    conv = lambda v: np.round(units.from_si(np.asarray(v, float), "pressure", pu), 2)  # noqa: E731
    return {
        "test_id": [t.test_ids[i] for i in t.test],
        "node": net.node_ids[t.node].astype(str),
        "kind": t.kind.astype(str),
        f"observed [{pu}]": conv(t.pressure),
        f"simulated [{pu}]": conv(result.simulated),
        f"residual [{pu}]": conv(result.residual),
        "standardized": np.round(result.z, 2),
        "used": result.estimate.used,
        "flag": result.flag,
        "cook_distance": np.round(result.cook, 3),
        "influence": list(result.influence) or [""] * t.n_readings,
    }


def has_geometry(network) -> bool:
    """True when the network has node coordinates or pipe vertices to draw a map from."""
    return bool(network.pipe_geometry) or bool(np.all(np.isfinite(network.x)) and
                                                np.all(np.isfinite(network.y)))


def write_outputs(result, out, system: str = "us") -> list[Path]:
    """Write the csv exports (and pipes.geojson when there is geometry) into folder ``out``."""
    out = Path(out)
    paths = [fileio.write_table(out / "groups.csv", groups_columns(result)),
             fileio.write_table(out / "roughness.csv", roughness_columns(result)),
             fileio.write_table(out / "readings.csv", readings_columns(result, system)),
             fileio.write_table(out / "covariance.csv", covariance_columns(result))]
    other = other_parameters_rows(result)
    if other:
        paths.append(fileio.write_table(out / "parameters.csv", list(zip(
            OTHER_PARAMETERS, ([row[j] for row in other] for j in range(len(OTHER_PARAMETERS)))))))
    if has_geometry(result.network):
        from calib.network.io import write_network_geojson
        calibrated = result.network.replace(roughness=result.roughness_export())
        paths.append(write_network_geojson(calibrated, out / "pipes.geojson", units=system))
    return paths
