"""Calibration groups: which pipes share one fitted C-factor.

Either the ``group`` column of pipes.csv, or a rule built from pipe attributes:
``material``, ``decade`` (of the install year) and ``diameter`` bands (default edges 6.5, 10.5 and
16.5 in, i.e. up to 6 in, 8-10 in, 12-16 in, above 16 in; ``diameter=8,12`` sets other edges in inches).
Pipes in no group (empty group column) keep their model C. Closed pipes are grouped but carry no flow,
so they are never informed by a test.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calib import limits, units
from calib.errors import CalibrationError, InputError, Problem

RULE_KEYS = ("group", "material", "decade", "diameter")
DEFAULT_BANDS_IN = (6.5, 10.5, 16.5)


@dataclass
class Grouping:
    """Group names (parameter order) and each pipe's group number (-1 when in no group)."""

    names: list[str]
    index: np.ndarray  # (n_pipes,) int
    rule: str

    @property
    def n_groups(self) -> int:
        return len(self.names)

    def n_pipes(self) -> np.ndarray:
        """Pipes per group."""
        return np.bincount(self.index[self.index >= 0], minlength=self.n_groups)

    def lengths(self, network) -> np.ndarray:
        """Total pipe length per group [m]."""
        sel = self.index >= 0
        return np.bincount(self.index[sel], weights=network.length[sel], minlength=self.n_groups)

    def length_weighted(self, network, per_pipe) -> np.ndarray:
        """Length-weighted mean of a per-pipe quantity over each group's pipes (0 for a group of no length)."""
        sel = self.index >= 0
        total = self.lengths(network)
        num = np.bincount(self.index[sel], weights=network.length[sel] * np.asarray(per_pipe, float)[sel],
                          minlength=self.n_groups)
        return num / np.where(total > 0, total, 1.0)

    def per_pipe(self, per_group, fallback) -> np.ndarray:
        """Per-pipe values from one value per group; pipes in no group keep ``fallback`` (per pipe)."""
        out = np.array(fallback, dtype=float, copy=True)
        sel = self.index >= 0
        out[sel] = np.asarray(per_group, float)[self.index[sel]]
        return out


def _band_labels(edges_in: tuple[float, ...]) -> list[str]:
    labels = [f"<= {edges_in[0]:g} in"]
    labels += [f"{a:g}-{b:g} in" for a, b in zip(edges_in[:-1], edges_in[1:])]
    labels.append(f"> {edges_in[-1]:g} in")
    return labels


def _edge(value: float, text: str) -> float:
    """A diameter band edge [in], inside the plausible pipe diameters (``calib.limits``)."""
    if limits.PIPE_DIAMETER.refuses(value * units.INCH):
        raise InputError(f"band edge '{text}' is not a plausible pipe diameter", field="--group-by",
                         expected=f"edges in inches within {limits.PIPE_DIAMETER.expected()}")
    return value


def parse_rule(rule: str | None) -> list[tuple[str, tuple[float, ...] | None]]:
    """``"material,decade,diameter=8,12"`` -> [("material", None), ("decade", None), ("diameter", (8, 12))].

    Numbers following ``diameter=`` are its band edges in inches. Raises ``InputError`` on unknown keys.
    """
    if rule is None or str(rule).strip() == "":
        return [("group", None)]
    parts: list[tuple[str, tuple[float, ...] | None]] = []
    for token in [t.strip().lower() for t in str(rule).split(",") if t.strip()]:
        try:
            edge = units.parse_number(token)
        except ValueError:
            edge = None
        if edge is not None:
            edge = _edge(edge, token)
            if not parts or parts[-1][0] != "diameter":
                raise InputError(f"band edge {token} does not follow 'diameter='", field="--group-by",
                                 expected="e.g. material,diameter=8,12")
            parts[-1] = ("diameter", parts[-1][1] + (edge,))
            continue
        key, _, first = token.partition("=")
        if key not in RULE_KEYS:
            raise InputError(f"unknown grouping key '{key}'", field="--group-by",
                             expected="a comma list of " + ", ".join(RULE_KEYS))
        if key == "diameter":
            try:
                edges = (units.parse_number(first),) if first else ()
            except ValueError:
                raise InputError(f"band edge '{first}' is not a number", field="--group-by",
                                 expected="diameter band edges in inches, e.g. diameter=8,12") from None
            parts.append((key, tuple(_edge(e, first) for e in edges)))
        else:
            parts.append((key, None))
    out = []
    for key, edges in parts:
        if key == "diameter":
            edges = tuple(sorted(edges)) if edges else DEFAULT_BANDS_IN
        out.append((key, edges))
    return out


def make_groups(network, rule: str | None = None) -> Grouping:
    """Assign every pipe to a calibration group by ``rule`` (see ``parse_rule``; None: the group column)."""
    parts = parse_rule(rule)
    n = network.n_pipes
    labels = [[] for _ in range(n)]
    in_group = np.ones(n, dtype=bool)
    for key, edges in parts:
        if key == "group":
            col = np.array([str(g).strip() for g in network.group], dtype=object)
            in_group &= col != ""
            for k in range(n):
                labels[k].append(col[k])
        elif key == "material":
            for k, m in enumerate(network.material):
                labels[k].append(str(m).strip().lower() or "unknown material")
        elif key == "decade":
            for k, year in enumerate(network.installed):
                labels[k].append(f"{int(year // 10 * 10)}s" if np.isfinite(year) else "unknown decade")
        else:
            names = _band_labels(edges)
            band = np.searchsorted(np.asarray(edges) * units.INCH, network.diameter, side="right")
            for k in range(n):
                labels[k].append(names[band[k]])
    keys = [" / ".join(lab) if in_group[k] else "" for k, lab in enumerate(labels)]
    names = sorted({k for k in keys if k})
    if not names:
        raise CalibrationError(
            "no pipe is in a calibration group: pipes.csv has no 'group' values; "
            "use a rule such as --group-by material,decade")
    lookup = {name: i for i, name in enumerate(names)}
    index = np.array([lookup.get(k, -1) for k in keys], dtype=np.int64)
    return Grouping(names=names, index=index, rule=rule or "group column")


def check_names(grouping: Grouping, wanted) -> None:
    """Raise ``InputError`` for group names not in ``grouping`` (used by options naming groups)."""
    bad = [w for w in wanted if w not in grouping.names]
    if bad:
        raise InputError([Problem(f"group '{b}' is not a calibration group", field="group",
                                  expected=", ".join(grouping.names)) for b in bad])
