"""The command dispatcher: exit codes and messages common to every command."""

import subprocess
import sys

from calib.cli import main


def test_no_command_prints_help_and_exits_2(capsys):
    assert main([]) == 2
    assert "solve" in capsys.readouterr().err


def test_unknown_command_is_a_usage_error(capsys):
    assert main(["frobnicate"]) == 2
    assert "invalid choice" in capsys.readouterr().err


def test_closed_pipe_ends_quietly():
    # `python -m calib ... | head -1` must not end in a traceback (common practice for Unix tools).
    proc = subprocess.run(
        f"{sys.executable} -m calib flowtest --static 72psi --residual 55psi --pitot 18psi "
        f"--outlet 2.5in | head -c 10", shell=True, capture_output=True, text=True)
    assert proc.stdout == "Flow test "
    assert "Traceback" not in proc.stderr
