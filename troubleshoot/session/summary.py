"""The supervisor's record of a session, as Markdown: who, what, every action with its time, the ending.

:func:`summary_markdown` is a pure function of a session's plain data (its
model, its :class:`~troubleshoot.session.SessionState`, the action records of
its log and the times the caller gives): no clock, no inference. It lists

- the job: technician, unit, site and work order when given at the start;
- every action in the order it was made, with its time (UTC): findings,
  caution acknowledgements, corrections, retractions, skips, repairs (the
  repair's action text, the part and its cost), verifications, notes, undos
  (and what they took back), and resumes after a crash or a closed terminal;
- the ending in plain words: repair confirmed, escalated, stopped with an
  ambiguity group, or abandoned before the end;
- the cost of the steps by the model's figures, and the wall-clock time, each
  labelled as what it is.

:func:`write_summary` (the only function here that touches a file) reads the
session's log and writes the summary beside it, for the terminal UI and for
``resume --plain`` alike.
"""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

from troubleshoot.session.render import STATUS_SENTENCES, outside_words
from troubleshoot.advice.policy import Status

__all__ = ["STATUS_SENTENCES", "ending", "summary_markdown", "summary_path", "write_summary"]

#: The job fields a session may carry in its log header, and their labels.
JOB_FIELDS = (("technician", "Technician"), ("unit", "Unit (serial or tag)"), ("site", "Site"),
              ("work_order", "Work order"))


def summary_path(log_path: str | Path) -> Path:
    """Where the summary of a log goes: the log's path with the suffix ``.md``.

    A log already named ``*.md`` gets ``.md`` appended instead, so the summary never overwrites it.
    """
    path = Path(log_path)
    if path.suffix == ".md":
        return path.with_name(path.name + ".md")
    return path.with_suffix(".md")


def _number(value: float) -> str:
    return f"{value:g}"


def _percent(p: float) -> str:
    return f"{p * 100:.1f} %"


def _duration(seconds: float) -> str:
    minutes = int(round(seconds / 60.0))
    hours, minutes = divmod(minutes, 60)
    return f"{hours} h {minutes:02d} min" if hours else f"{minutes} min"


def _cell(text) -> str:
    """Text safe inside a Markdown table cell."""
    return str(text).replace("|", "\\|").replace("\n", " ")


def _clock(stamp) -> str:
    """``2026-12-02T05:10:53.123Z`` -> ``2026-12-02 05:10:53``; anything else as given."""
    text = str(stamp or "")
    try:
        when = _dt.datetime.fromisoformat(text.rstrip("Z"))
    except ValueError:
        return text
    return f"{when:%Y-%m-%d %H:%M:%S}"


def parse_time(stamp) -> _dt.datetime | None:
    """A log time (ISO 8601, UTC, ``Z``) as an aware datetime; None when it is not one."""
    try:
        return _dt.datetime.fromisoformat(str(stamp).rstrip("Z")).replace(tzinfo=_dt.UTC)
    except (TypeError, ValueError):
        return None


