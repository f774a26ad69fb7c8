"""One front door for network files: ``read_network(path)`` for a CSV folder or a GeoJSON file, and
the writers (``write_network_geojson``, ``write_network_tables``).

Every reader returns a checked ``Network`` or raises one ``NetworkError`` that lists every problem.
"""

from __future__ import annotations

from pathlib import Path

from calib.errors import NetworkError, Problem
from calib.network import tables, validate
from calib.network.geojson import read_geojson, write_network_geojson
from calib.network.model import Network

GEOJSON_SUFFIXES = (".geojson", ".json")

__all__ = ["read_network", "write_network_geojson", "write_network_tables"]


def read_network(path) -> Network:
    """Read and check a network: a folder of CSV tables, or a ``.geojson`` FeatureCollection."""
    path = Path(path)
    if path.is_dir():
        parsed, problems = tables.read_tables(path)
        if parsed is None:
            raise NetworkError(problems)
        name = path.name if path.name != "network" else path.parent.name or "network"
        return validate.assemble(parsed, problems, name=name)
    if path.suffix.lower() in GEOJSON_SUFFIXES and path.is_file():
        return read_geojson(path)
    if not path.exists():
        raise NetworkError(Problem(f"no such folder or file: '{path}'", expected="a folder with "
                                   "junctions.csv, sources.csv and pipes.csv, or a .geojson file"))
    raise NetworkError(Problem(f"'{path}' is neither a folder of CSV tables nor a .geojson file",
                               expected="a folder with junctions.csv, sources.csv and pipes.csv, "
                               "or a .geojson file"))


def write_network_tables(network: Network, folder, units: str = "us") -> Path:
    """Write ``network`` as a folder of CSV tables with ``us`` or ``si`` unit headers."""
    return tables.write_tables(network, folder, units)
