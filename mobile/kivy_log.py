"""Kivy log records that are no problem for this app, said at their true weight.

On Linux every Kivy ``TextInput`` loads the X cut buffer (middle-click paste of the X primary selection)
through the ``xclip`` or ``xsel`` programs; without either, Kivy logs
``CRITICAL [Cutbuffer] Unable to find any valuable Cutbuffer provider``. The field app does not use the
cut buffer: readings come from its own keypad, and copy and paste go through the SDL2 clipboard, which
needs neither program. So that one record is logged as INFO, saying what is missing and what it costs;
every other record passes unchanged (a real CRITICAL stays CRITICAL).
"""

from __future__ import annotations

import logging

_CUTBUFFER = "Cutbuffer: Unable to find any valuable Cutbuffer provider"
NOTE = ("Cutbuffer: no xclip or xsel installed, so middle-click paste of the X selection is off; "
        "the app does not use it (keypad entry, and copy and paste through the SDL2 clipboard, work)")


class UnusedCutbuffer(logging.Filter):
    """Turns Kivy's CRITICAL about a missing cut buffer provider into one INFO line (see module)."""

    def filter(self, record: logging.LogRecord) -> bool:
        if record.levelno == logging.CRITICAL and str(record.msg).startswith(_CUTBUFFER):
            record.levelno, record.levelname = logging.INFO, "INFO"
            record.msg, record.args = NOTE, ()
        return True


def install(logger=None) -> None:
    """Add the filter to Kivy's logger once (``logger`` for tests)."""
    if logger is None:
        from kivy.logger import Logger as logger
    if not any(isinstance(f, UnusedCutbuffer) for f in logger.filters):
        logger.addFilter(UnusedCutbuffer())
