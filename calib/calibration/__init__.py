"""Calibration of Hazen-Williams C-factors from hydrant flow tests.

``read_tests`` (tests folder -> ``TestSet``), ``make_groups`` (which pipes share a C), ``fit``
(bounded weighted least squares with intervals and flags -> ``FitResult``), ``predict_test`` (what the
gauges of a test should read), and the writers in ``export`` and ``report``. The solver is
``calib.hydraulics``; this package only sets up and reads the least-squares problem.
"""

from calib.calibration.fit import FitResult, fit
from calib.calibration.groups import Grouping, make_groups
from calib.calibration.predict import PredictedReading, predict_test
from calib.calibration.tests_io import TestSet, read_tests


__all__ = ["TestSet", "read_tests", "Grouping", "make_groups", "fit", "FitResult", "PredictedReading",
           "predict_test"]
