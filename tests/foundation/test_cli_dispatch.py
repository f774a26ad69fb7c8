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
    # The reading end is closed before the command writes, so its first write meets a broken pipe.
    proc = subprocess.Popen(
        [sys.executable, "-m", "calib", "flowtest", "--static", "72psi", "--residual", "55psi",
         "--pitot", "18psi", "--outlet", "2.5in"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    proc.stdout.close()
    err = proc.stderr.read()
    assert proc.wait(timeout=60) == 141
    assert "Traceback" not in err
