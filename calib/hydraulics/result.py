"""The result of one converged steady state (plain SI arrays), as the solver returns it."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from calib.hydraulics.snapshot import Snapshot


@dataclass
class SolveResult:
    """A converged steady state. Arrays in SI: heads [m], pressures [Pa gauge], flows [m3/s].

    ``head``/``pressure`` cover all nodes (junctions, then sources); ``flow``, ``velocity`` and
    ``headloss`` (friction plus minor loss h(Q), 0 on a closed pipe) cover pipes; ``pump_flow`` pumps.
    ``negative_pressure`` lists junction ids below 0 gauge; ``isolated`` the junctions cut off from
    every source by closed links (head set to their elevation, pressure 0, no supply).
    """

    head: np.ndarray
    pressure: np.ndarray
    flow: np.ndarray
    pump_flow: np.ndarray
    velocity: np.ndarray
    headloss: np.ndarray
    iterations: int
    factorizations: int
    max_mass_error: float
    max_energy_error: float
    converged: bool
    negative_pressure: list
    isolated: list
    closed_links: list
    snapshot: Snapshot
    roughness: np.ndarray
    held_flow: dict = field(default_factory=dict)  # {held junction id: draw [m3/s]} (Snapshot.held_head)
    _grad: np.ndarray = field(default=None, repr=False)
    _active: np.ndarray = field(default=None, repr=False)
    _isolated_mask: np.ndarray = field(default=None, repr=False)

    @property
    def link_flow(self) -> np.ndarray:
        """Flows of all links, pipes then pumps [m3/s]."""
        return np.concatenate([self.flow, self.pump_flow])


