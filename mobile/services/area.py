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

    @property
    def junctions(self) -> list[str]:
        """Every junction id of the network, sorted (empty without a network)."""
        if self.network is None:
            return []
        return sorted(str(i) for i in self.network.junction_ids)

    def search(self, text: str, limit: int = 50) -> list[str]:
        """Hydrant ids containing ``text`` (any case), those starting with it first; then junctions
        the model lists no hydrant at (a crew may test any junction)."""
        needle = (text or "").strip().lower()
        if not needle:
            return self.hydrants[:limit]
        pool = self.hydrants + [j for j in self.junctions if j not in set(self.hydrants)]
        starts = [h for h in pool if h.lower().startswith(needle)]
        inside = [h for h in pool if needle in h.lower() and h not in starts]
        return (starts + inside)[:limit]

    def is_hydrant(self, node_id: str) -> bool:
        return self.network is None or node_id in self.hydrants

    def check_hydrant(self, hydrant_id: str, field_name: str = "hydrant") -> str:
        """The id as stored in the network (any junction); raises ``InputError`` when the area has
        no junction of that id. See ``hydrant_note`` for a junction without a hydrant."""
        hid = (hydrant_id or "").strip()
        if not hid:
            raise InputError(Problem("no hydrant picked yet: tap one in the list, or type its id",
                                     field=field_name))
        if self.network is None:
            if len(hid) > 40 or any(c in hid for c in ",;\"\n"):
                raise InputError(Problem(f"'{hid[:40]}' does not look like a hydrant id",
                                         field=field_name, expected="letters, digits, - or _"))
            return hid
        ids = self.hydrants + self.junctions
        if hid in ids:
            return hid
        hit = [h for h in ids if h.lower() == hid.lower()]
        if hit:
            return hit[0]
        close = self.search(hid[:3], limit=5) or self.search(hid[:1], limit=5)
        hint = (f"an id such as {', '.join(close)}" if close else
                "the id painted on the hydrant as the office network spells it")
        raise InputError(Problem(f"'{hid}' is not a junction of the area '{self.name}'",
                                 field=field_name, expected=hint))

    def hydrant_note(self, node_id: str) -> str:
        """A note when the model lists no hydrant at ``node_id`` ('' when it does)."""
        if self.is_hydrant(node_id):
            return ""
        return (f"Note: the model lists no hydrant at junction {node_id}; it is used as picked. "
                "Tell the office if a hydrant stands there.")
