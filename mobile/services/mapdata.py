"""The area's network as a map: pipes as segments, hydrants as points, from the network's x and y.

No map tiles (the app works offline): what is drawn is the office network itself. This module holds
the geometry only (plain Python and numpy, no Kivy): fitting the network into a view, turning a tap
into map coordinates, the hydrant nearest a tap, hydrants nearest first from a position, and a
device position (longitude, latitude) turned into map coordinates when the network's coordinates are
longitude and latitude themselves (RFC 7946 GeoJSON). Projected map units without a stated system
cannot be matched to a device position: then the crew taps where they stand.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

EARTH_RADIUS = 6_371_008.8  # [m] mean radius (IUGG), for the equirectangular distance below


@dataclass
class MapData:
    """Node ids and coordinates (map units), pipe end indices, and which nodes are hydrants."""

    ids: list
    x: np.ndarray
    y: np.ndarray
    hydrant: np.ndarray  # bool per node (junctions only can be hydrants)
    junction: np.ndarray  # bool per node
    pipes: np.ndarray  # (n, 2) node indices of pipes with both ends placed
    lonlat: bool  # coordinates are longitude/latitude in degrees

    @classmethod
    def from_area(cls, area) -> "MapData | None":
        """The map of ``area``'s network; None without a network or coordinates."""
        net = area.network
        if net is None:
            return None
        x, y = np.asarray(net.x, float), np.asarray(net.y, float)
        placed = np.isfinite(x) & np.isfinite(y)
        if placed.sum() < 2:
            return None
        junction = np.zeros(net.n_nodes, dtype=bool)
        junction[: net.n_junctions] = True
        hydrant = np.zeros(net.n_nodes, dtype=bool)
        hydrant[: net.n_junctions] = np.asarray(net.hydrant, dtype=bool)
        ends = np.stack([net.pipe_from, net.pipe_to], axis=1)
        ends = ends[placed[ends[:, 0]] & placed[ends[:, 1]]]
        lonlat = bool(np.all(np.abs(x[placed]) <= 180) and np.all(np.abs(y[placed]) <= 90)
                      and np.ptp(x[placed]) < 1 and np.ptp(y[placed]) < 1)
        return cls([str(i) for i in net.node_ids], x, y, hydrant & placed, junction & placed, ends,
                   lonlat)

    # --- fitting into a view -------------------------------------------------------------
    def bounds(self) -> tuple[float, float, float, float]:
        ok = np.isfinite(self.x) & np.isfinite(self.y)
        return (float(self.x[ok].min()), float(self.y[ok].min()), float(self.x[ok].max()),
                float(self.y[ok].max()))

    def fit(self, width: float, height: float, pad: float = 20.0) -> "View":
        """The view that shows the whole network in a ``width`` x ``height`` pixel box, north up,
        same scale on both axes."""
        x0, y0, x1, y1 = self.bounds()
        sx = (width - 2 * pad) / max(x1 - x0, 1e-9)
        sy = (height - 2 * pad) / max(y1 - y0, 1e-9)
        s = max(min(sx, sy), 1e-12)
        ox = pad + (width - 2 * pad - s * (x1 - x0)) / 2 - s * x0
        oy = pad + (height - 2 * pad - s * (y1 - y0)) / 2 - s * y0
        return View(s, ox, oy)

    # --- picking -------------------------------------------------------------------------
    def nearest(self, x: float, y: float, within: float = math.inf, hydrants_only: bool = False):
        """Id of the junction (or hydrant) nearest map point (x, y) within ``within`` map units;
        a hydrant wins over a plain junction at the same distance. None when none is that near."""
        mask = self.hydrant if hydrants_only else self.junction
        if not mask.any():
            return None
        d = np.hypot(self.x - x, self.y - y)
        d = np.where(mask, d - np.where(self.hydrant, 1e-9, 0.0), np.inf)
        i = int(np.argmin(d))
        return self.ids[i] if d[i] <= within else None

    def nearest_first(self, x: float, y: float, count: int = 8) -> list[tuple[str, float]]:
        """Hydrants nearest first from map point (x, y): (id, distance in map units, or m when the
        map is in longitude/latitude)."""
        idx = np.flatnonzero(self.hydrant)
        if self.lonlat:
            d = equirectangular(x, y, self.x[idx], self.y[idx])
        else:
            d = np.hypot(self.x[idx] - x, self.y[idx] - y)
        order = np.argsort(d, kind="stable")[:count]
        return [(self.ids[idx[k]], float(d[k])) for k in order]

    def position(self, lon: float, lat: float) -> tuple[float, float] | None:
        """A device position as a map point; None when the map is not in longitude/latitude."""
        return (lon, lat) if self.lonlat else None

    def where(self, node_id: str) -> tuple[float, float] | None:
        i = self.ids.index(node_id) if node_id in self.ids else -1
        if i < 0 or not (np.isfinite(self.x[i]) and np.isfinite(self.y[i])):
            return None
        return float(self.x[i]), float(self.y[i])


def equirectangular(lon0, lat0, lon, lat):
    """Distance [m] between (lon0, lat0) and (lon, lat) in degrees, equirectangular approximation
    (accurate to well under 1 % over a town; Snyder, Map Projections - A Working Manual, 1987)."""
    k = math.pi / 180.0
    dx = (np.asarray(lon) - lon0) * k * math.cos(lat0 * k)
    dy = (np.asarray(lat) - lat0) * k
    return EARTH_RADIUS * np.hypot(dx, dy)


@dataclass
class View:
    """Map units -> pixels: px = scale * x + ox, py = scale * y + oy (north up)."""

    scale: float
    ox: float
    oy: float

    def to_px(self, x, y):
        return self.scale * np.asarray(x) + self.ox, self.scale * np.asarray(y) + self.oy

    def to_map(self, px: float, py: float) -> tuple[float, float]:
        return (px - self.ox) / self.scale, (py - self.oy) / self.scale


def distance_text(d: float, lonlat: bool, unit: str) -> str:
    """'120 ft' / '37 m' for the nearest-first list (map units are taken as the network's)."""
    if lonlat:
        return f"{d:.0f} m" if unit == "m" else f"{d / 0.3048:.0f} ft"
    return f"{d:.0f} {unit}"
