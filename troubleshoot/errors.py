"""The project's own exception types.

A user's mistake (a bad file, an unknown check id, findings the model says are
impossible) is raised as a :class:`TroubleshootError` subclass whose message
says what to do. The command line turns each into one clear line per problem
and exit status 2; a traceback never reaches the user.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Problem:
    """One problem found in an input file.

    Parameters
    ----------
    path : str
        The file the problem is in.
    line : int or None
        1-based line number, when known.
    message : str
        What is wrong and how to fix it.
    severity : str
        ``"error"`` or ``"warning"``.
    """

    path: str
    line: int | None
    message: str
    severity: str = "error"

    def __str__(self) -> str:
        where = f"{self.path}:{self.line}" if self.line else self.path
        return f"{where}: {self.severity}: {self.message}"


class TroubleshootError(Exception):
    """Base class of every error a user can cause; the CLI exits 2 on it."""

    def lines(self) -> list[str]:
        """The message as lines to print, one per problem."""
        return [str(self)]


class ModelError(TroubleshootError):
    """A model file (or an imported file) has one or more problems.

    Every problem found in one pass is carried in :attr:`problems`.
    """

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        super().__init__("\n".join(str(p) for p in self.problems))

    def lines(self) -> list[str]:
        return [str(p) for p in self.problems]


class ImpossibleFindings(TroubleshootError):
    """The findings cannot all be true under the model (P(findings) = 0).

    :attr:`conflict` names a smallest set of findings found to be in conflict.
    """

    def __init__(self, conflict: list[str], message: str | None = None):
        self.conflict = list(conflict)
        super().__init__(
            message
            or "these findings cannot all be true under the model: "
            + ", ".join(self.conflict)
            + "; check the outcomes entered, or retract one of them"
        )


class NetworkTooLarge(TroubleshootError):
    """The join tree of a network would not fit in the memory budget.

    Raised before any table is allocated.
    """


class SessionError(TroubleshootError):
    """An action on a session was refused; the session is unchanged."""


class LogError(TroubleshootError):
    """A session log cannot be read, replayed or resumed."""


class InputError(TroubleshootError):
    """An input file cannot be used: missing, unreadable, not a regular file, or too large."""


class OutputError(TroubleshootError):
    """An output cannot be written where asked: a refused path, a missing folder, a full disk."""
