"""The one exception tree of stagefit.

Every error the tool raises on purpose is a :class:`StagefitError`. The command line turns
it into a message on stderr and an exit code; it never shows a traceback for these.

::

    StagefitError                     exit 1 unless a subclass says otherwise
    ├── InputError(ValueError)        exit 2: something the user wrote is wrong
    │   ├── ValueSyntaxError          one value or quantity string cannot be read
    │   ├── FileProblems              a file (spec, stock list, design, catalog) has problems;
    │   │                             every problem found is listed, with file, line and field
    │   └── CircuitError              the circuit cannot work: a floating node, no DC path
    │       └── ConvergenceError(ArithmeticError)
    │                                 the operating point could not be found
    └── SearchError(RuntimeError)     the solver misbehaved (exit 1)

All classes keep their fields and survive pickling (Monte Carlo may run in worker
processes), so ``pickle.loads(pickle.dumps(err))`` gives an equal message.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

__all__ = [
    "CircuitError",
    "ConvergenceError",
    "FileProblems",
    "InputError",
    "Problem",
    "SearchError",
    "StagefitError",
    "ValueSyntaxError",
]

EXIT_INTERNAL = 1
EXIT_INPUT = 2


class StagefitError(Exception):
    """Base of every error stagefit raises on purpose."""

    exit_code = EXIT_INTERNAL


class InputError(StagefitError, ValueError):
    """Something the user wrote is wrong; the message says what and how to mend it."""

    exit_code = EXIT_INPUT


class ValueSyntaxError(InputError):
    """A value or quantity string that cannot be read.

    Parameters
    ----------
    text
        The string as written.
    kind
        What it should have been, e.g. ``"resistance"``.
    reason
        Why it cannot be read.
    hint
        What to write instead.
    """

    def __init__(self, text: object, kind: str, reason: str, hint: str = "") -> None:
        self.text = text
        self.kind = kind
        self.reason = reason
        self.hint = hint
        super().__init__(text, kind, reason, hint)

    def __str__(self) -> str:
        msg = f"{self.text!r} is not a valid {self.kind}: {self.reason}"
        if self.hint:
            msg += f"; {self.hint}"
        return msg

    def __reduce__(self):
        return (type(self), (self.text, self.kind, self.reason, self.hint))


@dataclass(frozen=True)
class Problem:
    """One problem in one input file.

    ``line`` is 1-based (0 when unknown); ``field`` is a dotted path such as
    ``targets.gain.value`` or ``inputs[2].source_resistance``.
    """

    file: str
    line: int
    field: str
    message: str

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}" if self.line else self.file
        return f"{where}: {self.field}: {self.message}" if self.field else f"{where}: {self.message}"


class FileProblems(InputError):
    """All the problems found in one or more input files, reported together."""

    def __init__(self, problems: list[Problem] | tuple[Problem, ...]) -> None:
        self.problems = tuple(problems)
        super().__init__(self.problems)

    def __str__(self) -> str:
        n = len(self.problems)
        head = "1 problem" if n == 1 else f"{n} problems"
        return head + ":\n" + "\n".join(f"  {p}" for p in self.problems)

    def __reduce__(self):
        return (type(self), (self.problems,))


class CircuitError(InputError):
    """The circuit, as given, cannot have an operating point (e.g. a floating node)."""

    def __init__(self, message: str, nodes: tuple[str, ...] = ()) -> None:
        self.message = message
        self.nodes = tuple(nodes)
        super().__init__(message, self.nodes)

    def __str__(self) -> str:
        return self.message

    def __reduce__(self):
        return (type(self), (self.message, self.nodes))


class ConvergenceError(CircuitError, ArithmeticError):
    """The operating point could not be found even with continuation."""


class SearchError(StagefitError, RuntimeError):
    """The constraint solver gave an answer that could not be trusted or used."""


def display_path(path: str | Path) -> str:
    """A path as the user should see it: relative to the working directory when inside it."""
    p = Path(path)
    try:
        return str(p.resolve().relative_to(Path.cwd().resolve()))
    except ValueError:
        return str(p)
