"""One exception family for the package, each carrying where the problem is and what would fix it.

Messages are built from structured fields so that a crew or a modeler can act on them, e.g.
``pipes.csv row 17, pipe P17, field 'to': node 'J9' is not in junctions.csv``.
"""

from __future__ import annotations

from dataclasses import dataclass, field


class CalibError(Exception):
    """Base of every error this package raises on purpose."""


@dataclass
class Problem:
    """One thing wrong with an input: where it is, what is wrong, and what would be plausible."""

    message: str
    file: str | None = None
    row: int | None = None
    id: str | None = None
    field: str | None = None
    expected: str | None = None

    def __str__(self) -> str:
        where = []
        if self.file:
            where.append(str(self.file))
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.id:
            where.append(f"id '{self.id}'")
        if self.field:
            where.append(f"field '{self.field}'")
        text = (", ".join(where) + ": " if where else "") + self.message
        if self.expected:
            text += f" (expected {self.expected})"
        return text


class InputError(CalibError, ValueError):
    """Bad input: a file, a table row, an option or a field. Holds every problem found, not just one."""

    def __init__(self, problems: list[Problem] | Problem | str, **where):
        if isinstance(problems, str):
            problems = [Problem(problems, **where)]
        elif isinstance(problems, Problem):
            problems = [problems]
        self.problems: list[Problem] = list(problems)
        super().__init__(self._text())

    def _text(self) -> str:
        if len(self.problems) == 1:
            return str(self.problems[0])
        lines = [f"{len(self.problems)} problems:"] + [f"  - {p}" for p in self.problems]
        return "\n".join(lines)


class NetworkError(InputError):
    """The network files do not describe a network that can be solved."""


class ConvergenceError(CalibError, RuntimeError):
    """The solver did not converge; names the worst nodes and pipes so the model can be mended."""

    def __init__(self, message: str, *, iterations: int = 0, worst_nodes=(), worst_links=(),
                 max_mass_error: float = float("nan")):
        self.iterations = iterations
        self.worst_nodes = list(worst_nodes)
        self.worst_links = list(worst_links)
        self.max_mass_error = max_mass_error
        super().__init__(message)


class FlowTestError(InputError):
    """A flow-test reading or option is missing, of the wrong dimension or out of its plausible range."""


class CalibrationError(CalibError, RuntimeError):
    """The calibration cannot be set up or carried out (e.g. no reading informs any group)."""
