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

from troubleshoot.session import Status
from troubleshoot.session.render import outside_words

#: Eighths of a cell, for probability bars finer than one character.
_BAR_EIGHTHS = " ▏▎▍▌▋▊▉"
#: The empty part of a bar: a visible track, so its length reads without colour.
_BAR_TRACK = "░"

#: What each session status is called on screen, with a symbol that carries it without colour.
STATUS_WORDS = {
    Status.DIAGNOSING: "● DIAGNOSING",
    Status.ISOLATED: "◆ FAULT ISOLATED",
    Status.AMBIGUITY: "◇ AMBIGUITY GROUP",
    Status.AWAITING_VERIFICATION: "▲ VERIFY THE REPAIR",
    Status.CONFIRMED: "✔ REPAIR CONFIRMED",
    Status.ESCALATED: "⚑ HANDED OVER",
}
#: The status word while the tool advises escalating (before the technician does).
ESCALATE_WORD = "⚑ ESCALATE"
#: What the probability that the cause lies outside the model is called on screen.
OUTSIDE_NAME = "a cause this model does not list"


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


def narrowing_words(bits: float, entropy_bits: float) -> str:
    """How much a check is expected to narrow the suspects down, in words.

    Measured against what is still unknown (the share of the remaining
    uncertainty it is expected to remove): ``a lot`` (a quarter or more),
    ``well`` (a tenth or more), ``somewhat`` (3 % or more), ``a little``
    (less), ``not at all`` (nothing).
    """
    if bits <= 0.0:
        return "not at all"
    share = bits / entropy_bits if entropy_bits > 0 else 1.0
    if share >= 0.25:
        return "a lot"
    if share >= 0.1:
        return "well"
    if share >= 0.03:
        return "somewhat"
    return "a little"


def chance_abnormal(row) -> str:
    """``58 % abnormal``-style text for a check: the chance of its abnormal outcome(s)."""
    return percent(1.0 - row.p_outcomes[0])


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
    """``Chance of each outcome: <normal> 42.2 % · <abnormal> 57.8 %`` for one ranking row."""
    parts = [f"{name} {percent(p)}" for name, p in zip(row.outcomes, row.p_outcomes)]
    line = "Chance of each outcome: " + " · ".join(parts)
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


def advises_escalation(state) -> bool:
    """The tool's decision is to hand the unit over (and the technician has not yet)."""
    d = state.decision
    return d is not None and d.action == "escalate" and state.status != Status.ESCALATED


def status_word(state) -> str:
    """The status in a word and a symbol; ``⚑ ESCALATE`` while the tool advises escalating."""
    if advises_escalation(state):
        return ESCALATE_WORD
    return STATUS_WORDS.get(state.status, state.status)


def outside_text(p: float, figures: bool = False) -> str:
    """P(the cause lies outside the model) in words (``likely``), or as a percentage with the figures shown."""
    return percent(p) if figures else outside_words(p)


def escalation_price_text(model) -> str:
    """What escalating means and costs, the model's words: ``Call the … engineer — 720 min``."""
    if model.escalation is None:
        return "Hand the unit over (no price in the model)"
    return f"{model.escalation.label} — {cost_text(model.escalation.cost, model.cost_unit)}"


def escalation_reason(state, figures: bool = False) -> str:
    """Why the tool advises escalating, in words: the cause outside the model, or the cheaper course."""
    d = state.decision
    reason = d.reason if d is not None else None
    outside = f"{OUTSIDE_NAME}: {outside_text(state.outside_model_p, figures)}"
    if reason is None or reason.kind == "outside-model":
        return f"{outside}; no listed repair is expected to help"
    if reason.kind == "escalation-cheaper":
        repair = dict(reason.costs).get("repair")
        against = (f"repairing in order (expected {cost_text(round(repair), state.cost_unit)})"
                   if repair is not None else "anything left to repair")
        return f"handing over is expected to cost less than {against}; {outside}"
    if reason.kind == "nothing-left":
        return f"no repairable suspect is left; {outside}"
    return reason.text


