"""Colours and sizes of the field app, chosen for reading in sunlight and tapping with gloves.

Black on white has the highest contrast outdoors; fills are dark with white text. Touch targets are
at least 48 dp (most are 64 dp); text sizes are in sp so they follow the device's font scale.
"""

from kivy.metrics import dp, sp

INK = (0.0, 0.0, 0.0, 1.0)
PAPER = (1.0, 1.0, 1.0, 1.0)
NAVY = (0.0, 0.16, 0.42, 1.0)
GREEN = (0.0, 0.36, 0.12, 1.0)
RED = (0.66, 0.0, 0.08, 1.0)
GREY = (0.35, 0.35, 0.35, 1.0)
PALE = (0.90, 0.93, 0.98, 1.0)
AMBER = (1.0, 0.85, 0.3, 1.0)
PLAN = (0.42, 0.05, 0.52, 1.0)  # the office plan's marks on the map

TOUCH = dp(64)  # default row and button height (>= 48 dp)
TOUCH_MIN = dp(48)
MESSAGE = dp(84)  # the space kept for a message: three lines, whether or not one shows
TEXT = sp(20)
TEXT_BIG = sp(26)
FIGURE = sp(44)
