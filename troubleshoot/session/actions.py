"""The actions of a session, typed: one dataclass each, one parser from text, one description.

Every front end speaks this vocabulary: :meth:`Session.apply` takes an
:class:`Action`, the line mode (``resume --plain``, ``start`` without a
terminal) parses a typed line with :func:`parse_action`, ``suggest`` turns
its ``--finding`` and ``--repaired`` options into actions with
:func:`finding_from_text`, and the session log stores :meth:`Action.to_record`
and reads it back with :func:`action_from_record`, which checks the type of
every field. :func:`describe` is the one wording for messages and logs.

=========================  =======================  ==============================
class                      log record ``action``    line-mode text
=========================  =======================  ==============================
:class:`RecordFinding`     ``finding``              ``CHECK=OUTCOME``
:class:`CorrectFinding`    ``correct``              ``correct CHECK=OUTCOME``
:class:`RetractFinding`    ``retract``              ``retract CHECK``
:class:`SkipCheck`         ``skip``                 ``skip CHECK REASON...``
:class:`UnskipCheck`       ``unskip``               ``unskip CHECK``
:class:`RecordRepair`      ``repair``               ``repair EVENT``
:class:`RecordVerification`  ``verify``             ``verify OUTCOME``
:class:`Escalate`          ``escalate``             ``escalate [REASON...]``
:class:`AddNote`           ``note``                 ``note TEXT...``
:class:`AcknowledgeCaution`  ``acknowledge``        ``ack CHECK``
:class:`Undo`              ``undo``                 ``undo``
:class:`Resume`            ``resume``               (written by ``resume`` itself)
:class:`JobDetails`        ``job``                  (typed on the start screen)
=========================  =======================  ==============================

An outcome is given by name (as the model spells it, case and spaces
forgiven) or, typed, by its number 1..K in the model's order; a program may
also give its index (an int, 0 for the first).
"""

from __future__ import annotations

import math
import re
import shlex
from dataclasses import MISSING, dataclass, fields
from typing import Any, ClassVar

from troubleshoot.errors import SessionError

Outcome = str | int


class ActionError(SessionError):
    """Text or a record that is not an action; the message says how to write it."""


@dataclass(frozen=True)
class Action:
    """Base of every action; :attr:`kind` is the ``action`` field of its log record."""

    kind: ClassVar[str] = ""

    def to_record(self) -> dict:
        """The action as the log stores it: ``{"action": kind, field: value, ...}``; None fields left out."""
        record: dict[str, Any] = {"action": self.kind}
        for f in fields(self):
            value = getattr(self, f.name)
            if value is not None:
                record[f.name] = value
        return record


@dataclass(frozen=True)
class RecordFinding(Action):
    """A check or symptom done now, and the outcome seen."""

    check: str
    outcome: Outcome
    kind: ClassVar[str] = "finding"


@dataclass(frozen=True)
class CorrectFinding(Action):
    """Change the outcome of a finding already recorded (default: the latest on that check)."""

    check: str
    outcome: Outcome
    epoch: int | None = None
    kind: ClassVar[str] = "correct"


@dataclass(frozen=True)
class RetractFinding(Action):
    """Withdraw a finding as if never made (default: the latest on that check)."""

    check: str
    epoch: int | None = None
    kind: ClassVar[str] = "retract"


@dataclass(frozen=True)
class SkipCheck(Action):
    """Leave a check out of the ranking because it cannot be done now, and why."""

    check: str
    reason: str
    kind: ClassVar[str] = "skip"


@dataclass(frozen=True)
class UnskipCheck(Action):
    """Bring a skipped check back into the ranking."""

    check: str
    kind: ClassVar[str] = "unskip"


@dataclass(frozen=True)
class RecordRepair(Action):
    """A basic event repaired; a verification is asked for next."""

    event: str
    kind: ClassVar[str] = "repair"


@dataclass(frozen=True)
class RecordVerification(Action):
    """The outcome of the check after the last repair."""

    outcome: Outcome
    kind: ClassVar[str] = "verify"


