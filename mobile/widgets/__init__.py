"""Widgets shared by the screens: big buttons and labels for sunlight and gloves, the numeric keypad."""
