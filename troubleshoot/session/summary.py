"""The end-of-session summary, as Markdown: complaint, findings, cost and time, the fault, the log.

A pure function of a session's plain data (its model and its
:class:`~troubleshoot.session.SessionState`) and the times the caller
gives: no clock, no file, no inference. The terminal UI shows it on screen
and writes it beside the log (:func:`summary_path`).
"""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

from troubleshoot.session.render import STATUS_SENTENCES, conclusion

__all__ = ["STATUS_SENTENCES", "summary_markdown", "summary_path"]


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


def _duration(seconds: float) -> str:
    minutes = int(round(seconds / 60.0))
    hours, minutes = divmod(minutes, 60)
    return f"{hours} h {minutes:02d} min" if hours else f"{minutes} min"


def _cell(text: str) -> str:
    """Text safe inside a Markdown table cell."""
    return str(text).replace("|", "\\|").replace("\n", " ")


def summary_markdown(model, state, log_path: str | Path | None = None,
                     started: _dt.datetime | None = None, ended: _dt.datetime | None = None) -> str:
    """The summary of a diagnosis session as Markdown.

    Parameters
    ----------
    model : Model
        The session's model (labels, costs, cost unit).
    state : SessionState
        The session's state (``session.state``).
    log_path : path, optional
        The session log, named in the summary.
    started, ended : datetime, optional
        When the session began and ended (wall-clock time, for "time taken").

    Returns
    -------
    str
        Markdown text, ending with a newline.
    """
    unit = state.cost_unit
    lines = [f"# Diagnosis summary: {model.name}", ""]
    if model.equipment:
        lines.append(f"- **Equipment:** {model.equipment}")
    lines.append(f"- **Complaint:** {model.top_label or model.label_of(model.top)}")
    for heading, text in conclusion(model, state):
        lines.append(f"- **{heading}:** {text}")
    repaired = [model.label_of(r) for r in state.repairs]

    check_cost = sum(v.cost for v in state.findings if v.kind == "finding")
    verify_cost = sum(v.cost for v in state.findings if v.kind == "verification")
    repair_cost = 0.0
    for r in state.repairs:
        event = model.event_by_id.get(r)
        if event is not None and event.repair is not None:
            repair_cost += event.repair.cost
    lines.append(f"- **Total cost:** {_number(state.cost_spent)} {unit} (checks {_number(check_cost)} {unit}, "
                 f"repairs {_number(repair_cost)} {unit}, verifications {_number(verify_cost)} {unit})")
    if started is not None and ended is not None:
        lines.append(f"- **Time:** {_duration((ended - started).total_seconds())} "
                     f"(from {started:%Y-%m-%d %H:%M} to {ended:%Y-%m-%d %H:%M} UTC)")
    lines.append(f"- **Remaining uncertainty:** {state.entropy_bits:.2f} bit")
    if log_path is not None:
        lines.append(f"- **Session log:** `{log_path}`")

    lines += ["", "## Findings, in order", "",
              "| # | Check or symptom | Outcome | Cost |", "|---|---|---|---|"]
    repairs_shown = 0
    for number, view in enumerate(state.findings, 1):
        while repairs_shown < min(view.epoch, len(state.repairs)):
            lines.append(f"|  | *repair:* {_cell(repaired[repairs_shown])} |  |  |")
            repairs_shown += 1
        kind = {"complaint": "*complaint:* ", "verification": "*verification:* "}.get(view.kind, "")
        label = view.label
        if view.kind == "verification" and view.target == model.top and model.verification is not None:
            label = model.verification.label
        lines.append(f"| {number} | {kind}{_cell(label)} | {_cell(view.outcome)} | "
                     f"{_number(view.cost)} {unit} |")
    while repairs_shown < len(repaired):
        lines.append(f"|  | *repair:* {_cell(repaired[repairs_shown])} |  |  |")
        repairs_shown += 1

    if state.skipped:
        lines += ["", "## Checks skipped", ""]
        lines += [f"- {model.label_of(c)}: {reason}" for c, reason in state.skipped]
    if state.notes:
        lines += ["", "## Notes", ""]
        lines += [f"- {note}" for note in state.notes]
    lines += ["", "*The suggestions of this tool do not replace the equipment maker's procedures, "
                  "lockout/tagout, local codes or licensed practice.*", ""]
    return "\n".join(lines)
