"""What is known of each group's C before a test: a mean and a covariance (a Gaussian state).

Three starting points, each named in the outputs:

- the handbook prior (``calib.calibration.priors.group_prior``: C by material and age, one sd spread);
- the last fit sent by the office: a fit folder's ``groups.csv`` read by column name (``group``,
  ``c_factor``, ``c_low``, ``c_high``); the 95 % interval becomes an sd of ``(high - low) / (2 x 1.96)``;
  a one-sided interval (one bound blank or infinite) uses its one side; a group with no interval (blank
  cells, or an ``undetermined`` marker) or missing from the file keeps the handbook prior;
- no prior (``none``): the model's C with a wide spread (``NO_PRIOR_SD``), i.e. C anywhere in about
  40-160, the fit's default bounds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from calib.errors import InputError, Problem

#: sd of C without a prior: +/- 2 sd about the model's C spans about 40-160 (the fit's default bounds)
NO_PRIOR_SD = 30.0
Z95 = 1.959964  # two-sided 95 % point of the normal distribution (scipy.stats.norm.ppf(0.975))


@dataclass
class GroupState:
    """Mean C and covariance per group, with a line saying where they come from."""

    names: list
    mean: np.ndarray
    cov: np.ndarray
    source: str
    notes: list = field(default_factory=list)

    @property
    def sd(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov))

    def copy(self) -> "GroupState":
        return GroupState(list(self.names), self.mean.copy(), self.cov.copy(), self.source, list(self.notes))


def handbook_state(network, grouping, year: float) -> GroupState:
    """The handbook prior (``priors.group_prior``) as a state."""
    from calib.calibration.priors import SOURCE, group_prior
    gp = group_prior(network, grouping, year)
    return GroupState(list(grouping.names), np.asarray(gp.c, float).copy(),
                      np.diag(np.asarray(gp.spread, float) ** 2), f"handbook prior ({SOURCE})")


def model_state(network, grouping) -> GroupState:
    """No prior: the model's C (length-weighted per group) with sd ``NO_PRIOR_SD``."""
    c = grouping.length_weighted(network, network.roughness)
    return GroupState(list(grouping.names), np.asarray(c, float).copy(),
                      np.diag(np.full(len(c), NO_PRIOR_SD ** 2)),
                      f"no prior: the model's C with an sd of {NO_PRIOR_SD:g} (C about 40-160)")


def _number(cell) -> float:
    try:
        v = float(str(cell).strip())
    except (TypeError, ValueError):
        return math.nan
    return v


def fit_state(folder, network, grouping, fallback: GroupState) -> GroupState:
    """The last fit's C and intervals from ``folder/groups.csv``; groups it cannot inform keep ``fallback``."""
    path = Path(folder) / "groups.csv"
    if not path.is_file():
        raise InputError([Problem("no groups.csv in the fit folder", file=str(folder), field="--fit",
                                  expected="the OUT folder of python -m calib fit")])
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise InputError([Problem(f"cannot read it: {exc}", file=str(path))]) from None
    frame.columns = [str(c).strip().lower() for c in frame.columns]
    missing = [c for c in ("group", "c_factor") if c not in frame.columns]
    if missing:
        raise InputError([Problem(f"missing column(s) {', '.join(missing)}", file=str(path), row=1,
                                  expected="group, c_factor, c_low, c_high (as python -m calib fit writes)")])
    state = fallback.copy()
    state.source = f"the fit in {folder} (groups it leaves open: {fallback.source})"
    index = {n: g for g, n in enumerate(grouping.names)}
    seen = set()
    for r, row in frame.iterrows():
        name = str(row["group"]).strip()
        g = index.get(name)
        if g is None:
            state.notes.append(f"{path} row {r + 2}: group '{name}' is not in the network; ignored")
            continue
        c = _number(row["c_factor"])
        lo = _number(row.get("c_low", ""))
        hi = _number(row.get("c_high", ""))
        status = str(row.get("status", "")).strip().lower()
        if (str(row.get("undetermined", "")).strip().lower() in ("true", "yes", "1", "x")
                or str(row.get("determined", "")).strip().lower() in ("false", "no", "0")):
            status = "undetermined"  # a marker column instead of (or besides) the status
        if not math.isfinite(c) or not 0 < c < 250:
            state.notes.append(f"{path} row {r + 2}: c_factor '{row['c_factor']}' is not a C; "
                               f"group {name} keeps the prior")
            continue
        halves = [abs(v - c) for v in (lo, hi) if math.isfinite(v) and v != c]
        if not halves or status.startswith("undetermined"):
            state.notes.append(f"group {name}: the fit gives it no interval; it keeps the prior")
            seen.add(g)
            continue
        sd = max(halves) / Z95  # one-sided: its one side; two-sided: the wider side
        state.mean[g] = c
        state.cov[g, :] = 0.0
        state.cov[:, g] = 0.0
        state.cov[g, g] = sd ** 2
        seen.add(g)
    for g, name in enumerate(grouping.names):
        if g not in seen:
            state.notes.append(f"group {name}: not given by the fit; it keeps the prior")
    return state


def initial_state(network, grouping, prior: str = "handbook", fit_dir=None, year: float | None = None,
                  tests=None) -> GroupState:
    """The state to start from: ``--fit`` folder over ``--prior`` (``handbook`` or ``none``).

    The handbook prior ages cast iron to ``year`` (default: the tests' year, else this year).
    """
    key = str(prior or "none").strip().lower()
    if key not in ("handbook", "none"):
        raise InputError(f"unknown prior '{prior}'", field="--prior", expected="handbook or none")
    if key == "handbook":
        if year is None:
            from calib.calibration.fit import _test_year
            import datetime as _dt
            year = _test_year(tests) if tests is not None else float(_dt.date.today().year)
        base = handbook_state(network, grouping, year)
    else:
        base = model_state(network, grouping)
    return fit_state(fit_dir, network, grouping, base) if fit_dir else base


def default_grouping(network):
    """The network's group column; without one, groups by material and install decade, else material."""
    from calib.calibration.groups import make_groups
    from calib.errors import CalibrationError
    for rule in (None, "material,decade", "material"):
        try:
            return make_groups(network, rule)
        except (CalibrationError, InputError):
            continue
    return make_groups(network, "material")