def why_line(state) -> str:
    """One line saying what to do next and why, in the technician's words, from the policy's decision."""
    unit = state.cost_unit
    decision = state.decision
    if state.status == Status.DIAGNOSING:
        if state.why is not None:
            return state.why.text
        nxt = state.next_check
        return f"next: {nxt.label} ({cost_text(nxt.cost, unit)})" if nxt is not None else ""
    if state.status == Status.AWAITING_VERIFICATION:
        v = state.verification
        reason = decision.reason if decision is not None else None
        if reason is not None and reason.kind == "unit-may-work":
            works = dict(reason.probabilities).get("unit works", 0.0)
            return (f"the repair's own check still reads abnormal, but the unit may work ({percent(works)}): "
                    f"try it before anything else: {v.label} ({cost_text(v.cost, unit)})")
        return f"check that the repair worked: {v.label} ({cost_text(v.cost, unit)})"
    if state.status == Status.CONFIRMED:
        return "the unit works: the repair is confirmed"
    if state.status == Status.ESCALATED:
        return "the unit was handed over"
    if decision is not None and decision.action == "escalate":
        return escalation_reason(state)
    target = decision.target if decision is not None and decision.action == "repair" else None
    step = next((r for r in state.repair_order if r.id == target), None) if target else None
    if step is None:
        step = next((r for r in state.repair_order if r.cost is not None), None)
    if step is None:
        return "no check is worth its time now and the model lists no repair: hand the unit over"
    job = f"{step.repair_label} ({cost_text(step.cost, unit)})"
    if state.status == Status.ISOLATED and state.isolated is not None and state.isolated.id == step.id:
        return f"{step.label} stands at {percent(step.p)}: repair it — {job}"
    finish = ""
    if decision is not None and decision.expected_cost is not None:
        finish = f"; expected {cost_text(round(decision.expected_cost), unit)} to finish"
    return f"no check is worth its time now: repair {step.label} ({percent(step.p)}) first — {job}{finish}"


def diagnosis_text(state, model=None, figures: bool = False) -> str:
    """What the diagnosis says now, in words: the status, what to do next and why.

    When the tool advises escalating, that comes first: why (the cause
    outside the model in words), what escalating means and its price with
    its unit (the model's), and the key.
    """
    word = status_word(state)
    if state.status == Status.ESCALATED:
        what = f": {escalation_price_text(model)}" if model is not None else ""
        return (f"{word}{what}. The diagnosis is finished; key q quits (the summary is written beside "
                "the log), u takes the escalation back.")
    if advises_escalation(state):
        lines = [f"{word} — {escalation_reason(state, figures)}.".replace(" %", "\u00a0%")]
        if model is not None:
            lines.append(f"{escalation_price_text(model)}. Key e escalates.")
        return "\n".join(lines)
    if state.status == Status.DIAGNOSING:
        nxt = state.next_check
        if nxt is None:
            return f"{word} — no check is left; record a repair (key r)."
        # A non-breaking space keeps each percentage whole when the line wraps.
        return f"Do the first check. Why: {why_line(state)}".replace(" %", "\u00a0%")
    if state.status == Status.ISOLATED:
        return f"{word} — {why_line(state)}. Key r records the repair."
    if state.status == Status.AMBIGUITY:
        lines = [f"{word} — {why_line(state)}. Repair order (key r):"]
        lines += repair_order_lines(state, limit=3)
        return "\n".join(lines)
    if state.status == Status.AWAITING_VERIFICATION:
        return f"{word} — {why_line(state)}. Key v opens it; if the fault persists the diagnosis goes on."
    if state.status == Status.CONFIRMED:
        return f"{word} — the unit works. Key q quits; the summary is written beside the log."
    return word


