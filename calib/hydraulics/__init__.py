"""Steady-state hydraulics: head-loss laws, snapshots, the global gradient solver, equivalent pipes."""

from calib.hydraulics.equivalent import (equivalent_diameter, parallel_resistance,
                                         series_resistance)
from calib.hydraulics.headloss import (colebrook, darcy_friction_factor, darcy_weisbach_law,
                                       hazen_williams_headloss, hazen_williams_law,
                                       hazen_williams_resistance, minor_loss_coefficient,
                                       reynolds_number, swamee_jain_1976)
from calib.hydraulics.snapshot import Snapshot
from calib.hydraulics.solver import HEADLOSS_MODELS, NetworkSolver, SolveResult

__all__ = [
    "NetworkSolver", "Snapshot", "SolveResult", "HEADLOSS_MODELS",
    "hazen_williams_resistance", "hazen_williams_headloss", "hazen_williams_law",
    "minor_loss_coefficient", "reynolds_number", "swamee_jain_1976", "colebrook",
    "darcy_friction_factor", "darcy_weisbach_law",
    "series_resistance", "parallel_resistance", "equivalent_diameter",
]
