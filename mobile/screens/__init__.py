"""The screens: one ``.py`` (a thin controller) and one ``.kv`` (layout) per screen.

``SCREENS`` lists them in the order of the crew's workflow; ``mobile.app`` loads their kv files.
"""

SCREENS = ("home", "checklist", "setup", "map", "readings", "results", "check", "export", "settings")
