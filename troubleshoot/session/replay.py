"""Re-running a session log: typed differences and refusals, never a matched message.

:func:`rerun` applies a log's typed actions to a fresh :class:`Session` on
its model and compares the state after each with what the log says the tool
showed: every ranking row (bits, cost, score), every suspect's probability,
the remaining entropy, log P(findings), the status, and (on lines that carry
them) P(the cause lies outside the model) in total and per gate and the
decision (action, target, expected cost), to 1e-9; an ``escalate`` line's
price, words, outside-model probability and whether it was advised as well. What differs
is a :class:`Difference`; an action the session refuses now is a
:class:`Refusal`. A ``resume`` line that names another model file switches
the re-run to that file (when its SHA-256 still matches), re-running every
action before it as the resume did.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from troubleshoot.errors import LogError, SessionError, TroubleshootError
from troubleshoot.model import Model
from troubleshoot.session.actions import Action, Escalate, Resume, describe
from troubleshoot.session.logfile import (
    SNAPSHOT_KEYS,
    LogContents,
    file_sha256,
    read_log,
    snapshot,
)
from troubleshoot.session.session import Session, SessionSettings, settings_for

#: Tolerance replay confirms numbers to (absolute, and relative).
REPLAY_TOLERANCE = 1e-9

_UNITS = {"bits": " bits", "cost": "", "score": " bits per cost unit", "p": ""}


@dataclass(frozen=True)
class Difference:
    """A number or word the log shows that the re-run does not.

    Attributes
    ----------
    line : int
        The log line (1 is the header: the state after the complaint).
    action : str
        The action on that line, in words ("the complaint" for the header).
    key : str
        The snapshot key: ``status``, ``entropy_bits``, ``log_p_findings``,
        ``ranking``, ``suspects``, or ``model`` (the model file changed).
    row : int or None
        1-based row of the ranking or suspects.
    name : str or None
        The field of that row (``id``, ``bits``, ``cost``, ``score``, ``p``),
        or ``rows`` when the row counts differ, ``missing`` when the key is absent.
    logged, now : any
        The value in the log and the value recomputed.
    """

    line: int
    action: str
    key: str
    row: int | None = None
    name: str | None = None
    logged: Any = None
    now: Any = None
    path: str = ""

    def text(self) -> str:
        if self.key == "model":
            return f"{self.path}:{self.line}: the model file changed (SHA-256 differs): {self.now}"
        where = f"{self.path}:{self.line} ({self.action})"
        if self.name == "missing":
            return f"{where}: the key {self.key!r} is missing from the log line"
        if self.row is None:
            what = {"entropy_bits": "remaining entropy (bits)", "log_p_findings": "log P(findings)",
                    "outside_model_p": "P(cause outside the model)",
                    "outside_model_by_gate": "P(cause outside the model) under gate",
                    "escalate": "the escalation's"}.get(self.key, self.key)
            if self.name:
                what += f" {self.name}"
            return f"{where}: {what} is {self.logged!r} in the log but {self.now!r} now"
        if self.name == "rows":
            return f"{where}: {self.key} has {self.logged} rows in the log but {self.now} now"
        if self.name == "id":
            return f"{where}: {self.key} row {self.row} is {self.logged!r} in the log but {self.now!r} now"
        unit = _UNITS.get(self.name or "", "")
        return (f"{where}: {self.key} row {self.row}: {self.name} is {self.logged!r}{unit} in the log "
                f"but {self.now!r}{unit} now")

    def __str__(self) -> str:
        return self.text()


@dataclass(frozen=True)
class Refusal:
    """An action of the log that the session refuses now (the model changed, or the log was edited)."""

    line: int
    action: Action
    error: TroubleshootError
    path: str = ""

    def __str__(self) -> str:
        return f"{self.path}:{self.line} ({describe(self.action)}): the action is refused now: {self.error}"


@dataclass
class ReplayReport:
    """The outcome of re-running a log.

    Attributes
    ----------
    confirmed : bool
        Every ranking and posterior agrees to 1e-9, every action was accepted
        and the model file is unchanged.
    differences : list of Difference
    refusals : list of Refusal
    warnings : list of str
        A torn last line; the format version without a chain; models switched.
    actions : int
        Actions re-run.
    session : Session
        The session as re-run (no log attached).
    chained : bool
        The log carries the hash chain (format version 2), checked line by line.
    """

    confirmed: bool
    differences: list = field(default_factory=list)
    refusals: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    actions: int = 0
    session: Session | None = None
    chained: bool = True

    @property
    def messages(self) -> list[str]:
        """Warnings, then differences and refusals, in words (file:line, the action, the number)."""
        return list(self.warnings) + [str(d) for d in self.differences] + [str(r) for r in self.refusals]

    def verdict(self) -> str:
        """One sentence: confirmed or differs, and how much the verdict rests on (the chain or not)."""
        chain = ("every line's hash chain checked" if self.chained else
                 "format version 1: the lines carry no hash chain, so an edit to the log itself cannot "
                 "be detected")
        if self.confirmed:
            return (f"confirmed: {self.actions} action(s) re-run, every ranking and posterior agrees to 1e-9; "
                    f"{chain}")
        return f"differs (see above); {self.actions} action(s) re-run; {chain}"


def _close(a, b) -> bool:
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, bool) or isinstance(b, bool) or not isinstance(a, (int, float)):
        return False
    return math.isclose(a, b, rel_tol=REPLAY_TOLERANCE, abs_tol=REPLAY_TOLERANCE)


def _ties_by_id(rows: list, name: str) -> list:
    """Rows with every run of tied values (to the replay tolerance) ordered by id.

    The order of exactly tied rows is the id's; a log written before ties
    were ordered so may hold them the other way round, which is no difference.
    """
    def value(row):
        v = row.get(name) if isinstance(row, dict) else None
        return math.inf if v is None else v

    out: list = []
    group: list = []
    for row in rows:
        if group and not (_close(value(group[0]), value(row)) or value(group[0]) == value(row)):
            out += sorted(group, key=lambda r: str(r.get("id")))
            group = []
        group.append(row)
    return out + sorted(group, key=lambda r: str(r.get("id")))


def compare_snapshot(logged: dict, now: dict, line: int = 0, action: str = "", path: str = "") -> list[Difference]:
    """Every difference between a logged snapshot and a recomputed one (empty when they agree)."""
    out: list[Difference] = []

    def diff(key, row=None, name=None, old=None, new=None):
        out.append(Difference(line, action, key, row, name, old, new, path))

    for key in SNAPSHOT_KEYS:
        if key not in logged:
            diff(key, name="missing")
    for key in ("entropy_bits", "log_p_findings"):
        if key in logged and not _close(logged[key], now[key]):
            diff(key, old=logged[key], new=now[key])
    if "status" in logged and logged["status"] != now["status"]:
        diff("status", old=logged["status"], new=now["status"])
    if "outside_model_p" in logged and not _close(logged["outside_model_p"], now["outside_model_p"]):
        diff("outside_model_p", old=logged["outside_model_p"], new=now["outside_model_p"])
    if isinstance(logged.get("outside_model_by_gate"), dict):
        old_gates, new_gates = logged["outside_model_by_gate"], now["outside_model_by_gate"]
        for gate in sorted(set(old_gates) | set(new_gates)):
            if not _close(old_gates.get(gate), new_gates.get(gate)):
                diff("outside_model_by_gate", name=gate, old=old_gates.get(gate), new=new_gates.get(gate))
    if isinstance(logged.get("decision"), dict):
        old_d, new_d = logged["decision"], now["decision"]
        for name in ("action", "target"):
            if old_d.get(name) != new_d[name]:
                diff("decision", name=name, old=old_d.get(name), new=new_d[name])
        if not _close(old_d.get("expected_cost"), new_d["expected_cost"]):
            diff("decision", name="expected_cost", old=old_d.get("expected_cost"), new=new_d["expected_cost"])
    for key, names in (("ranking", ("bits", "cost", "score")), ("suspects", ("p",))):
        if key not in logged:
            continue
        old, new = _ties_by_id(logged[key], names[-1]), _ties_by_id(now[key], names[-1])
        if len(old) != len(new):
            diff(key, name="rows", old=len(old), new=len(new))
            continue
        for i, (a, b) in enumerate(zip(old, new), start=1):
            if a.get("id") != b["id"]:
                diff(key, i, "id", a.get("id"), b["id"])
                continue
            for name in names:
                if not _close(a.get(name), b[name]):
                    diff(key, i, name, a.get(name), b[name])
    return out


def _escalation_differences(logged: Escalate, now: Action, line: int, path: str) -> list[Difference]:
    """What an ``escalate`` line says it was shown (price, words, P outside, advised) against the re-run."""
    assert isinstance(now, Escalate)
    out = []
    for name in ("label", "cost", "cost_unit", "outside_model_p", "advised"):
        old, new = getattr(logged, name), getattr(now, name)
        if old is None:
            continue  # not logged (a record typed by hand): nothing to confirm
        same = _close(old, new) if name in ("cost", "outside_model_p") else old == new
        if not same:
            out.append(Difference(line, describe(logged), "escalate", None, name, old, new, path))
    return out


def _model_for(contents: LogContents, model: Model | None) -> tuple[Model, str | None, list[Difference]]:
    header, path = contents.header, contents.path
    if model is not None:
        return model, header.get("model_path"), []
    model_path = header.get("model_path")
    if not model_path:
        raise LogError(f"{path}:1: the log does not say which model file it used; give the model with --model")
    if not Path(model_path).is_file():
        raise LogError(f"{path}:1: the model file {model_path} is gone; give the model with --model")
    from troubleshoot.model.source import load_any_model

    loaded, _warnings = load_any_model(model_path)
    changes = []
    if header.get("model_sha256") and file_sha256(model_path) != header["model_sha256"]:
        changes.append(Difference(1, "the complaint", "model", now=model_path, path=str(path)))
    return loaded, model_path, changes


def _settings_from(contents: LogContents, model: Model) -> SessionSettings:
    s = contents.header.get("settings") or {}
    try:
        return settings_for(model, s.get("isolation_threshold"), s.get("min_bits"), s.get("group_min_p"),
                            s.get("value_lookahead"), s.get("value_depth"), s.get("value_run"),
                            s.get("value_after_repair"))
    except SessionError as exc:
        raise LogError(f"{contents.path}:1: bad settings in the header: {exc}") from None


def _switch_model(contents: LogContents, line: int, resume: Resume, settings: SessionSettings,
                  done: list[Action], report: ReplayReport) -> Session | None:
    """The session re-run under the model a resume line names, or None when that file is gone or changed."""
    from troubleshoot.model.source import load_any_model

    where = f"{contents.path}:{line}"
    if not resume.model_path or not Path(resume.model_path).is_file() \
            or file_sha256(resume.model_path) != resume.model_sha256:
        report.differences.append(Difference(line, describe(resume), "model", now=resume.model_path or "(none)",
                                             path=str(contents.path)))
        return None
    model, _ = load_any_model(resume.model_path)
    session = Session(model, settings.validated(), model_path=resume.model_path)
    session.apply_all(done)
    report.warnings.append(f"{where}: the session was resumed under another model file, {resume.model_path}; "
                           "the re-run goes on with it")
    return session


def rerun(contents: LogContents, model: Model | None = None, stop_at_difference: bool = True,
          switch_models: bool = True) -> ReplayReport:
    """Re-run a log's actions on its model and compare every snapshot.

    Parameters
    ----------
    contents : LogContents
    model : Model, optional
        Use this model throughout instead of the files the log names.
    stop_at_difference : bool
        Stop at the first difference (replay) or go on (resume).
    switch_models : bool
        Follow a ``resume`` line that names another model file (replay);
        resume itself re-runs everything with one model.
    """
    explicit = model is not None
    model, model_path, changes = _model_for(contents, model)
    settings = _settings_from(contents, model)
    session = Session(model, settings, model_path=model_path)
    report = ReplayReport(False, differences=list(changes), session=session, chained=contents.chained)
    path = str(contents.path)
    report.differences += compare_snapshot(contents.header, snapshot(session.view), 1, "the complaint", path)
    if report.differences and stop_at_difference:
        return report
    done: list[Action] = []
    current_sha = contents.header.get("model_sha256")
    for line in contents.actions:
        action = line.action
        if (switch_models and not explicit and isinstance(action, Resume) and action.model_sha256 is not None
                and action.model_sha256 != current_sha):
            try:
                switched = _switch_model(contents, line.number, action, settings, done, report)
            except TroubleshootError as exc:
                report.refusals.append(Refusal(line.number, action, exc, path))
                return report
            current_sha = action.model_sha256
            if switched is None:
                if stop_at_difference:
                    return report
            else:
                session = report.session = switched
        try:
            session.apply(action)
        except TroubleshootError as exc:
            report.refusals.append(Refusal(line.number, action, exc, path))
            return report
        done.append(action)
        report.actions += 1
        found = compare_snapshot(line.record, snapshot(session.view), line.number, describe(action), path)
        if isinstance(action, Escalate):
            found += _escalation_differences(action, session.actions[-1], line.number, path)
        report.differences += found
        if found and stop_at_difference:
            return report
    report.confirmed = not report.differences and not report.refusals
    return report


def replay_log(path: str | os.PathLike, model: Model | None = None) -> ReplayReport:
    """Re-run a session log from its model and confirm every ranking and posterior to 1e-9.

    Parameters
    ----------
    path : path
    model : Model, optional
        Use this model instead of the file named in the header.

    Raises
    ------
    LogError
        The log cannot be read, is damaged or edited (its line named), or
        names no usable model.
    """
    contents = read_log(path)
    report = rerun(contents, model)
    report.warnings[:0] = contents.warnings
    return report
