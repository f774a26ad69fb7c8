"""The command line loads only the chosen command's module (a faster start), and still lists all."""

import os
import subprocess
import sys
from pathlib import Path

from calib.cli import COMMANDS, build_parser

ROOT = Path(__file__).resolve().parents[2]


def _modules_after(args):
    code = ("import sys; from calib.cli import main; main(%r); "
            "print(' '.join(sorted(m for m in sys.modules if m.startswith('calib.cli.'))))" % (args,))
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True,
                         timeout=120)
    return set(out.stdout.split())


def test_a_command_imports_only_its_own_module():
    loaded = _modules_after(["flowtest", "--help"])
    assert "calib.cli.flowtest" in loaded
    assert not loaded & {f"calib.cli.{c}" for c in COMMANDS if c != "flowtest"}


def test_help_without_a_command_lists_every_command():
    text = build_parser([]).format_help()
    for name in COMMANDS:
        assert name in text
