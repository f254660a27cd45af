"""The panels of the main screen and the words and numbers they show.

Every panel renders a :class:`~troubleshoot.session.SessionState` (plain
Python data) and nothing else: no propagation, no ranking, no numpy here.
Every number carries its unit, and every state is said in a word or a
symbol as well as in colour, so the screen reads the same in a light or a
dark theme and on a terminal without colour.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

from rich.text import Text
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.coordinate import Coordinate
from textual.widgets import DataTable, Static

#: Eighths of a cell, for probability bars finer than one character.
_BAR_EIGHTHS = " ▏▎▍▌▋▊▉"
#: The empty part of a bar: a visible track, so its length reads without colour.
_BAR_TRACK = "░"

#: What each session status is called on screen, with a symbol that carries it without colour.
STATUS_WORDS = {
    "diagnosing": "● DIAGNOSING",
    "isolated": "◆ FAULT ISOLATED",
    "ambiguity": "◇ AMBIGUITY GROUP",
    "awaiting-verification": "▲ VERIFY THE REPAIR",
    "confirmed": "✔ REPAIR CONFIRMED",
}

#: Cells of the checks table other than the label (index, cost, bits, score, odds) plus padding.
_CHECK_TABLE_FIXED_WIDTH = 54


def percent(p: float) -> str:
    """A probability as a percentage with one decimal, e.g. ``62.1 %``; a tiny one as ``<0.1 %``."""
    if 0.0 < p < 0.0005:
        return "<0.1 %"
    if 0.9995 <= p < 1.0:
        return ">99.9 %"
    return f"{p * 100:.1f} %"


def cost_text(cost: float | None, unit: str) -> str:
    """A cost with its unit, e.g. ``20 min``; ``—`` when there is none."""
    if cost is None:
        return "—"
    return f"{cost:g} {unit}"


def bits_text(bits: float) -> str:
    """Information or uncertainty in bits, e.g. ``0.53 bit``."""
    return f"{bits:.2f} bit"


def score_text(score: float, unit: str) -> str:
    """Bits per cost unit, e.g. ``0.238 bit/min``; a free informative check reads ``∞ (free)``."""
    if math.isinf(score):
        return "∞ (free)"
    return f"{score:.3f} bit/{unit}"


def odds_text(p_outcomes: tuple[float, ...]) -> str:
    """Every outcome's probability in percent, normal first, e.g. ``42/58 %`` or ``60/25/15 %``."""
    return "/".join(f"{p * 100:.0f}" for p in p_outcomes) + " %"


def bar(p: float, width: int = 8) -> str:
    """A probability bar of ``width`` cells: full blocks, one partial block, then the track."""
    p = min(max(p, 0.0), 1.0)
    eighths = round(p * width * 8)
    full, part = divmod(eighths, 8)
    text = "█" * full
    if full < width:
        text += (_BAR_EIGHTHS[part] if part else "") + _BAR_TRACK * (width - full - (1 if part else 0))
    return text


def truncate(text: str, width: int) -> str:
    """``text`` cut to ``width`` characters, with an ellipsis when cut."""
    if width <= 1:
        return text[:max(width, 0)]
    return text if len(text) <= width else text[: width - 1] + "…"


def outcome_odds_line(row) -> str:
    """``Outcomes: <normal> 42.2 % · <abnormal> 57.8 %`` for one ranking row."""
    parts = [f"{name} {percent(p)}" for name, p in zip(row.outcomes, row.p_outcomes)]
    line = "Outcomes: " + " · ".join(parts)
    if row.caution:
        line += "  ⚠ has a safety caution"
    return line


def finding_label(model, view) -> str:
    """The label of a finding: a verification of the top event reads as the model's verification."""
    if view.kind == "verification" and view.target == model.top and model.verification is not None:
        return model.verification.label
    return view.label