class _Narrator:
    """Says each logged action in words, following the repairs so a verification names what it verifies."""

    def __init__(self, model) -> None:
        self.model = model
        self.unit = model.cost_unit
        self.repairs: list[str] = []
        self.history: list[tuple[list[str], str]] = []  # (repairs before, words) of undoable actions

    def _label(self, target) -> str:
        return self.model.label_of(str(target))

    def _check_cost(self, check_id) -> str:
        check = self.model.check_by_id.get(str(check_id))
        return f"{_number(check.cost)} {self.unit}" if check is not None else ""

    def repair_words(self, event_id: str) -> tuple[str, str]:
        """(``Repair: <action text> — part: <label>``, cost with unit) of a repair."""
        event = self.model.event_by_id.get(event_id)
        if event is None or event.repair is None:
            return f"Repair: {self._label(event_id)}", ""
        return (f"Repair: {event.repair.label} — part: {event.label}",
                f"{_number(event.repair.cost)} {self.unit}")

    def verification_words(self, outcome) -> tuple[str, str]:
        model = self.model
        if not self.repairs:
            return f"Verification: {outcome}", ""
        event = model.event_by_id.get(self.repairs[-1])
        verify = event.repair.verify if event is not None and event.repair is not None else None
        repaired = self._label(self.repairs[-1])
        if verify in model.check_by_id and outcome in model.check_by_id[verify].outcomes:
            check = model.check_by_id[verify]
            return (f"Verification of the repair of {repaired}: {check.label} → {outcome}",
                    f"{_number(check.cost)} {self.unit}")
        label = model.verification.label if model.verification is not None else "does the unit work now?"
        cost = model.verification.cost if model.verification is not None else 0.0
        return f"Verification of the repair of {repaired}: {label} → {outcome}", f"{_number(cost)} {self.unit}"

    def say(self, action: dict) -> tuple[str, str]:
        """(what was done, its cost by the model's figures or empty) for one logged action."""
        kind = action.get("action")
        check = action.get("check")
        if kind == "undo":
            if self.history:
                self.repairs, undone = self.history.pop()
                return f"Undo: took back “{undone}”", ""
            return "Undo", ""
        before = list(self.repairs)
        cost = ""
        if kind == "finding":
            words, cost = f"Check: {self._label(check)} → {action.get('outcome')}", self._check_cost(check)
        elif kind == "correct":
            words = f"Correction: {self._label(check)} now reads {action.get('outcome')}"
        elif kind == "retract":
            words = f"Retracted the finding on {self._label(check)}"
        elif kind == "skip":
            words = f"Skipped: {self._label(check)} — {action.get('reason', '')}"
        elif kind == "unskip":
            words = f"Brought back the skipped check: {self._label(check)}"
        elif kind == "repair":
            event = str(action.get("event"))
            words, cost = self.repair_words(event)
            self.repairs.append(event)
        elif kind == "verify":
            words, cost = self.verification_words(action.get("outcome"))
        elif kind == "note":
            return f"Note: {action.get('text', '')}", ""
        elif kind in ("acknowledge", "ack", "acknowledgement"):
            target = check or action.get("target")
            caution = action.get("caution")
            if caution is None and target in self.model.check_by_id:
                caution = self.model.check_by_id[target].caution
            words = f"Caution acknowledged: {self._label(target)}" + (f" — {caution}" if caution else "")
            return words, ""
        elif kind == "job":
            given = "; ".join(f"{label.lower()} {action[key]}" for key, label in JOB_FIELDS if action.get(key))
            return f"Job details given: {given}", ""
        elif kind == "resume":
            words = "Session resumed from its log (after a crash or a closed terminal)"
            if action.get("model_changed"):
                words += f"; under a changed model: {action.get('model_path')}"
            return words, ""
        elif kind == "escalate":
            words, cost = escalation_words(action, self.unit)
        else:
            detail = ", ".join(f"{k}={v}" for k, v in action.items() if k != "action")
            return f"{str(kind).capitalize()}" + (f": {detail}" if detail else ""), ""
        self.history.append((before, words))
        return words, cost


def escalation_words(action: dict, unit: str) -> tuple[str, str]:
    """(``Escalated: <what it means> — ...``, its price with unit or empty) for a logged ``escalate``."""
    what = action.get("label") or "handed over beyond the model (the model names no escalation)"
    words = f"Escalated: {what}"
    advised = action.get("advised")
    if advised is not None:
        words += " — advised by the tool" if advised else " — the technician's choice (the tool advised otherwise)"
    p = action.get("outside_model_p")
    if p is not None:
        words += f"; a cause this model does not list: {outside_words(p)} ({_percent(p)})"
    if action.get("reason"):
        words += f"; reason: {action['reason']}"
    price = action.get("cost")
    cost = f"{_number(float(price))} {action.get('cost_unit') or unit}" if price is not None else "no price in the model"
    return words, cost


