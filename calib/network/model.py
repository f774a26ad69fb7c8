"""The network model: a structure of numpy arrays with integer indices and plain SI floats.

Nodes are numbered junctions first (``0 .. n_junctions-1``), then fixed-grade sources (reservoirs, and
tanks held at their level of the snapshot). Links are pipes and, separately, pumps. This module holds
data only; reading files is in ``calib.network.tables`` / ``calib.network.geojson``, checking them in
``calib.network.validate``, solving in ``calib.hydraulics``.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from enum import IntEnum
from functools import cached_property

import numpy as np


class PipeStatus(IntEnum):
    """State of a pipe in a snapshot."""

    OPEN = 0
    CLOSED = 1
    #: Flow only in the pipe's direction ``from -> to``; closes when the flow would reverse.
    CHECK_VALVE = 2


def _empty(dtype) -> np.ndarray:
    return np.zeros(0, dtype=dtype)


@dataclass
class Pumps:
    """Pumps as links ``from -> to`` (suction to discharge), all arrays of one length.

    Head gain of a pump at flow q >= 0 [m3/s] and relative speed s [-] (affinity laws):
    ``h = s**2 * (shutoff_head - curve_r * (q / s)**curve_n)`` [m].
    """

    ids: np.ndarray = field(default_factory=lambda: _empty(object))
    from_node: np.ndarray = field(default_factory=lambda: _empty(np.int64))
    to_node: np.ndarray = field(default_factory=lambda: _empty(np.int64))
    shutoff_head: np.ndarray = field(default_factory=lambda: _empty(float))  # [m]
    curve_r: np.ndarray = field(default_factory=lambda: _empty(float))  # [m / (m3/s)**n]
    curve_n: np.ndarray = field(default_factory=lambda: _empty(float))  # [-]
    speed: np.ndarray = field(default_factory=lambda: _empty(float))  # [-], 0 = off

    def __len__(self) -> int:
        return len(self.ids)


@dataclass
class Network:
    """A water distribution network in SI units. Arrays are indexed by node or pipe number."""

    node_ids: np.ndarray  # (n_nodes,) str ids, junctions first then sources
    n_junctions: int
    elevation: np.ndarray  # (n_nodes,) [m]; for a source its elevation if given, else its head
    demand: np.ndarray  # (n_junctions,) base demand [m3/s]
    source_head: np.ndarray  # (n_sources,) fixed hydraulic grade [m]
    pipe_ids: np.ndarray  # (n_pipes,) str
    pipe_from: np.ndarray  # (n_pipes,) node index
    pipe_to: np.ndarray  # (n_pipes,) node index
    length: np.ndarray  # (n_pipes,) [m]
    diameter: np.ndarray  # (n_pipes,) inside diameter [m]
    roughness: np.ndarray  # (n_pipes,) Hazen-Williams C [-]
    minor_loss: np.ndarray = None  # (n_pipes,) sum of minor loss coefficients K [-]
    status: np.ndarray = None  # (n_pipes,) PipeStatus codes
    roughness_height: np.ndarray = None  # (n_pipes,) Darcy-Weisbach absolute roughness [m], nan if unknown
    group: np.ndarray = None  # (n_pipes,) calibration group, "" when none
    material: np.ndarray = None  # (n_pipes,) "" when unknown
    installed: np.ndarray = None  # (n_pipes,) install year, nan when unknown
    source_kind: np.ndarray = None  # (n_sources,) "reservoir" or "tank"
    source_floor: np.ndarray = None  # (n_sources,) grade of a tank's floor [m], nan when unknown
    source_level_max: np.ndarray = None  # (n_sources,) greatest water depth [m], nan when unknown
    hydrant: np.ndarray = None  # (n_junctions,) True where a hydrant stands
    x: np.ndarray = None  # (n_nodes,) map coordinate, nan when unknown
    y: np.ndarray = None
    zone: np.ndarray = None  # (n_nodes,) pressure zone or area name, "" when none
    pumps: Pumps = field(default_factory=Pumps)
    pipe_geometry: list | None = None  # per pipe a list of (x, y) vertices, when read from GeoJSON
    name: str = "network"

    def __post_init__(self):
        n, p = len(self.node_ids), len(self.pipe_ids)
        ns = n - self.n_junctions
        defaults = {
            "minor_loss": np.zeros(p), "status": np.zeros(p, dtype=np.int8),
            "roughness_height": np.full(p, np.nan), "group": np.full(p, "", dtype=object),
            "material": np.full(p, "", dtype=object), "installed": np.full(p, np.nan),
            "source_kind": np.full(ns, "reservoir", dtype=object),
            "source_floor": np.full(ns, np.nan), "source_level_max": np.full(ns, np.nan),
            "hydrant": np.zeros(self.n_junctions, dtype=bool),
            "x": np.full(n, np.nan), "y": np.full(n, np.nan), "zone": np.full(n, "", dtype=object),
        }
        for name, value in defaults.items():
            if getattr(self, name) is None:
                setattr(self, name, value)
        self.node_ids = np.asarray(self.node_ids, dtype=object)
        self.pipe_ids = np.asarray(self.pipe_ids, dtype=object)
        self.pipe_from = np.asarray(self.pipe_from, dtype=np.int64)
        self.pipe_to = np.asarray(self.pipe_to, dtype=np.int64)
        for name in ("elevation", "demand", "source_head", "length", "diameter", "roughness",
                     "minor_loss", "roughness_height", "installed", "x", "y", "source_floor",
                     "source_level_max"):
            setattr(self, name, np.asarray(getattr(self, name), dtype=float))
        self.status = np.asarray(self.status, dtype=np.int8)
        sizes = {"elevation": n, "demand": self.n_junctions, "source_head": ns, "pipe_from": p,
                 "pipe_to": p, "length": p, "diameter": p, "roughness": p, "minor_loss": p,
                 "status": p, "roughness_height": p, "group": p, "material": p, "installed": p,
                 "source_kind": ns, "source_floor": ns, "source_level_max": ns, "hydrant": self.n_junctions, "x": n, "y": n, "zone": n}
        for name, size in sizes.items():
            if len(getattr(self, name)) != size:
                raise ValueError(f"Network.{name} has {len(getattr(self, name))} entries, "
                                 f"expected {size}")

    # --- sizes and lookups -------------------------------------------------------------------
    @property
    def n_nodes(self) -> int:
        return len(self.node_ids)

    @property
    def n_sources(self) -> int:
        return self.n_nodes - self.n_junctions

    @property
    def n_pipes(self) -> int:
        return len(self.pipe_ids)

    @property
    def junction_ids(self) -> np.ndarray:
        return self.node_ids[: self.n_junctions]

    @property
    def source_ids(self) -> np.ndarray:
        return self.node_ids[self.n_junctions:]

    @cached_property
    def node_index(self) -> dict[str, int]:
        """Node id -> node number."""
        return {str(k): i for i, k in enumerate(self.node_ids)}

    @cached_property
    def pipe_index(self) -> dict[str, int]:
        """Pipe id -> pipe number."""
        return {str(k): i for i, k in enumerate(self.pipe_ids)}

    def nodes(self, ids) -> np.ndarray:
        """Node numbers of ``ids``; raises ``KeyError`` naming the first unknown id."""
        index = self.node_index
        try:
            return np.array([index[str(i)] for i in ids], dtype=np.int64)
        except KeyError as exc:
            raise KeyError(f"node '{exc.args[0]}' is not in the network") from None

    def replace(self, **changes) -> "Network":
        """A copy with some arrays replaced (e.g. ``roughness=new_c``); the rest is shared."""
        return dataclasses.replace(self, **changes)
