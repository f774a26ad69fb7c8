"""The area a crew works in: the network from the office (CSV folder or GeoJSON) and its hydrants.

Hydrants are picked from this list or by id, never typed freely into a test, so that the export
matches the office model. When no network file is at hand the app still runs with an area of
"hydrants only" (ids typed and checked for shape), and the model check is unavailable.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from calib.errors import InputError, Problem
from calib.network import Network


@dataclass
class Area:
    """A loaded area: its name, the network (or None) and the sorted hydrant ids."""

    name: str
    network: Network | None = None
    hydrants: list[str] = field(default_factory=list)
    source: str = ""  # where it came from (path, or "built-in")

    @classmethod
    def from_network(cls, network: Network, name: str | None = None, source: str = "") -> "Area":
        ids = [str(i) for i in network.junction_ids[np.asarray(network.hydrant, dtype=bool)]]
        if not ids:  # a network without a hydrant column: every junction may be picked
            ids = [str(i) for i in network.junction_ids]
        return cls(name or network.name, network, sorted(ids), source)

    @classmethod
    def load(cls, path) -> "Area":
        """Read a network folder of CSV tables or a .geojson file through ``calib.network.io``."""
        path = Path(path)
        if not path.exists():
            raise InputError(Problem("no such file or folder", file=str(path),
                                     expected="a network folder or a .geojson file"))
        from calib.network.io import read_network  # the network readers; imported when needed

        network = read_network(path)
        name = path.stem if path.is_file() else path.name
        if name == "network":
            name = path.parent.name
        return cls.from_network(network, name=name.title(), source=str(path))

    def search(self, text: str, limit: int = 50) -> list[str]:
        """Hydrant ids containing ``text`` (any case), those starting with it first."""
        needle = (text or "").strip().lower()
        if not needle:
            return self.hydrants[:limit]
        starts = [h for h in self.hydrants if h.lower().startswith(needle)]
        inside = [h for h in self.hydrants if needle in h.lower() and h not in starts]
        return (starts + inside)[:limit]

    def check_hydrant(self, hydrant_id: str, field_name: str = "hydrant") -> str:
        """The id as stored in the network; raises ``InputError`` if the area does not have it."""
        hid = (hydrant_id or "").strip()
        if not hid:
            raise InputError(Problem("pick a hydrant from the list", field=field_name))
        if self.network is None:
            if len(hid) > 40 or any(c in hid for c in ",;\"\n"):
                raise InputError(Problem(f"'{hid[:40]}' does not look like a hydrant id",
                                         field=field_name, expected="letters, digits, - or _"))
            return hid
        if hid in self.hydrants:
            return hid
        hit = [h for h in self.hydrants if h.lower() == hid.lower()]
        if hit:
            return hit[0]
        close = ", ".join(self.search(hid[:3], limit=5)) or "none"
        raise InputError(Problem(f"hydrant '{hid}' is not in the area '{self.name}'", field=field_name,
                                 expected=f"one of the area's hydrants, e.g. {close}"))