class StatusBar(Static):
    """One line: the complaint, the remaining uncertainty, the cost so far, the status, and a busy mark."""

    def show(self, complaint: str, state, busy: bool, figures: bool = False) -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        if busy:
            text.append("⏳ working… ", style="bold reverse")
        if state is not None:
            text.append(status_word(state), style="bold")
            top = next((s for s in state.suspects if s.in_question), None)
            if figures:
                text.append(f" │ uncertainty {bits_text(state.entropy_bits)}")
            elif top is not None:
                text.append(f" │ top suspect {percent(top.p)}")
            text.append(f" │ spent {cost_text(state.cost_spent, state.cost_unit)}")
            text.append(f" │ {complaint}")
        else:
            text.append(complaint)
        self.update(text)


class DiagnosisPanel(VerticalScroll):
    """Says whether the fault is isolated, only an ambiguity group is left, or a repair awaits verification."""

    def compose(self):
        yield Static(id="diagnosis-text")

    def show(self, state, model=None, figures: bool = False) -> None:
        self.query_one("#diagnosis-text", Static).update(Text(diagnosis_text(state, model, figures)))
        for status in STATUS_WORDS:
            self.set_class(state.status == status, f"-{status}")
        self.set_class(advises_escalation(state), "-escalate")


def check_rows(state):
    """The rows of the checks list: the recommended check first, the others by value for time, then
    the skipped checks (kept listed so they can be brought back).

    Returns a list of ``(check id, ranking row or None, skip reason or None)``.
    """
    rows = []
    recommended = state.next_check.check if state.next_check is not None else None
    if recommended is not None:
        rows += [(r.check, r, None) for r in state.ranking if r.check == recommended]
    rows += [(r.check, r, None) for r in state.ranking if r.check != recommended]
    rows += [(check_id, None, reason) for check_id, reason in state.skipped]
    return rows


def checks_title(state) -> str:
    """The title of the checks list, saying what its first row is."""
    if state.next_check is not None:
        return "Checks: the recommended one first, then by value for time"
    if state.status in ("isolated", "ambiguity"):
        return "Other checks: none is worth its time now (repair first)"
    return "Checks left"


class ChecksTable(DataTable):
    """The checks: the recommended one first, then by value for time, then the skipped ones (dimmed).

    By default each row says in words how much the check narrows things down
    and gives the chance of an abnormal reading; with the figures shown (key
    f) it gives the expected information in bits and the score in bits per
    cost unit instead.
    """

    # Enter selects the highlighted row (the screen opens that check); shown in the footer.
    BINDINGS = [
        Binding("enter", "select_cursor", "Open", key_display="⏎"),
        Binding("home", "scroll_top", "First", show=False),
        Binding("end", "scroll_bottom", "Last", show=False),
    ]

    def on_mount(self) -> None:
        self.cursor_type = "row"
        self.zebra_stripes = True
        self.ids: list[str] = []
        self.skipped: dict[str, str] = {}

    def show(self, state, model, figures: bool = False, keep_cursor: bool = False) -> None:
        """Fill the table; the cursor goes to the first row (the recommendation) unless ``keep_cursor``.

        Every column gets the width of its widest cell, set here, so a cost
        never loses its unit however the table is redrawn.
        """
        unit = state.cost_unit
        keep = self.cursor_row if keep_cursor else 0
        rows = check_rows(state)
        recommended = state.next_check.check if state.next_check is not None else None
        headers = ("#", "Check", "Cost") + (("Info", "Score") if figures else ("Narrows", "Abnormal"))
        keys = ("rank", "label", "cost") + (("bits", "score") if figures else ("narrows", "abnormal"))
        table: list[tuple[str, list[str], bool]] = []
        for i, (check_id, row, _) in enumerate(rows, 1):
            if row is None:
                check = model.check_by_id[check_id]
                table.append((check_id, [str(i), "↷ skipped: " + check.label, cost_text(check.cost, unit), "—", "—"],
                              True))
                continue
            label = ("► " if row.check == recommended else "") + ("⚠ " if row.caution else "") + row.label
            if figures:
                extra = [bits_text(row.bits), score_text(row.score, unit)]
            else:
                extra = [narrowing_words(row.bits, state.entropy_bits), chance_abnormal(row)]
            table.append((row.check, [str(i), label, cost_text(row.cost, unit), *extra], False))
        widths = [max([len(h)] + [len(cells[c]) for _, cells, _ in table]) for c, h in enumerate(headers)]
        # The label takes what is left: the border (2), the scrollbar (2) and one space each side of a cell.
        rest = sum(w + 2 for c, w in enumerate(widths) if c != 1)
        widths[1] = max(12, self.app.size.width - 4 - rest - 2)
        self.clear(columns=True)
        for header, key, width in zip(headers, keys, widths):
            self.add_column(header, key=key, width=width)
        for check_id, cells, dim in table:
            cells[1] = truncate(cells[1], widths[1])
            self.add_row(*(Text(c, style="dim") if dim else c for c in cells), key=check_id)
        self.ids = [check_id for check_id, _, _ in table]
        self.skipped = {check_id: reason for check_id, row, reason in rows if row is None}
        if rows:
            self.move_cursor(row=min(max(keep, 0), len(rows) - 1))

    def highlighted_check(self) -> str | None:
        """Id of the check under the cursor, or None when the table is empty."""
        if self.row_count == 0:
            return None
        row_key, _ = self.coordinate_to_cell_key(Coordinate(self.cursor_row, 0))
        return row_key.value

    def row_ids(self) -> list[str]:
        """The check ids in the order the rows show them."""
        return list(getattr(self, "ids", []))


