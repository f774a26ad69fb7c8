"""The app's Kivy log says a missing X cut buffer at its true weight, and nothing else is changed."""

import logging

from mobile import kivy_log


def _record(level, msg):
    return logging.LogRecord("kivy", level, __file__, 1, msg, (), None)


def test_missing_cutbuffer_is_info_and_says_what_it_costs():
    # the message Kivy 2.3 (kivy/core/__init__.py, core_select_lib) logs when xclip and xsel are missing
    rec = _record(logging.CRITICAL, "Cutbuffer: Unable to find any valuable Cutbuffer provider. "
                                    "Please enable debug logging ...\nxclip - FileNotFoundError")
    assert kivy_log.UnusedCutbuffer().filter(rec)
    assert rec.levelno == logging.INFO and rec.levelname == "INFO"
    assert "xclip or xsel" in rec.getMessage() and "middle-click" in rec.getMessage()


def test_other_critical_records_stay_critical():
    for msg in ("Window: Unable to find any valuable Window provider.",
                "Clipboard: Unable to find any valuable Clipboard provider."):
        rec = _record(logging.CRITICAL, msg)
        assert kivy_log.UnusedCutbuffer().filter(rec)
        assert rec.levelno == logging.CRITICAL and rec.getMessage() == msg


def test_install_adds_the_filter_once():
    logger = logging.getLogger("kivy-log-test")
    kivy_log.install(logger)
    kivy_log.install(logger)
    assert sum(isinstance(f, kivy_log.UnusedCutbuffer) for f in logger.filters) == 1
