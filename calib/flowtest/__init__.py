"""The arithmetic of a hydrant flow test (NFPA 291): discharge, rated flow, class, findings, quick C.

SI floats in and out (m3/s, m, Pa gauge); every public function also takes pint Quantities or strings
such as ``"72 psi"``. No UI and no plotting here. Results support, never replace, fire-protection
design by a licensed engineer under local codes and the authority having jurisdiction.
"""

from calib.flowtest.cautions import CAUTIONS
from calib.flowtest.classes import CLASSES, HydrantClass, hydrant_class
from calib.flowtest.findings import Finding, check_test
from calib.flowtest.pitot import (OUTLET_COEFFICIENTS, PITOT_CONSTANT_SI, PITOT_CONSTANT_US,
                                  outlet_coefficient, pitot_discharge, pitot_discharge_gpm,
                                  pumper_factor, total_flow)
from calib.flowtest.quick_c import QuickC, hazen_williams_c, quick_c
from calib.flowtest.rating import (DEFAULT_TARGET, HydrantCurve, hydrant_curve, hydraulic_grade, n185,
                                   rated_flow, residual_at_flow)
from calib.flowtest.record import FlowTest, FlowTestResult, Outlet, evaluate

__all__ = [
    "CAUTIONS", "CLASSES", "DEFAULT_TARGET", "OUTLET_COEFFICIENTS", "PITOT_CONSTANT_SI",
    "PITOT_CONSTANT_US", "Finding", "FlowTest", "FlowTestResult", "HydrantClass", "HydrantCurve",
    "Outlet", "QuickC", "check_test", "evaluate", "hazen_williams_c", "hydrant_class", "hydrant_curve",
    "hydraulic_grade", "n185", "outlet_coefficient", "pitot_discharge", "pitot_discharge_gpm",
    "pumper_factor", "quick_c", "rated_flow", "residual_at_flow", "total_flow",
]