@dataclass(frozen=True)
class Escalate(Action):
    """The technician hands the unit over (the model's escalation); the session ends escalated.

    Typed, only ``reason`` is given (the technician's own words, optional);
    the session fills in the rest from the model and the state at that
    moment, so the log keeps what the technician was shown when escalating.

    Attributes
    ----------
    reason : str or None
        Why, in the technician's words.
    label : str or None
        What escalating means, the model's words (``<escalation>``'s label);
        None when the model gives no escalation.
    cost : float or None
        Its price in ``cost_unit``; None when the model gives none.
    cost_unit : str or None
        The model's cost unit.
    outside_model_p : float or None
        P(the cause lies outside the model | findings) when escalating.
    advised : bool or None
        The tool's decision at that moment was to escalate.
    """

    reason: str | None = None
    label: str | None = None
    cost: float | None = None
    cost_unit: str | None = None
    outside_model_p: float | None = None
    advised: bool | None = None
    kind: ClassVar[str] = "escalate"


@dataclass(frozen=True)
class AddNote(Action):
    """Free text kept in the log and the summary."""

    text: str
    kind: ClassVar[str] = "note"


@dataclass(frozen=True)
class AcknowledgeCaution(Action):
    """The technician read and acknowledged a check's safety caution before doing it.

    ``caution`` is the text acknowledged (kept in the log, so a later change of
    the model's wording is visible).
    """

    check: str
    caution: str | None = None
    kind: ClassVar[str] = "acknowledge"


@dataclass(frozen=True)
class Undo(Action):
    """Take back the last action that changed the record."""

    kind: ClassVar[str] = "undo"


@dataclass(frozen=True)
class Resume(Action):
    """The session was continued from its log (after a crash, or later).

    Written by :func:`troubleshoot.session.logfile.resume_session`, never typed.

    Attributes
    ----------
    model_path : str or None
        The model file the session continues with.
    model_sha256 : str or None
        Its SHA-256.
    model_changed : bool
        The model differs from the one the log was written with (given
        explicitly with ``--model``).
    tool_version : str or None
        The version of the tool that resumed it.
    """

    model_path: str | None = None
    model_sha256: str | None = None
    model_changed: bool = False
    tool_version: str | None = None
    kind: ClassVar[str] = "resume"


@dataclass(frozen=True)
class JobDetails(Action):
    """Who does the diagnosis, on which unit, where, for which work order (any may be missing).

    Given on the command line they go to the log's header; typed later (the
    start screen of the terminal UI) they are logged as this action.
    """

    technician: str | None = None
    unit: str | None = None
    site: str | None = None
    work_order: str | None = None
    kind: ClassVar[str] = "job"
    FIELDS: ClassVar[tuple[str, ...]] = ("technician", "unit", "site", "work_order")


ACTION_TYPES: dict[str, type[Action]] = {
    cls.kind: cls for cls in (RecordFinding, CorrectFinding, RetractFinding, SkipCheck, UnskipCheck,
                              RecordRepair, RecordVerification, AddNote, AcknowledgeCaution, Undo, Resume,
                              JobDetails, Escalate)
}

#: Actions that change neither the findings nor the posterior and are not taken back by undo.
EVENTS = (AcknowledgeCaution, Resume, JobDetails)


# ---------------------------------------------------------------------- records


def _field_type_ok(name: str, value: Any) -> bool:
    if name in ("check", "event", "reason", "text"):
        return isinstance(value, str)
    if name == "outcome":
        return isinstance(value, (str, int)) and not isinstance(value, bool)
    if name == "epoch":
        return value is None or (isinstance(value, int) and not isinstance(value, bool) and value >= 0)
    if name in ("caution", "model_path", "tool_version", "technician", "unit", "site", "work_order",
                "label", "cost_unit"):
        return value is None or isinstance(value, str)
    if name == "cost":
        return value is None or (isinstance(value, (int, float)) and not isinstance(value, bool)
                                 and math.isfinite(value) and value >= 0)
    if name == "outside_model_p":
        return value is None or (isinstance(value, (int, float)) and not isinstance(value, bool)
                                 and 0.0 <= value <= 1.0)
    if name == "advised":
        return value is None or isinstance(value, bool)
    if name == "model_sha256":
        return value is None or (isinstance(value, str) and re.fullmatch(r"[0-9a-f]{64}", value) is not None)
    if name == "model_changed":
        return isinstance(value, bool)
    return False


