"""Fire flow available at every hydrant from the (calibrated) model, with intervals, on one machine
or a Dask cluster: ``scan`` (the figures of one hydrant), ``fitdir`` (reading a fit's C and its
covariance), ``distribute`` (batches on Dask), ``outputs`` (CSV, GeoJSON, the HTML page)."""

from calib.fireflow.scan import (FireFlowScan, GroupCovariance, HydrantFlow, ScanOptions,
                                 hydrant_nodes)

__all__ = ["FireFlowScan", "GroupCovariance", "HydrantFlow", "ScanOptions", "hydrant_nodes"]
