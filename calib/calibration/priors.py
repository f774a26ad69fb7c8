"""Prior C-factors by pipe material and age, from published handbook tables, with a stated spread.

Used as a regularizing prior in the fit (extra residual rows ``(C - C_prior) / spread``) so that a group
no test informs stays near its prior with a wide interval instead of drifting to a bound.

Sources (values as printed in ``/shared/reference/check-values.md``):

- Lindeburg, *Civil Engineering Reference Manual*, Hazen-Williams C table (widely reprinted):
  ductile iron cement-mortar lined 140, asbestos cement 140, PVC 150 (also AWWA M23, from memory),
  HDPE 150 (AWWA M55, from memory, low confidence), steel new unlined 140, concrete 110-140 (125 used).
- Unlined cast iron by age and diameter, 4 in / 12 in columns, as tabulated by Walski et al.,
  *Advanced Water Distribution Modeling and Management* (2003), after Lamont (1981) - from memory,
  medium-low confidence: 5 yr 118/120, 10 yr 107/111, 20 yr 89/96, 30 yr 75/87, 40 yr 64/80,
  50 yr 55/74 (the oldest rows are for 16 and 24 in mains); new cast iron 130 (Lindeburg).
- Spread: one standard deviation of the prior. Sharp and Walski (1988, JAWWA 80(11)) report a 95 %
  band of about +/-15 on C for unlined metal mains of known age; the spreads below are wider than
  that (lining and true age are seldom known for a whole group) - our judgement, "common practice".
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calib import units

SOURCE = ("Lindeburg, Civil Engineering Reference Manual (C by material); unlined cast iron by age "
          "after Lamont (1981) as tabulated in Walski et al. (2003) - values from memory")

#: material -> (C new or typical, spread [1 sd]); cast iron is aged by the table below.
TYPICAL = {
    "cast iron": (130.0, 15.0),
    "ductile iron": (140.0, 10.0),
    "asbestos cement": (140.0, 10.0),
    "pvc": (150.0, 8.0),
    "hdpe": (150.0, 8.0),
    "steel": (140.0, 15.0),
    "concrete": (125.0, 15.0),
    "unknown": (110.0, 25.0),
}
ALIASES = {
    "ci": "cast iron", "cast iron": "cast iron", "cast-iron": "cast iron", "unlined cast iron": "cast iron",
    "cast_iron": "cast iron", "castiron": "cast iron",
    "di": "ductile iron", "ductile iron": "ductile iron", "ductile": "ductile iron", "dip": "ductile iron",
    "ductile_iron": "ductile iron", "cml ductile iron": "ductile iron",
    "ac": "asbestos cement", "asbestos cement": "asbestos cement", "asbestos_cement": "asbestos cement",
    "pvc": "pvc", "upvc": "pvc", "pvc-u": "pvc", "hdpe": "hdpe", "pe": "hdpe", "polyethylene": "hdpe",
    "steel": "steel", "stl": "steel", "concrete": "concrete", "pccp": "concrete", "rcp": "concrete",
}
# Unlined cast iron: age [yr] -> C for 4 in and 12 in mains (Walski et al. 2003 after Lamont 1981).
_CI_AGE = np.array([0.0, 5.0, 10.0, 20.0, 30.0, 40.0, 50.0])
_CI_4IN = np.array([130.0, 118.0, 107.0, 89.0, 75.0, 64.0, 55.0])
_CI_12IN = np.array([130.0, 120.0, 111.0, 96.0, 87.0, 80.0, 74.0])


def normalize_material(material: str) -> str:
    """Map a material name or abbreviation onto a key of ``TYPICAL`` (``"unknown"`` when not known)."""
    key = str(material).strip().lower().replace("_", " ")
    if key in ALIASES:
        return ALIASES[key]
    # descriptive names such as "cement-lined ductile iron" or "unlined cast iron"
    for word, name in (("ductile", "ductile iron"), ("cast iron", "cast iron"), ("pvc", "pvc"),
                       ("asbestos", "asbestos cement"), ("polyethylene", "hdpe"), ("hdpe", "hdpe"),
                       ("steel", "steel"), ("concrete", "concrete")):
        if word in key:
            return name
    return "unknown"


def cast_iron_c(age_years, diameter_m):
    """C of unlined cast iron by age and diameter, interpolated in Lamont's table.

    Linear in age (0-50 yr, held beyond 50) and in diameter between the 4 in and 12 in columns (held
    outside). Source: Walski et al. (2003) after Lamont (1981), from memory (medium-low).
    Example: 20 yr, 8 in -> about 92.5.
    """
    age = np.clip(np.asarray(age_years, float), 0.0, 50.0)
    c4 = np.interp(age, _CI_AGE, _CI_4IN)
    c12 = np.interp(age, _CI_AGE, _CI_12IN)
    w = np.clip((np.asarray(diameter_m, float) / units.INCH - 4.0) / 8.0, 0.0, 1.0)
    return c4 + w * (c12 - c4)


def pipe_prior(material, installed, diameter, year: float):
    """Prior C and spread per pipe (arrays) for the given materials, install years and diameters [m].

    Pipes of unknown install year are taken as 40 years old where age matters (cast iron), with the
    spread widened by half.
    """
    mats = [normalize_material(m) for m in material]
    installed = np.asarray(installed, float)
    c = np.array([TYPICAL[m][0] for m in mats])
    spread = np.array([TYPICAL[m][1] for m in mats])
    ci = np.array([m == "cast iron" for m in mats], dtype=bool)
    if ci.any():
        known = np.isfinite(installed)
        age = np.where(known, year - installed, 40.0)
        c[ci] = cast_iron_c(age[ci], np.asarray(diameter, float)[ci])
        spread[ci & ~known] *= 1.5
    return c, spread


@dataclass
class GroupPrior:
    """Prior C and spread (1 sd) per group, with where they come from."""

    c: np.ndarray
    spread: np.ndarray
    source: str


def group_prior(network, grouping, year: float) -> GroupPrior:
    """Length-weighted prior C and spread of each group from its pipes' material and age at ``year``."""
    c, spread = pipe_prior(network.material, network.installed, network.diameter, year)
    return GroupPrior(c=grouping.length_weighted(network, c),
                      spread=grouping.length_weighted(network, spread), source=SOURCE)
