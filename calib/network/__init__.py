"""The network model (structure of numpy arrays, SI floats) and its files (CSV tables, GeoJSON)."""

from calib.network.model import Network, PipeStatus, Pumps

__all__ = ["Network", "PipeStatus", "Pumps"]