_FIELD_WORDS = {
    "check": "a check id (text)", "event": "a basic event id (text)", "reason": "text", "text": "text",
    "outcome": "an outcome name (text) or number", "epoch": "a whole number of repairs, 0 or more",
    "caution": "text", "model_path": "a path (text)", "tool_version": "text",
    "model_sha256": "64 lowercase hexadecimal digits", "model_changed": "true or false",
    "technician": "text", "unit": "text", "site": "text", "work_order": "text",
    "label": "text", "cost_unit": "text", "cost": "a finite number, 0 or more",
    "outside_model_p": "a probability from 0 to 1", "advised": "true or false",
}


def action_from_record(record: Any) -> Action:
    """The typed action a log record (or a dict given to :meth:`Session.apply`) holds.

    Every field is type-checked; unknown fields are refused, so a record
    written by a newer tool is never half-understood.

    Raises
    ------
    ActionError
        The record is not an action, names an unknown kind, lacks a field or
        has a field of the wrong type.
    """
    if not isinstance(record, dict):
        raise ActionError(f"an action is an object with an 'action' field, not {type(record).__name__}")
    kind = record.get("action")
    cls = ACTION_TYPES.get(kind) if isinstance(kind, str) else None
    if cls is None:
        raise ActionError(f"unknown action {kind!r}; known: {', '.join(ACTION_TYPES)}")
    names = {f.name: f for f in fields(cls)}
    extra = sorted(set(record) - set(names) - {"action"})
    if extra:
        raise ActionError(f"action {kind!r} has unknown field(s) {', '.join(map(repr, extra))}")
    values = {}
    for name, f in names.items():
        if name not in record:
            if f.default is MISSING:
                raise ActionError(f"action {kind!r} lacks its {name!r} field")
            continue
        value = record[name]
        if not _field_type_ok(name, value):
            raise ActionError(f"action {kind!r}: field {name!r} must be {_FIELD_WORDS[name]}, not {value!r}")
        values[name] = value
    return cls(**values)


def as_action(action: Action | dict) -> Action:
    """An Action as it is, or the typed action a dict holds."""
    return action if isinstance(action, Action) else action_from_record(action)


# ---------------------------------------------------------------------- words


def _outcome_text(outcome: Outcome) -> str:
    return str(outcome)


def describe(action: Action | dict) -> str:
    """An action in words, for messages and logs: ``finding c3=abnormal``, ``repair e2``...

    A dict that is not a valid action is described as far as it can be (for
    messages about damaged logs).
    """
    if isinstance(action, dict):
        try:
            action = action_from_record(action)
        except ActionError:
            return str(action.get("action", "?")) if isinstance(action, dict) else "?"
    if isinstance(action, RecordFinding):
        return f"finding {action.check}={_outcome_text(action.outcome)}"
    if isinstance(action, CorrectFinding):
        return f"correct {action.check}={_outcome_text(action.outcome)}"
    if isinstance(action, (RetractFinding, SkipCheck, UnskipCheck)):
        return f"{action.kind} {action.check}"
    if isinstance(action, RecordRepair):
        return f"repair {action.event}"
    if isinstance(action, RecordVerification):
        return f"verify {_outcome_text(action.outcome)}"
    if isinstance(action, AcknowledgeCaution):
        return f"acknowledge the caution of {action.check}"
    if isinstance(action, Resume):
        return "resume" + (" under a changed model" if action.model_changed else "")
    if isinstance(action, JobDetails):
        return "job details"
    if isinstance(action, Escalate):
        return "escalate" + (f" ({action.label})" if action.label else "")
    return action.kind


# ---------------------------------------------------------------------- text