def finding_lines(state, model) -> list[str]:
    """The findings so far in the order they were made, repairs in their place, then skips and notes."""
    label_of = model.label_of
    unit = state.cost_unit
    lines: list[str] = []
    repairs_shown = 0
    number = 0

    def show_repairs_up_to(epoch: int) -> None:
        nonlocal repairs_shown
        while repairs_shown < min(epoch, len(state.repairs)):
            lines.append(f"   ⚒ repaired: {label_of(state.repairs[repairs_shown])}")
            repairs_shown += 1

    for view in state.findings:
        show_repairs_up_to(view.epoch)
        number += 1
        if view.kind == "complaint":
            lines.append(f"{number:>2}. [{view.outcome}] complaint: {view.label}")
            continue
        kind = "verification: " if view.kind == "verification" else ""
        cost = f" ({cost_text(view.cost, unit)})" if view.cost else ""
        # The outcome first, so a narrow panel cuts the label, never the outcome.
        lines.append(f"{number:>2}. [{view.outcome}] {kind}{finding_label(model, view)}{cost}")
    show_repairs_up_to(len(state.repairs))
    for check_id, reason in state.skipped:
        lines.append(f"   ↷ skipped: {label_of(check_id)} — {reason}")
    for note in state.notes:
        lines.append(f"   ✎ note: {note}")
    return lines


def repair_order_lines(state, limit: int | None = None) -> list[str]:
    """The repair order, numbered: repair, its cost with unit, and the suspect's probability."""
    unit = state.cost_unit
    steps = state.repair_order if limit is None else state.repair_order[:limit]
    lines = []
    for i, step in enumerate(steps, 1):
        what = step.repair_label or step.label
        extra = f" ({step.note})" if step.note else ""
        lines.append(f"{i}. {what} — {cost_text(step.cost, unit)} · P {percent(step.p)}{extra}")
    return lines


def escalation_lines(state) -> list[str]:
    """The policy's word on handing the unit over: the reason and the price, when it says so."""
    d = getattr(state, "decision", None)
    lines = []
    if d is not None and d.action == "escalate":
        price = (f" ({cost_text(d.expected_cost, state.cost_unit)})" if d.expected_cost is not None else "")
        lines.append(f"HAND THE UNIT OVER{price}: {d.reasons[0].text if d.reasons else ''}. Key e records it.")
    elif getattr(state, "outside_model_p", 0.0) >= 0.05:
        lines.append(f"Cause outside the model: P {percent(state.outside_model_p)} (key e hands the unit over).")
    return lines


def diagnosis_text(state) -> str:
    """What the diagnosis says now, in words, with what to do next."""
    text = _diagnosis_text(state)
    extra = escalation_lines(state)
    return "\n".join(extra + [text]) if extra else text


def _diagnosis_text(state) -> str:
    unit = state.cost_unit
    word = STATUS_WORDS.get(state.status, state.status)
    if state.status == "diagnosing":
        nxt = state.next_check
        if nxt is None:
            return f"{word} — no check is left; record a repair (key r)."
        return (f"{word} — next check: {nxt.label} ({cost_text(nxt.cost, unit)}, {bits_text(nxt.bits)}). "
                "Enter opens the highlighted check.")
    if state.status == "isolated":
        s = state.isolated
        lines = [f"{word}: {s.label} — P {percent(s.p)}. Repair order (key r records a repair):"]
        lines += repair_order_lines(state, limit=3)
        return "\n".join(lines)
    if state.status == "ambiguity":
        lines = [word + ": no check left is expected to save more than it costs. "
                 "Repair in this order (key r records a repair):"]
        lines += repair_order_lines(state)
        return "\n".join(lines)
    if state.status == "awaiting-verification":
        v = state.verification
        return (f"{word}: {v.label} ({cost_text(v.cost, unit)}). Key v opens the verification; "
                "if the fault persists the diagnosis goes on.")
    if state.status == "confirmed":
        return f"{word} — the unit works. Key q quits; the summary is written beside the log."
    return word