class SuspectsPanel(VerticalScroll):
    """Every suspect with its probability as a number and a bar."""

    def compose(self):
        yield Static(id="suspects-text")

    def show(self, suspects: Iterable, state=None, model=None, figures: bool = False) -> None:
        """Every suspect not repaired (a repaired part is listed under the findings instead).

        A cause outside the model (one per gate with unlisted causes) is said
        in words (``not listed (unlikely):``, the gate on the next line), its number with the
        figures shown; the bottom border says the same for every such cause
        together (``outside the model: unlikely``).
        """
        text = Text(no_wrap=True, overflow="ellipsis")
        for s in suspects:
            if s.repaired:
                continue
            if s.unlisted:
                gate = s.id.rsplit("~", 1)[0]  # "<gate>~unlisted"; an id never holds "~"
                under = model.label_of(gate) if model is not None else gate
                text.append(f"{percent(s.p) if figures else '':>7} ")
                text.append(bar(s.p, 5), style="bold")
                words = "" if figures else f" ({outside_words(s.p)})"
                # The gate on a line of its own: after "not listed (near certain): " too
                # little of an 80-column panel is left to say which part of the unit it is.
                text.append(f" not listed{words}:\n")
                text.append(f"{'':>14}{under}\n")
                continue
            text.append(f"{percent(s.p):>7} ")
            text.append(bar(s.p, 5), style="bold")
            # An inhibit gate's condition (a demand peak, a season) is shown, as the
            # findings speak of it, but it is no fault to repair: say so before its name.
            text.append(f" {'condition: ' if s.condition else ''}{s.label}\n")
        self.query_one("#suspects-text", Static).update(text)
        if state is not None and state.outside_model_by_gate:
            self.border_subtitle = f"outside the model: {outside_text(state.outside_model_p, figures)}"
        else:
            self.border_subtitle = ""


class FindingsPanel(VerticalScroll):
    """The findings so far, in order."""

    def compose(self):
        yield Static(id="findings-text")

    def show(self, state, model) -> None:
        self.query_one("#findings-text", Static).update(Text("\n".join(finding_lines(state, model))))
        self.scroll_end(animate=False)