def ending(model, state, records=()) -> tuple[str, str]:
    """The ending in plain words: (headline, detail).

    ``confirmed`` (the unit works after the last repair), ``escalated`` (handed
    over), ``stopped with an ambiguity group`` (no check worth doing was left
    and the repairs were not finished), or ``abandoned`` (stopped before the
    end).
    """
    if state.status == Status.CONFIRMED:
        repaired = model.label_of(state.repairs[-1]) if state.repairs else "the repair"
        return "Confirmed", f"the unit works after the repair of {repaired}"
    if state.status == Status.ESCALATED:
        escalations = [r.get("action") or {} for r in records if (r.get("action") or {}).get("action") == "escalate"]
        if model.escalation is not None:
            what = f"{model.escalation.label} ({_number(model.escalation.cost)} {model.cost_unit})"
        else:
            what = "beyond the model (it gives no escalation price)"
        detail = f"handed over: {what}"
        if escalations and escalations[-1].get("reason"):
            detail += f"; reason: {escalations[-1]['reason']}"
        return "Escalated", detail
    if state.status == Status.AMBIGUITY and state.ambiguity_group:
        group = "; ".join(f"{s.label} ({_percent(s.p)})" for s in state.ambiguity_group)
        return ("Stopped with an ambiguity group",
                f"no check left was worth its cost, and these suspects were not told apart: {group}")
    return "Abandoned", STATUS_SENTENCES.get(state.status, state.status)


