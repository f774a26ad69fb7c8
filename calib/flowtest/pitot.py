"""Discharge of a flowing hydrant outlet from a pitot reading, and the outlet coefficients.

What is here: the pitot formula of NFPA 291 in SI, the outlet coefficient by outlet shape, the extra
factor for pumper outlets read without a flow tube, and the sum over outlets. What is not: rating
(``rating.py``), quality checks (``findings.py``).
"""

from __future__ import annotations

import numpy as np

from calib.flowtest._edge import fail, scalar_or_array, si
from calib.units import GPM, INCH, PSI

#: Pitot constant of NFPA 291 / AWWA M17 in US units: Q [gpm] = 29.83 c d^2 sqrt(p), d [in], p [psi]
#: (water at 62.4 lb/ft3).
PITOT_CONSTANT_US = 29.83
#: The same constant for SI inputs, derived once from 29.83:
#: 29.83 gpm / (in^2 sqrt(psi)) = 29.83 * 6.309020e-5 / (0.0254^2 * sqrt(6894.757)) = 0.0351308
#: [m3/s per (m^2 sqrt(Pa))]; in L/min, mm, kPa it is 0.066656 (NFPA 291 prints 0.0666).
PITOT_CONSTANT_SI = PITOT_CONSTANT_US * GPM / (INCH ** 2 * np.sqrt(PSI))

#: Outlet coefficient c [-] by the shape of the outlet where it meets the barrel (NFPA 291, figure of
#: the three outlet types): smooth and well rounded 0.90; square and sharp 0.80; square and projecting
#: into the barrel 0.70.
OUTLET_COEFFICIENTS = {"smooth": 0.90, "square": 0.80, "projecting": 0.70}

#: Extra factor for a pumper outlet (4 - 4.5 in) read without a flow tube, by pitot pressure [psi]
#: (NFPA 291 table; values from memory, medium confidence): 2 psi 0.97 ... 7 psi and above 0.83.
PUMPER_FACTOR_PSI = np.array([2.0, 3.0, 4.0, 5.0, 6.0, 7.0])
PUMPER_FACTOR = np.array([0.97, 0.92, 0.89, 0.86, 0.84, 0.83])


def outlet_coefficient(shape: str) -> float:
    """Outlet coefficient c [-] for ``"smooth"`` (0.90), ``"square"`` (0.80) or ``"projecting"`` (0.70).

    Source: NFPA 291, Recommended Practice for Fire Flow Testing and Marking of Hydrants, the figure
    of the three types of hydrant outlet and their coefficients of discharge. Run a finger round the
    inside of the outlet to tell the shape.
    """
    key = str(shape).strip().lower()
    if key not in OUTLET_COEFFICIENTS:
        fail("outlet shape", f"unknown outlet shape '{shape}'",
             "one of " + ", ".join(f"{k} ({v:.2f})" for k, v in OUTLET_COEFFICIENTS.items()))
    return OUTLET_COEFFICIENTS[key]


def pumper_factor(pitot) -> float | np.ndarray:
    """Extra discharge factor [-] for a pumper outlet read without a flow tube, by pitot pressure.

    Linear between the tabulated points 2 psi 0.97, 3 psi 0.92, 4 psi 0.89, 5 psi 0.86, 6 psi 0.84,
    7 psi and above 0.83; held at 0.97 below 2 psi. Source: NFPA 291 table for pumper outlets
    (values from memory, medium confidence: check against the edition your authority uses).

    ``pitot``: pitot pressure [Pa gauge] (or a Quantity / string).
    """
    p_psi = np.asarray(si(pitot, "pressure", "pitot"), dtype=float) / PSI
    return scalar_or_array(np.interp(p_psi, PUMPER_FACTOR_PSI, PUMPER_FACTOR))


def pitot_discharge(pitot, diameter, coefficient=0.90):
    """Discharge of one outlet from its pitot reading: Q = K c d^2 sqrt(p).

    NFPA 291 (and AWWA M17) write it Q = 29.83 c d^2 sqrt(p) with Q [gpm], d [in], p [psi]; the SI
    form used here is the same equation with K = ``PITOT_CONSTANT_SI`` = 0.0351308 for Q [m3/s],
    d [m], p [Pa] (0.066656 in L/min, mm, kPa). Holds for a free jet read in the middle of the stream,
    about half a diameter out from the outlet.

    Parameters: ``pitot`` pitot (velocity) pressure [Pa gauge], ``diameter`` inside diameter of the
    outlet [m], ``coefficient`` outlet coefficient c [-] (0.70 - 0.90; see ``outlet_coefficient``).
    Each may be an SI float, a numpy array, a pint Quantity or a string such as ``"18 psi"``.

    Example: c 0.90, 2.5 in, 40 psi gives 1061.22 gpm (``pitot_discharge_gpm(40, 2.5, 0.9)``).
    """
    p = np.asarray(si(pitot, "pressure", "pitot"), dtype=float)
    d = np.asarray(si(diameter, "diameter", "outlet diameter"), dtype=float)
    try:
        c = np.asarray(coefficient, dtype=float)
    except (TypeError, ValueError):
        fail("coefficient", f"outlet coefficient {coefficient!r} is not a number", "0.5 - 1.0, usually 0.70 - 0.90")
    if np.any(~np.isfinite(p)) or np.any(p < 0):
        fail("pitot", "a pitot reading must be zero or more", "0 - 100 psi (0 - 700 kPa)")
    if np.any(~np.isfinite(d)) or np.any(d <= 0):
        fail("outlet diameter", "the outlet diameter must be more than zero", "1.5 - 6 in (38 - 150 mm)")
    if np.any(~np.isfinite(c)) or np.any(c <= 0) or np.any(c > 1):
        fail("coefficient", f"outlet coefficient {coefficient} is out of range", "0.5 - 1.0, usually 0.70 - 0.90")
    return scalar_or_array(PITOT_CONSTANT_SI * c * d ** 2 * np.sqrt(p))


def pitot_discharge_gpm(pitot_psi: float, diameter_in: float, coefficient: float = 0.90) -> float:
    """Convenience for readers of NFPA 291: Q [gpm] = 29.83 c d^2 sqrt(p), d [in], p [psi].

    Calls ``pitot_discharge`` (one implementation).
    """
    return pitot_discharge(pitot_psi * PSI, diameter_in * INCH, coefficient) / GPM


def total_flow(flows) -> float:
    """Total discharge [m3/s] of several outlets or hydrants: the sum of their flows.

    Never average the pitot readings: flow goes with sqrt(p), so the flow of an averaged pitot is not
    the average flow (NFPA 291 sums the outlet discharges).
    """
    return float(np.sum(np.asarray(flows, dtype=float)))
