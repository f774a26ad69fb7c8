"""Prints the fuzz suite's figures (cases tried per target, refused well) at the end of the run."""

from . import oracle


def pytest_terminal_summary(terminalreporter):
    if oracle.COUNTS:
        terminalreporter.section("fuzz suite (issue 9)")
        for line in oracle.report():
            terminalreporter.write_line(line)
