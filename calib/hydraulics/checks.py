"""Front-door checks of what the solver divides by or indexes with, before any iteration.

The file readers (``calib.network``) check more, with file and row; these catch networks built in
code and per-call overrides such as a calibration's trial C values. Every check lists all the
pipes at fault in one ``InputError``.
"""

from __future__ import annotations

import numpy as np

from calib.errors import InputError, Problem
from calib.hydraulics import headloss as hl
from calib.network.validate import C_RANGE


def shown_ids(ids) -> str:
    """Up to 20 ids for a message, then how many more."""
    ids = [str(i) for i in ids]
    return ", ".join(ids[:20]) + (f" and {len(ids) - 20} more" if len(ids) > 20 else "")


def check_geometry(net, link_from, link_to) -> None:
    """Lengths and diameters positive and finite, minor losses >= 0, link ends node numbers,
    pump curves usable (shutoff head > 0, r >= 0, n > 0, speed >= 0)."""
    problems = []

    def bad_pipes(mask, field, what, expected):
        if mask.any():
            problems.append(Problem(f"{what} for pipe(s) {shown_ids(net.pipe_ids[mask])}",
                                    field=field, expected=expected))

    bad_pipes(~(np.isfinite(net.length) & (net.length > 0)), "length",
              "length not a positive number", "a length in m > 0")
    bad_pipes(~(np.isfinite(net.diameter) & (net.diameter > 0)), "diameter",
              "diameter not a positive number", "an inside diameter in m > 0")
    bad_pipes(~(np.isfinite(net.minor_loss) & (net.minor_loss >= 0)), "minor_loss",
              "minor loss not a number >= 0", "a sum of loss coefficients K >= 0")
    ends = np.concatenate([link_from, link_to])
    if ends.size and (ends.min() < 0 or ends.max() >= net.n_nodes):
        problems.append(Problem("a link end is not a node number", field="pipe_from/pipe_to",
                                expected=f"0 .. {net.n_nodes - 1}"))
    p = net.pumps
    if len(p):
        h0, r, n, s = (np.asarray(v, dtype=float) for v in
                       (p.shutoff_head, p.curve_r, p.curve_n, p.speed))
        ok = (np.isfinite(h0) & (h0 > 0) & np.isfinite(r) & (r >= 0) & np.isfinite(n) & (n > 0)
              & np.isfinite(s) & (s >= 0))
        if not ok.all():
            problems.append(Problem(f"pump curve or speed not usable for pump(s) "
                                    f"{shown_ids(np.asarray(p.ids)[~ok])}", field="pumps",
                                    expected="shutoff head > 0, r >= 0, n > 0, speed >= 0"))
    if problems:
        raise InputError(problems)


def check_roughness_height(net, e) -> None:
    """Darcy-Weisbach needs an absolute roughness >= 0 [m] for every pipe."""
    bad = ~(np.isfinite(e) & (e >= 0))
    if bad.any():
        raise InputError(Problem(
            f"Darcy-Weisbach needs the absolute roughness of every pipe; missing or invalid "
            f"for {int(bad.sum())} pipe(s): {shown_ids(net.pipe_ids[bad])}", field="roughness_height",
            expected="a height in m >= 0, e.g. 0.00026 for cast iron, 1.5e-6 for PVC"))


def roughness_parameters(net, headloss: str, roughness=None):
    """``(roughness, coefficient)`` per pipe: for Hazen-Williams C and the resistance r
    (``headloss.hazen_williams_resistance``); for Darcy-Weisbach the roughness height twice."""
    if roughness is None:
        roughness = net.roughness if headloss == "hazen-williams" else net.roughness_height
    roughness = np.asarray(roughness, dtype=float)
    if roughness.shape != (net.n_pipes,):
        raise InputError(f"roughness has shape {roughness.shape}, expected ({net.n_pipes},)",
                         field="roughness", expected="one value per pipe")
    if headloss == "hazen-williams":
        bad = ~(np.isfinite(roughness) & (roughness > 0))
        if bad.any():
            raise InputError(f"Hazen-Williams C not a positive number for pipe(s) "
                             f"{shown_ids(net.pipe_ids[bad])}", field="roughness",
                             expected=f"C between {C_RANGE[0]:g} and {C_RANGE[1]:g}")
        return roughness, hl.hazen_williams_resistance(net.length, net.diameter, roughness)
    check_roughness_height(net, roughness)
    return roughness, roughness
