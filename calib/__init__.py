"""Hydrant flow testing and Hazen-Williams C-factor calibration for water distribution networks.

Subpackages: ``network`` (the model and its files), ``hydraulics`` (headloss laws and the steady-state
solver), ``flowtest`` (the arithmetic of a hydrant flow test), ``calibration`` (least-squares fit of
C-factors), ``cli`` (``python -m calib``). This package never imports Kivy; the field app in ``mobile``
builds on it.
"""

__version__ = "0.1.0"