class StatusBar(Static):
    """One line: the complaint, the remaining uncertainty, the cost so far, the status, and a busy mark."""

    def show(self, complaint: str, state, busy: bool) -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        if busy:
            text.append("⏳ working… ", style="bold reverse")
        if state is not None:
            text.append(STATUS_WORDS.get(state.status, state.status), style="bold")
            text.append(f" │ uncertainty {bits_text(state.entropy_bits)}")
            text.append(f" │ spent {cost_text(state.cost_spent, state.cost_unit)}")
            text.append(f" │ {complaint}")
        else:
            text.append(complaint)
        self.update(text)


class DiagnosisPanel(VerticalScroll):
    """Says whether the fault is isolated, only an ambiguity group is left, or a repair awaits verification."""

    def compose(self):
        yield Static(id="diagnosis-text")

    def show(self, state) -> None:
        self.query_one("#diagnosis-text", Static).update(Text(diagnosis_text(state)))
        for status in STATUS_WORDS:
            self.set_class(state.status == status, f"-{status}")


class ChecksTable(DataTable):
    """The next checks, ranked: label, cost with unit, expected bits, score and outcome odds."""

    # Enter selects the highlighted row (the screen opens that check); shown in the footer.
    BINDINGS = [
        Binding("enter", "select_cursor", "Open", key_display="⏎"),
        Binding("home", "scroll_top", "First", show=False),
        Binding("end", "scroll_bottom", "Last", show=False),
    ]

    def on_mount(self) -> None:
        self.cursor_type = "row"
        self.zebra_stripes = True

    def show(self, state, keep_cursor: bool = False) -> None:
        """Fill the table; the cursor goes to the recommended check unless ``keep_cursor`` (a resize).

        The recommended check (the session's next check: of the best few by
        score, the one expected to cost least to finish) is marked ``►``.
        """
        unit = state.cost_unit
        keep = self.cursor_row if keep_cursor else 0
        self.clear(columns=True)
        # The panel spans the screen; its border takes 2 columns.
        label_width = max(12, self.app.size.width - 2 - _CHECK_TABLE_FIXED_WIDTH)
        self.add_column("#", key="rank")
        self.add_column("Check", key="label", width=label_width)
        self.add_column("Cost", key="cost")
        self.add_column("Info", key="bits")
        self.add_column("Score", key="score")
        self.add_column("Odds n/abn", key="odds")
        recommended = state.next_check.check if state.next_check is not None else None
        for i, row in enumerate(state.ranking, 1):
            label = ("► " if row.check == recommended else "") + ("⚠ " if row.caution else "") + row.label
            self.add_row(str(i), truncate(label, label_width), cost_text(row.cost, unit), bits_text(row.bits),
                         score_text(row.score, unit), odds_text(row.p_outcomes), key=row.check)
        if state.ranking:
            if keep:
                self.move_cursor(row=min(max(keep, 0), len(state.ranking) - 1))
            else:
                ids = [r.check for r in state.ranking]
                self.move_cursor(row=ids.index(recommended) if recommended in ids else 0)

    def highlighted_check(self) -> str | None:
        """Id of the check under the cursor, or None when the table is empty."""
        if self.row_count == 0:
            return None
        row_key, _ = self.coordinate_to_cell_key(Coordinate(self.cursor_row, 0))
        return row_key.value


class SuspectsPanel(VerticalScroll):
    """Every suspect with its probability as a number and a bar."""

    def compose(self):
        yield Static(id="suspects-text")

    def show(self, suspects: Iterable) -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        for s in suspects:
            # The tag goes before the label, so a narrow panel never cuts it off.
            tag = "[repaired] " if s.repaired else ""
            text.append(f"{percent(s.p):>7} ")
            text.append(bar(s.p), style="bold")
            text.append(f" {tag}{s.label}\n")
        self.query_one("#suspects-text", Static).update(text)


class FindingsPanel(VerticalScroll):
    """The findings so far, in order."""

    def compose(self):
        yield Static(id="findings-text")

    def show(self, state, model) -> None:
        self.query_one("#findings-text", Static).update(Text("\n".join(finding_lines(state, model))))
        self.scroll_end(animate=False)
