"""Read the C-factors (and their covariance) of a fit's output folder for the fire-flow scan.

Read by column name, so added columns do not matter; blank cells are tolerated:
- ``roughness.csv`` (``pipe_id``, ``group``, ``c_factor``): a pipe with a blank C keeps the network's C;
- ``covariance.csv`` (``group`` then one column per group, written by
  ``calib.calibration.export``): a blank diagonal marks an undetermined group (no finite variance),
  blank off-diagonals count as 0. Without it the scan runs without intervals and says so.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from calib import units
from calib.errors import InputError, Problem
from calib.fireflow.scan import GroupCovariance


@dataclass
class FitInputs:
    roughness: np.ndarray  # per pipe C
    covariance: GroupCovariance | None
    note: str  # where the C and the interval came from, for the outputs


def _read(path: Path, required: tuple[str, ...]) -> pd.DataFrame:
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read {path}: {exc}", file=str(path)) from None
    frame.columns = [str(c).strip() for c in frame.columns]
    missing = [c for c in required if c not in frame.columns]
    if missing:
        raise InputError(f"{path.name} lacks column(s) {', '.join(missing)}", file=str(path),
                         expected="the columns written by python -m calib fit: "
                                  + ", ".join(required))
    return frame


def _number(text: str) -> float:
    try:  # a plain number (calib.units): "1_000", fullwidth digits or a comma are not read
        return units.parse_number(str(text)) if str(text).strip() else np.nan
    except ValueError:
        return np.nan


def read_roughness(path, network) -> tuple[np.ndarray, np.ndarray]:
    """Per-pipe C from a roughness.csv (blank keeps the network's) and each pipe's group name."""
    path = Path(path)
    frame = _read(path, ("pipe_id", "c_factor"))
    c = network.roughness.copy()
    group = np.full(network.n_pipes, "", dtype=object)
    problems = []
    index = network.pipe_index
    for row, rec in enumerate(frame.to_dict("records"), start=2):
        pid = str(rec["pipe_id"]).strip()
        k = index.get(pid)
        if k is None:
            problems.append(Problem("pipe is not in the network", file=str(path), row=row, id=pid,
                                    field="pipe_id", expected="pipe ids of the network"))
            continue
        value = _number(rec["c_factor"])
        if np.isfinite(value):
            if not 1.0 <= value <= 200.0:
                problems.append(Problem(f"C {value:g} is not plausible", file=str(path), row=row,
                                        id=pid, field="c_factor", expected="1 to 200"))
                continue
            c[k] = value
        group[k] = str(rec.get("group", "")).strip()
    if problems:
        raise InputError(problems)
    return c, group


def read_covariance(path, pipe_group_names) -> GroupCovariance:
    """The group C covariance of a covariance.csv, with each pipe's group number."""
    path = Path(path)
    frame = _read(path, ("group",))
    names = [str(n).strip() for n in frame["group"]]
    missing = [n for n in names if n not in frame.columns]
    if missing:
        raise InputError(f"{path.name} lacks the column(s) of group(s) {', '.join(missing)}",
                         file=str(path), expected="a square table: one column per group row")
    cov = np.array([[_number(v) for v in frame[n]] for n in names], dtype=float).T
    diag = np.diag(cov)
    undetermined = ~(np.isfinite(diag) & (diag >= 0))
    cov = np.where(np.isfinite(cov), cov, 0.0)
    cov[undetermined, :] = 0.0
    cov[:, undetermined] = 0.0
    cov = 0.5 * (cov + cov.T)
    lookup = {n: k for k, n in enumerate(names)}
    pipe_group = np.array([lookup.get(str(g), -1) for g in pipe_group_names], dtype=np.int64)
    return GroupCovariance(names=names, cov=cov, pipe_group=pipe_group, undetermined=undetermined)


def read_fit(folder=None, roughness=None, network=None) -> FitInputs:
    """C (and covariance when the folder has one) from ``folder`` (a fit's output) or a lone
    ``roughness`` csv; neither: the network's own C."""
    if folder is None and roughness is None:
        return FitInputs(network.roughness.copy(), None, "C of the network file (no fit given)")
    if folder is not None:
        folder = Path(folder)
        if not folder.is_dir():
            raise InputError(f"'{folder}' is not a folder", field="--fit",
                             expected="the --out folder of python -m calib fit")
        c, groups = read_roughness(folder / "roughness.csv", network)
        cov_path = folder / "covariance.csv"
        if not cov_path.exists():
            return FitInputs(c, None, f"C of {folder / 'roughness.csv'}; no covariance.csv in the "
                                      "folder (re-run python -m calib fit): no intervals")
        cov = read_covariance(cov_path, groups)
        return FitInputs(c, cov, f"C of {folder / 'roughness.csv'}; 95 % intervals from "
                                 f"{cov_path.name} (first-order propagation)")
    c, _ = read_roughness(roughness, network)
    return FitInputs(c, None, f"C of {roughness}; no intervals (give --fit FITDIR for them)")