LINE_HELP = """commands (one per line):
  CHECK=OUTCOME            record a finding, the outcome by name or by its number 1..K, 1 the
                           normal one (e.g. pressure_switches=a switch is open, suction_pressure=2)
  correct CHECK=OUTCOME    change a finding already recorded
  retract CHECK            withdraw a finding
  skip CHECK REASON...     leave a check out (it cannot be done now)
  unskip CHECK             bring a skipped check back
  repair EVENT             record a repair
  verify OUTCOME           record the check after the repair (e.g. verify works, verify 1)
  escalate [REASON...]     hand the unit over (the model's escalation, at its price); the
                           session ends escalated ('undo' takes it back)
  ack CHECK                acknowledge the safety caution of a check before doing it
  note TEXT...             add a note to the log
  undo                     take back the last action
  show                     show the ranking and suspects again
  help                     this list
  quit                     stop (the log keeps everything; resume it later)"""

#: Words of the line mode that are not actions.
LINE_COMMANDS = ("show", "help", "quit", "exit")


def _unquote(text: str) -> str:
    """Text with one pair of matching outer quotes removed; an unbalanced quote stays as typed."""
    text = text.strip()
    if len(text) >= 2 and text[0] == text[-1] and text[0] in "\"'":
        return text[1:-1].strip()
    return text


def _words(text: str) -> list[str]:
    """Split like a shell where the quotes balance; otherwise on white space, quotes kept as typed."""
    try:
        return shlex.split(text)
    except ValueError:  # an unbalanced quote: take the words as typed
        return text.split()


def outcome_from_text(text: str) -> str:
    """An outcome as typed, quotes aside: a name, or a number 1..K the session resolves."""
    return _unquote(text)


def parse_action(line: str) -> Action:
    """The action a line of the line mode asks for (see :data:`LINE_HELP`).

    Robust to unbalanced quotes: ``skip x "no detector`` skips ``x`` with the
    reason ``"no detector``.

    Raises
    ------
    ActionError
        The line is empty, a line-mode word (``show``, ``help``, ``quit``) or
        not an action; the message says how to write it.
    """
    text = line.strip()
    if not text:
        raise ActionError("an empty line is not an action; type 'help'")
    word, _, rest = text.partition(" ")
    word_folded = word.casefold()
    rest = rest.strip()
    if word_folded in LINE_COMMANDS:
        raise ActionError(f"{word!r} is a command of the line mode, not an action")
    if word_folded == "undo" and not rest:
        return Undo()
    if word_folded == "repair":
        if not rest:
            raise ActionError("write: repair EVENT")
        return RecordRepair(_unquote(rest))
    if word_folded == "verify":
        if not rest:
            raise ActionError("write: verify OUTCOME")
        return RecordVerification(outcome_from_text(rest))
    if word_folded == "escalate":
        return Escalate(rest or None)
    if word_folded == "note":
        if not rest:
            raise ActionError("write: note TEXT")
        return AddNote(rest)
    if word_folded in ("retract", "unskip", "ack", "acknowledge"):
        if not rest:
            raise ActionError(f"write: {word_folded} CHECK")
        check = _unquote(rest)
        if word_folded == "retract":
            return RetractFinding(check)
        if word_folded == "unskip":
            return UnskipCheck(check)
        return AcknowledgeCaution(check)
    if word_folded == "skip":
        parts = _words(rest)
        if not parts:
            raise ActionError("write: skip CHECK REASON")
        if len(parts) == 1:
            raise ActionError(f"say why {parts[0]!r} cannot be done: skip {parts[0]} REASON")
        return SkipCheck(_unquote(parts[0]), " ".join(parts[1:]))
    if word_folded == "correct":
        check, sep, outcome = rest.partition("=")
        if not sep or not check.strip() or not outcome.strip():
            raise ActionError("write: correct CHECK=OUTCOME")
        return CorrectFinding(_unquote(check), outcome_from_text(outcome))
    if "=" in text:
        return finding_from_text(text)
    raise ActionError(f"unknown command {word!r}; type 'help'")


def finding_from_text(text: str) -> RecordFinding:
    """``CHECK=OUTCOME`` as a finding (``suggest --finding`` and the line mode).

    Raises
    ------
    ActionError
        No ``=``, or nothing on one side of it.
    """
    check, sep, outcome = text.partition("=")
    check, outcome = _unquote(check), outcome.strip()
    if not sep or not check or not outcome:
        raise ActionError(f"{text!r}: write CHECK=OUTCOME")
    return RecordFinding(check, outcome_from_text(outcome))