def summary_markdown(model, state, log_path: str | Path | None = None,
                     started: _dt.datetime | None = None, ended: _dt.datetime | None = None, *,
                     records=(), job: dict | None = None) -> str:
    """The supervisor's record of a diagnosis session, as Markdown.

    Parameters
    ----------
    model : Model
        The session's model (labels, costs, cost unit).
    state : SessionState
        The session's state (``session.state``).
    log_path : path, optional
        The session log, named in the summary.
    started, ended : datetime, optional
        When the session began and ended (wall-clock time).
    records : sequence of dict, optional
        The log's action records in order (``{"time", "action", ...}``), for
        the list of every action with its time.
    job : dict, optional
        ``technician``, ``unit``, ``site``, ``work_order`` (any may be missing).

    Returns
    -------
    str
        Markdown text, ending with a newline.
    """
    unit = state.cost_unit
    records = list(records)
    lines = [f"# Diagnosis summary: {model.name}", ""]
    for key, label in JOB_FIELDS:
        value = (job or {}).get(key)
        if value:
            lines.append(f"- **{label}:** {value}")
    if model.equipment:
        lines.append(f"- **Equipment:** {model.equipment}")
    lines.append(f"- **Complaint:** {model.top_label or model.label_of(model.top)}")
    headline, detail = ending(model, state, records)
    lines.append(f"- **Ending:** {headline} — {detail}")

    repaired = [model.label_of(r) for r in state.repairs]
    if state.status == Status.CONFIRMED and repaired:
        lines.append(f"- **Fault repaired and confirmed:** {repaired[-1]}")
        if len(repaired) > 1:
            lines.append(f"- **Repaired before it (fault persisted):** {'; '.join(repaired[:-1])}")
    else:
        if repaired:
            lines.append(f"- **Repaired so far (not confirmed):** {'; '.join(repaired)}")
        if state.isolated is not None:
            lines.append(f"- **Fault isolated, not repaired:** {state.isolated.label} (P {_percent(state.isolated.p)})")
        elif not state.ambiguity_group:
            unrepaired = [s for s in state.suspects if s.in_question]
            if unrepaired:
                top = unrepaired[0]
                lines.append(f"- **Most probable fault when it stopped:** {top.label} (P {_percent(top.p)})")

    check_cost = sum(v.cost for v in state.findings if v.kind == "finding")
    verify_cost = sum(v.cost for v in state.findings if v.kind == "verification")
    repair_cost = 0.0
    for r in state.repairs:
        event = model.event_by_id.get(r)
        if event is not None and event.repair is not None:
            repair_cost += event.repair.cost
    escalation = ""
    if state.status == Status.ESCALATED and model.escalation is not None:
        escalation = f", escalation {_number(model.escalation.cost)} {unit}"
    lines.append(f"- **Cost of the steps, by the model's figures:** {_number(state.cost_spent)} {unit} "
                 f"(checks {_number(check_cost)} {unit}, repairs {_number(repair_cost)} {unit}, "
                 f"verifications {_number(verify_cost)} {unit}{escalation}; steps taken back are not counted)")
    if state.outside_model_by_gate:
        gates = "; ".join(f"under {model.label_of(g)}: {outside_words(p)} ({_percent(p)})"
                          for g, p in state.outside_model_by_gate)
        lines.append(f"- **A cause this model does not list:** {outside_words(state.outside_model_p)} "
                     f"({_percent(state.outside_model_p)}; {gates})")
    if started is not None and ended is not None:
        lines.append(f"- **Wall-clock time:** {_duration((ended - started).total_seconds())} "
                     f"(from {started:%Y-%m-%d %H:%M} to {ended:%Y-%m-%d %H:%M} UTC)")
    if log_path is not None:
        lines.append(f"- **Session log:** `{log_path}`")

    if records:
        lines += ["", "## Every action, in order", "",
                  "| # | Time (UTC) | Action | Cost |", "|---|---|---|---|"]
        narrator = _Narrator(model)
        for number, record in enumerate(records, 1):
            words, cost = narrator.say(record.get("action") or {})
            lines.append(f"| {number} | {_clock(record.get('time'))} | {_cell(words)} | {_cell(cost)} |")

    lines += ["", "## Findings standing at the end", "",
              "| # | Check or symptom | Outcome | Cost |", "|---|---|---|---|"]
    repairs_shown = 0

    def repair_row() -> str:
        event = model.event_by_id.get(state.repairs[repairs_shown])
        if event is not None and event.repair is not None:
            return (f"|  | *repair:* {_cell(event.repair.label)} ({_cell(event.label)}) |  | "
                    f"{_number(event.repair.cost)} {unit} |")
        return f"|  | *repair:* {_cell(repaired[repairs_shown])} |  |  |"

    for number, view in enumerate(state.findings, 1):
        while repairs_shown < min(view.epoch, len(state.repairs)):
            lines.append(repair_row())
            repairs_shown += 1
        kind = {"complaint": "*complaint:* ", "verification": "*verification:* "}.get(view.kind, "")
        label = view.label
        if view.kind == "verification" and view.target == model.top and model.verification is not None:
            label = model.verification.label
        lines.append(f"| {number} | {kind}{_cell(label)} | {_cell(view.outcome)} | "
                     f"{_number(view.cost)} {unit} |")
    while repairs_shown < len(repaired):
        lines.append(repair_row())
        repairs_shown += 1

    if state.skipped:
        lines += ["", "## Checks skipped", ""]
        lines += [f"- {model.label_of(c)}: {reason}" for c, reason in state.skipped]
    if state.notes:
        lines += ["", "## Notes", ""]
        lines += [f"- {note}" for note in state.notes]
    lines += ["", "Signed off by: ____________________   Date: ____________", "",
              "*The suggestions of this tool do not replace the equipment maker's procedures, "
              "lockout/tagout, local codes or licensed practice.*", ""]
    return "\n".join(lines)


def write_summary(session, ended: _dt.datetime) -> Path | None:
    """Write the summary of a logged session beside its log; return its path (None without a log).

    Reads the log for the start time, the job fields and every action with
    its time. Raises :class:`~troubleshoot.errors.LogError` when the log
    cannot be read and :class:`~troubleshoot.errors.OutputError` when the
    summary cannot be written.
    """
    from troubleshoot.session.logfile import job_of, read_log

    log = getattr(session, "log", None)
    path = getattr(log, "path", None)
    if path is None:
        return None
    from troubleshoot.files import write_output

    contents = read_log(path)
    header = contents.header
    text = summary_markdown(session.model, session.state, path, parse_time(header.get("time")), ended,
                            records=[line.record for line in contents.actions], job=job_of(contents))
    return write_output(summary_path(path), text.encode("utf-8"), "session summary")
