"""Closing the calibration loop: judge readings on site with their uncertainty (``check``), find the
closed or throttled pipe that explains a test (``closures``), and plan the next tests (``plan``).

All three work on one linearization of a test (``linear``): the static and residual snapshots solved at
given group C-factors, source grades and flow, and the analytic sensitivities of the gauges' grades to
them (implicit differentiation of the global gradient equations, ``NetworkSolver.sensitivities``).
"""
