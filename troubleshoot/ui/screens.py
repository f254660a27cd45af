"""The screens of the terminal UI: start, main, a check, prompts, choices, help, summary.

Screens are thin: they render what the session says (through the app, which
runs every session action in a worker) and hand the technician's keys back
as results. No screen computes a probability.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, cast

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.coordinate import Coordinate
from textual.screen import ModalScreen, Screen
from textual.widgets import DataTable, Footer, Input, Markdown, OptionList, Static
from textual.widgets.option_list import Option

from troubleshoot.session import Status
from troubleshoot.ui.widgets import (
    ChecksTable,
    DiagnosisPanel,
    FindingsPanel,
    StatusBar,
    SuspectsPanel,
    OUTSIDE_NAME,
    advises_escalation,
    bits_text,
    checks_title,
    cost_text,
    escalation_price_text,
    escalation_reason,
    outside_text,
    outcome_odds_line,
    percent,
    truncate,
)

#: Below this chance a repair asks for confirmation while another suspect stands isolated.
LOW_REPAIR_P = 0.10

if TYPE_CHECKING:  # the app imports this module to build its screens; the UI never imports the core
    from troubleshoot.advice.explain import Why
    from troubleshoot.ui.app import TroubleshootApp

#: Shown once at the start of every sitting (the start screen, or a notice when a session is resumed).
SAFETY_NOTICE = (
    "⚠ SAFETY: this tool suggests checks and repairs; it does not replace the equipment maker's "
    "procedures, lockout/tagout, local codes or licensed practice. Make a check only if you are "
    "qualified for it and the equipment is made safe as its caution says."
)

#: The job fields of the start screen (optional, for the supervisor's record): key, placeholder.
JOB_INPUTS = (("technician", "technician"), ("unit", "unit serial/tag"), ("site", "site"),
              ("work_order", "work order"))

#: Marks of a symptom on the start screen: what the technician saw, in words.
SEEN, NOT_SEEN, NOT_LOOKED = "seen", "not seen", "not looked at"


@dataclass(frozen=True)
class CheckCard:
    """What the check screen shows: one check, or the verification after a repair."""

    target: str
    label: str
    cost: float
    unit: str
    outcomes: tuple[str, ...]
    instructions: str = ""
    caution: str | None = None
    p_outcomes: tuple[float, ...] | None = None
    bits: float | None = None
    verification: bool = False
    why: Why | None = None  # the session's Why, when this is the recommended check


class StartScreen(Screen):
    """The complaint, the safety notice, and the symptoms to mark before the diagnosis begins."""

    BINDINGS = [
        Binding("y", "mark('seen')", "Seen"),
        Binding("n", "mark('not seen')", "Not seen"),
        Binding("minus", "mark('not looked at')", "Not looked", key_display="-"),
        Binding("b", "begin", "Begin"),
        Binding("q", "app.quit_session", "Quit"),
    ]

    @property
    def tsapp(self) -> TroubleshootApp:
        """The running application, typed as ours: its session, its state and its actions."""
        return cast("TroubleshootApp", self.app)

    def __init__(self, model) -> None:
        super().__init__(id="start")
        self.model = model
        self.marks: dict[str, str] = {s.id: NOT_LOOKED for s in model.symptoms}

    def compose(self) -> ComposeResult:
        model = self.model
        with Vertical(id="start-body"):
            yield Static(Text(f"troubleshoot — {model.name}", style="bold"), id="start-title")
            yield Static(Text(f"Complaint: {model.top_label or model.label_of(model.top)}"), id="complaint")
            yield Static(Text(SAFETY_NOTICE), id="safety")
            table: DataTable[str] = DataTable(id="symptoms", cursor_type="row", zebra_stripes=True)
            table.border_title = "Symptoms: mark each one y seen, n not seen, - not looked at"
            yield table
            with Horizontal(id="job"):
                job = getattr(self.tsapp.session, "job", None) or {}
                for key, placeholder in JOB_INPUTS:
                    yield Input(value=job.get(key, ""), placeholder=placeholder, id=f"job-{key}",
                                classes="job-field")
            yield Static("Optional for the record: Tab to the fields above. Press b to begin.", id="start-hint")
        yield Footer()

    def on_mount(self) -> None:
        table = self.query_one("#symptoms", DataTable)
        table.add_column("Mark", key="mark", width=22)
        table.add_column("Symptom", key="label")
        for s in self.model.symptoms:
            table.add_row(self._mark_text(s.id), s.label, key=s.id)
        if not self.model.symptoms:
            self.query_one("#start-hint", Static).update(
                "This model lists no symptoms. Press b to begin the diagnosis.")
        table.focus()

    def _mark_text(self, symptom_id: str) -> str:
        mark = self.marks[symptom_id]
        symbol = {SEEN: "[✔] seen", NOT_SEEN: "[✘] not seen", NOT_LOOKED: "[ ] not looked at"}[mark]
        return symbol

    def action_mark(self, mark: str) -> None:
        table = self.query_one("#symptoms", DataTable)
        if table.row_count == 0:
            return
        row_key, _ = table.coordinate_to_cell_key(Coordinate(table.cursor_row, 0))
        symptom_id = row_key.value
        assert symptom_id is not None, "every row is added with its symptom id as key"
        self.marks[symptom_id] = mark
        table.update_cell(row_key, "mark", self._mark_text(symptom_id))
        if table.cursor_row < table.row_count - 1:
            table.move_cursor(row=table.cursor_row + 1)

    def observations(self) -> list[tuple[str, int]]:
        """(symptom id, outcome index) for every symptom marked seen (abnormal) or not seen (normal)."""
        return [(sid, 1 if mark == SEEN else 0) for sid, mark in self.marks.items() if mark != NOT_LOOKED]

    def job(self) -> dict:
        """The job fields as typed (empty ones left out)."""
        out = {}
        for key, _ in JOB_INPUTS:
            value = self.query_one(f"#job-{key}", Input).value.strip()
            if value:
                out[key] = value
        return out

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.query_one("#symptoms", DataTable).focus()

    def action_begin(self) -> None:
        self.tsapp.begin_diagnosis(self.observations(), self.job())


class MainScreen(Screen):
    """Ranked checks, suspects and findings, together; the keys act on the session.

    Every key has one meaning on this screen; the footer shows the common
    ones and the help (?) lists them all.
    """

    BINDINGS = [
        Binding("s", "skip", "Skip"),
        Binding("k", "unskip", "Unskip", show=False),
        Binding("u", "undo", "Undo"),
        Binding("x", "retract", "Retract"),
        Binding("r", "repair", "Repair"),
        Binding("v", "verify", "Verify"),
        Binding("m", "note", "Note"),
        Binding("e", "escalate", "Escalate"),
        Binding("f", "figures", "Figures", show=False),
        Binding("question_mark", "help", "Help", key_display="?"),
        Binding("q", "app.quit_session", "Quit"),
    ]

    @property
    def tsapp(self) -> TroubleshootApp:
        """The running application, typed as ours: its session, its state and its actions."""
        return cast("TroubleshootApp", self.app)

    def __init__(self) -> None:
        super().__init__(id="main")

    def compose(self) -> ComposeResult:
        yield StatusBar(id="status")
        panel = DiagnosisPanel(id="diagnosis")
        panel.border_title = "Diagnosis"
        yield panel
        with Vertical(id="checks-panel"):
            yield ChecksTable(id="checks")
            yield Static(id="check-detail")
        with Horizontal(id="lower"):
            suspects = SuspectsPanel(id="suspects")
            suspects.border_title = "Suspects: chance failed"
            yield suspects
            findings = FindingsPanel(id="findings")
            findings.border_title = "Findings and repairs"
            yield findings
        # Compact: every key of this screen fits in 80 columns, Verify and Escalate included.
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.query_one("#checks-panel").border_title = "Checks"
        self.query_one("#checks", ChecksTable).focus()
        self.show_state()

    def show_state(self, keep_cursor: bool = False) -> None:
        """Render the app's latest session state (nothing is computed here)."""
        app = self.tsapp
        state = app.state
        self.query_one("#status", StatusBar).show(app.complaint, state, app.busy, app.show_figures)
        if state is None:
            return
        model = app.session.model
        self.query_one("#diagnosis", DiagnosisPanel).show(state, model, app.show_figures)
        self.query_one("#checks-panel").border_title = checks_title(state)
        self.query_one("#checks", ChecksTable).show(state, app.session.model, app.show_figures, keep_cursor)
        self.query_one("#suspects", SuspectsPanel).show(state.suspects, state, model, app.show_figures)
        self.query_one("#findings", FindingsPanel).show(state, app.session.model)
        self._show_detail()
        self.refresh_bindings()

    def show_busy(self) -> None:
        self.query_one("#status", StatusBar).show(self.tsapp.complaint, self.tsapp.state, self.tsapp.busy,
                                                  self.tsapp.show_figures)
        self.query_one("#checks", ChecksTable).set_class(self.tsapp.busy, "-busy")

    def _show_detail(self) -> None:
        """The whole name of the check under the cursor, and its outcomes (or why it was skipped)."""
        state = self.tsapp.state
        detail = self.query_one("#check-detail", Static)
        table = self.query_one("#checks", ChecksTable)
        check_id = table.highlighted_check()
        if state is None:
            detail.update("")
            return
        if check_id is None:
            detail.update("No check is left to rank.")
            return
        model = self.tsapp.session.model
        if check_id in table.skipped:
            check = model.check_by_id[check_id]
            detail.update(Text(f"{check.label}\n↷ skipped: {table.skipped[check_id]} — key k brings it back"))
            return
        row = next((r for r in state.ranking if r.check == check_id), None)
        if row is None:
            detail.update("")
            return
        detail.update(Text(f"{row.label}\n{outcome_odds_line(row)}"))

    def on_resize(self) -> None:
        self.show_state(keep_cursor=True)

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        self._show_detail()
        self.refresh_bindings()

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        self.action_open_check()

    def check_action(self, action: str, parameters) -> bool | None:
        state = self.tsapp.state
        # The verify key is shown only while a repair awaits its verification, or the unit is in doubt.
        if action == "verify":
            return state is not None and (state.status == Status.AWAITING_VERIFICATION or state.unit_check is not None)
        # Escalating is open at any time until the diagnosis is finished.
        if action == "escalate":
            return state is None or state.status not in (Status.CONFIRMED, Status.ESCALATED)
        return True

    def _highlighted_row(self):
        state = self.tsapp.state
        table = self.query_one("#checks", ChecksTable)
        check_id = table.highlighted_check()
        if state is None or check_id is None:
            self.tsapp.say("No check is left to open.")
            return None
        if check_id in table.skipped:
            self.tsapp.say("This check is skipped: key k brings it back first.")
            return None
        return next(r for r in state.ranking if r.check == check_id)

    def action_open_check(self) -> None:
        row = self._highlighted_row()
        if row is None:
            return
        state = self.tsapp.state
        model = self.tsapp.session.model
        check = model.check_by_id[row.check]
        why = state.why if state is not None and state.why is not None and state.why.check == row.check else None
        card = CheckCard(row.check, row.label, row.cost, model.cost_unit, tuple(row.outcomes),
                         check.instructions, row.caution, tuple(row.p_outcomes), row.bits, why=why)
        self.tsapp.push_screen(CheckScreen(card, self.tsapp.show_figures), self._check_done)

    def _check_done(self, result) -> None:
        if not result:
            return
        verb, card = result[0], result[1]
        if verb == "outcome":
            index = result[2]
            self.tsapp.perform(f"recording {card.outcomes[index]!r}",
                             lambda: self.tsapp.session.record_finding(card.target, index))
        elif verb == "skip":
            self._ask_skip_reason(card.target, card.label)

    def action_skip(self) -> None:
        row = self._highlighted_row()
        if row is not None:
            self._ask_skip_reason(row.check, row.label)

    def action_unskip(self) -> None:
        table = self.query_one("#checks", ChecksTable)
        check_id = table.highlighted_check()
        if check_id is None or check_id not in table.skipped:
            self.tsapp.say("Move to a skipped check (listed dimmed at the end) to bring it back.")
            return
        label = self.tsapp.session.model.label_of(check_id)
        self.tsapp.perform("bringing the check back", lambda: self.tsapp.session.unskip_check(check_id),
                         done=f"Brought back: {label}")

    def action_figures(self) -> None:
        self.tsapp.show_figures = not self.tsapp.show_figures
        self.show_state(keep_cursor=True)

    def _ask_skip_reason(self, check_id: str, label: str) -> None:
        def skip(reason: str | None) -> None:
            if reason is not None:
                self.tsapp.perform("skipping the check", lambda: self.tsapp.session.skip_check(check_id, reason))

        self.tsapp.push_screen(PromptScreen(f"Skip: {label}", "Why can this check not be done now?"), skip)

    def action_undo(self) -> None:
        self.tsapp.perform("undoing the last action", self.tsapp.session.undo, done="Undone: the last action.")

    def action_retract(self) -> None:
        state = self.tsapp.state
        if state is None:
            return
        options = []
        for view in state.findings:
            if view.kind == "complaint":
                continue
            when = f" (after {view.epoch} repair(s))" if view.epoch else ""
            options.append(((view.target, view.epoch), f"{view.label} — {view.outcome}{when}"))
        if not options:
            self.tsapp.say("No finding to retract or correct yet: the complaint starts the session.")
            return

        def chosen(result) -> None:
            if not result:
                return
            verb, (target, epoch) = result
            if verb == "retract":
                self.tsapp.perform("retracting the finding",
                                 lambda: self.tsapp.session.retract_finding(target, epoch))
                return
            view = next(v for v in state.findings if v.target == target and v.epoch == epoch)
            outcomes = self._outcomes_of(view)
            others = [(i, name) for i, name in enumerate(outcomes) if i != view.outcome_index]
            if len(others) == 1:
                self.tsapp.perform("correcting the finding",
                                 lambda: self.tsapp.session.correct_finding(target, others[0][0], epoch))
                return

            def corrected(result) -> None:
                if result:
                    self.tsapp.perform("correcting the finding",
                                     lambda: self.tsapp.session.correct_finding(target, result[1], epoch))

            self.tsapp.push_screen(ChoiceScreen(f"Correct: {view.label} — it read", others, "Record"), corrected)

        self.tsapp.push_screen(FindingChoiceScreen(options), chosen)

    def _outcomes_of(self, view) -> tuple[str, ...]:
        model = self.tsapp.session.model
        if view.target in model.check_by_id:
            return tuple(model.check_by_id[view.target].outcomes)
        if model.verification is not None:
            return tuple(model.verification.outcomes)
        return ("works", "still fails")

    def action_repair(self) -> None:
        state = self.tsapp.state
        if state is None:
            return
        model = self.tsapp.session.model
        unit = model.cost_unit
        p_of = {s.id: s.p for s in state.suspects}
        entries = []  # (event id, repair label, part label, cost, p)
        listed = set()
        for step in state.repair_order:
            if step.cost is None:
                continue
            listed.add(step.id)
            entries.append((step.id, step.repair_label, step.label, step.cost, step.p))
        for event in model.basic_events:
            if event.id in listed or event.repair is None or event.id in state.repairs:
                continue
            entries.append((event.id, event.repair.label, event.label, event.repair.cost, p_of.get(event.id, 0.0)))
        if not entries:
            self.tsapp.say("The model lists no repair left to record.")
            return
        counts: dict[str, int] = {}
        for _, repair_label, _, _, _ in entries:
            counts[repair_label] = counts.get(repair_label, 0) + 1
        options = []
        for event_id, repair_label, part, cost, p in entries:
            # Two repairs with the same words are told apart by the part they concern.
            what = f"{repair_label} [{part}]" if counts[repair_label] > 1 else repair_label
            options.append((event_id, f"{what} — {cost_text(cost, unit)} · chance {percent(p)}"))

        def record(event_id: str) -> None:
            self.tsapp.perform("recording the repair", lambda: self.tsapp.session.record_repair(event_id),
                             then=self.tsapp.open_verification)

        def chosen(result) -> None:
            if not result:
                return
            event_id = result[1]
            isolated = state.isolated
            p = p_of.get(event_id, 0.0)
            if isolated is not None and isolated.id != event_id and p < LOW_REPAIR_P:
                question = (f"{isolated.label} stands isolated at {percent(isolated.p)}, and "
                            f"{model.label_of(event_id)} has a chance of {percent(p)}. Record this repair anyway?")

                def confirmed(yes: bool | None) -> None:
                    if yes:
                        record(event_id)

                self.tsapp.push_screen(ConfirmScreen("Repair a part that is probably not at fault?", question),
                                     confirmed)
                return
            record(event_id)

        self.tsapp.push_screen(ChoiceScreen("Record a repair (repair order first)", options, "Record"), chosen)

    def action_verify(self) -> None:
        self.tsapp.open_verification()

    def action_note(self) -> None:
        def noted(text: str | None) -> None:
            if text is not None:
                self.tsapp.perform("adding the note", lambda: self.tsapp.session.add_note(text),
                                 done="Note added to the log.")

        self.tsapp.push_screen(PromptScreen("Note", "Your note for the log:"), noted)

    def action_escalate(self) -> None:
        """Hand the unit over, after a card that says what it means, its price and the tool's advice."""
        state = self.tsapp.state
        if state is None:
            return
        model = self.tsapp.session.model

        def confirmed(yes: bool | None) -> None:
            if yes:
                self.tsapp.perform("handing the unit over", self.tsapp.session.escalate,
                                   done=f"Escalated: {escalation_price_text(model)}. The summary is written.")

        card = escalation_card_text(state, model, self.tsapp.show_figures)
        self.tsapp.push_screen(ConfirmScreen("Escalate: hand the unit over?", card, "y escalates",
                                             id="escalate-card"), confirmed)

    def action_help(self) -> None:
        self.tsapp.push_screen(HelpScreen(self.tsapp.session.engine.name))


class CheckScreen(ModalScreen):
    """One check (or the verification): instructions, outcomes, and the caution to acknowledge first.

    The outcome keys 1, 2, ... carry the outcome names in the footer. For the
    recommended check the card also says why: the suspects it separates, each
    with its chance now and after each outcome.
    """

    BINDINGS = [
        Binding("a", "acknowledge", "Ack caution"),
        Binding("s", "skip", "Skip"),
        Binding("escape", "back", "Back", key_display="esc"),
        Binding("q", "back", "Back", show=False),
    ]

    #: Footer columns the outcome keys share (80 less the other keys of this
    #: screen); each name is cut to its share, the card lists every name whole.
    FOOTER_OUTCOME_COLUMNS = 45

    @property
    def tsapp(self) -> TroubleshootApp:
        """The running application, typed as ours: its session, its state and its actions."""
        return cast("TroubleshootApp", self.app)

    def __init__(self, card: CheckCard, figures: bool = False) -> None:
        super().__init__(id="check-screen")
        self.card = card
        self.figures = figures
        self.acknowledged = card.caution is None
        # Keys 1..K, each named after its outcome in the footer (a key takes
        # its name plus four columns: the key, spaces and padding).
        width = max(4, self.FOOTER_OUTCOME_COLUMNS // len(card.outcomes) - 4)
        for i, name in enumerate(card.outcomes):
            self._bindings.bind(str(i + 1), f"outcome({i})", truncate(name, width))

    @property
    def keys_text(self) -> str:
        """``key 1 or 2``, ``keys 1 to 3``: how to enter the outcome."""
        k = len(self.card.outcomes)
        return "key 1 or 2" if k == 2 else f"keys 1 to {k}"

    def compose(self) -> ComposeResult:
        card = self.card
        with VerticalScroll(id="check-card", classes="card"):
            title = "Verify the repair: " if card.verification else ""
            yield Static(Text(title + card.label, style="bold"), id="check-title")
            facts = f"Cost: {cost_text(card.cost, card.unit)}"
            if card.bits is not None and self.figures:
                facts += f" · expected information: {bits_text(card.bits)}"
            yield Static(facts, id="check-facts")
            if card.caution:  # first, so it is read before the instructions
                yield Static(Text(f"⚠ CAUTION: {card.caution}"), id="check-caution", classes="caution")
            if card.instructions:
                yield Static(Text("How: " + card.instructions), id="check-instructions")
            lines = []
            for i, name in enumerate(card.outcomes):
                odds = f"  (chance {percent(card.p_outcomes[i])})" if card.p_outcomes else ""
                lines.append(f"  key {i + 1}: {name}{odds}")
            yield Static(Text("Outcomes:\n" + "\n".join(lines)), id="check-outcomes")
            yield Static(id="check-message")
            if card.why is not None:  # below the message: scroll down to read it
                yield Static(Text(why_card_text(card)), id="check-why")
        yield Footer()

    def on_mount(self) -> None:
        self._show_ack()

    def _show_ack(self) -> None:
        message = self.query_one("#check-message", Static)
        if self.card.caution is None:
            message.update(f"This check lists no safety caution. Enter its outcome with {self.keys_text}.")
        elif self.acknowledged:
            message.update(f"✔ Caution acknowledged. Enter the outcome with {self.keys_text}.")
        else:
            message.update("Read the caution, then press a to acknowledge it before entering an outcome.")
        self.refresh_bindings()

    def check_action(self, action: str, parameters) -> bool | None:
        if action == "acknowledge":
            return self.card.caution is not None
        if action == "skip":
            return not self.card.verification
        return True

    def action_acknowledge(self) -> None:
        if not self.acknowledged and self.card.caution:
            if not self.tsapp.acknowledge_caution(self.card.target):  # logged, for the supervisor's record
                return
        self.acknowledged = True
        self._show_ack()

    def action_outcome(self, index: int) -> None:
        if not self.acknowledged:
            self.query_one("#check-message", Static).update(
                Text("✘ Refused: acknowledge the safety caution first (press a), then enter the outcome.",
                     style="bold"))
            self.tsapp.bell()
            return
        self.dismiss(("outcome", self.card, index))

    def action_skip(self) -> None:
        self.dismiss(("skip", self.card))

    def action_back(self) -> None:
        self.dismiss(None)

    @property
    def message(self) -> str:
        """The message line as plain text (what a refusal says)."""
        return str(self.query_one("#check-message", Static).render())


def why_card_text(card: CheckCard) -> str:
    """Why this check: the reason, then each suspect it separates, its chance now and after each outcome."""
    why = card.why
    assert why is not None, "only the recommended check's card says why"
    lines = [f"Why: {why.text}", "Suspects it separates (chance now → after each outcome):"]
    for s in why.suspects:
        after = " · ".join(f"{name}: {percent(p) if p is not None else 'impossible'}" for name, p in s.p_if)
        lines.append(f"  {s.label}: {percent(s.p_now)} → {after}")
    return "\n".join(lines)


def escalation_card_text(state, model, figures: bool = False) -> str:
    """The escalation card: what escalating means and costs (the model's words), the tool's advice, the end."""
    lines = [f"What it means: {model.escalation.label}" if model.escalation is not None
             else "What it means: hand the unit over beyond the model (the model names no escalation)."]
    if model.escalation is not None:
        lines.append(f"Price: {cost_text(model.escalation.cost, model.cost_unit)}, counted once "
                     "(the model's figure).")
        if model.escalation.instructions:
            lines.append(f"Before handing over: {model.escalation.instructions}")
    else:
        lines.append("Price: the model gives no price for escalating.")
    if advises_escalation(state):
        lines.append(f"The tool advises it: {escalation_reason(state, figures)}.")
    else:
        d = state.decision
        reason = d.reason if d is not None else None
        courses = {"check": "the recommended check", "repair": "a repair", "verify": "verifying the repair"}
        if reason is not None and reason.kind == "unit-may-work":
            courses["verify"] = "trying the unit first (it may work already)"
        course = courses.get(str(d.action), str(d.action)) if d is not None else "going on"
        finish = (f" (expected {cost_text(round(d.expected_cost), model.cost_unit)} to finish)"
                  if d is not None and d.expected_cost is not None else "")
        lines.append(f"The tool advises {course} instead{finish}; {OUTSIDE_NAME}: "
                     f"{outside_text(state.outside_model_p, figures)}.")
        # Otherwise the two prices on this card read as if the tool chose the dearer course.
        if (reason is not None and reason.kind == "free-check" and d is not None and d.expected_cost is not None
                and model.escalation is not None and d.expected_cost > model.escalation.cost):
            lines.append("The check costs nothing: escalating after it costs no more than escalating now.")
        elif reason is not None and reason.kind == "check-before-escalating":
            lines.append("Before handing over, this check may still find a listed cause; "
                         "its figure counts escalating after it if it does not.")
        elif reason is not None and d is not None and d.action == "check" and "escalate" in dict(reason.costs):
            # The reason weighed the check against the price (advice/policy._check_reason).
            lines.append("That figure counts the checks it weighs and then repairs, none after them; "
                         "while a check beats repairing the tool goes on checking.")
    lines.append("Escalating ends this diagnosis as escalated (the log and the summary say so); "
                 "u on the main screen takes it back.")
    return "\n".join(lines).replace(" %", "\u00a0%")


class ConfirmScreen(ModalScreen):
    """A yes/no question; y confirms, n or Escape declines."""

    BINDINGS = [
        Binding("y", "answer(True)", "Yes"),
        Binding("n", "answer(False)", "No"),
        Binding("escape", "answer(False)", "No", show=False),
    ]

    def __init__(self, title: str, question: str, yes: str = "y records it", id: str | None = None) -> None:
        super().__init__(classes="prompt-screen", id=id)
        self.title_text = title
        self.question = question
        self.yes = yes

    def compose(self) -> ComposeResult:
        with Vertical(classes="card"):
            yield Static(Text(self.title_text, style="bold"))
            yield Static(Text(self.question), id="confirm-question")
            yield Static(f"{self.yes}; n or Escape goes back.")
        yield Footer()

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)


class PromptScreen(ModalScreen):
    """Asks for one line of text (a skip reason, a note); Enter gives it, Escape cancels."""

    BINDINGS = [Binding("escape", "cancel", "Cancel", key_display="esc")]

    def __init__(self, title: str, prompt: str) -> None:
        super().__init__(classes="prompt-screen")
        self.title_text = title
        self.prompt = prompt

    def compose(self) -> ComposeResult:
        with Vertical(classes="card"):
            yield Static(Text(self.title_text, style="bold"))
            yield Static(self.prompt)
            yield Input(id="prompt-input")
            yield Static("Enter gives it; Escape cancels.", id="prompt-message")
        yield Footer()

    def on_mount(self) -> None:
        self.query_one("#prompt-input", Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        text = event.value.strip()
        if not text:
            self.query_one("#prompt-message", Static).update("✘ Type something first, or Escape to cancel.")
            return
        self.dismiss(text)

    def action_cancel(self) -> None:
        self.dismiss(None)


class RecordList(OptionList):
    """An option list whose Enter is shown in the footer as recording the highlighted entry."""

    BINDINGS = [Binding("enter", "select", "Record", key_display="⏎")]


class RetractList(OptionList):
    """An option list whose Enter is shown in the footer as retracting the highlighted finding."""

    BINDINGS = [Binding("enter", "select", "Retract", key_display="⏎")]


class ChoiceScreen(ModalScreen):
    """A list to choose one entry from; Enter takes it, Escape goes back."""

    BINDINGS = [Binding("escape", "cancel", "Back", key_display="esc")]
    LIST: type[OptionList] = RecordList

    def __init__(self, title: str, options: list[tuple[object, str]], verb: str = "take") -> None:
        super().__init__(classes="choice-screen")
        self.title_text = title
        self.options = options
        self.verb = verb

    def compose(self) -> ComposeResult:
        with Vertical(classes="card"):
            yield Static(Text(self.title_text, style="bold"))
            yield self.LIST(*[Option(text, id=str(i)) for i, (_, text) in enumerate(self.options)],
                            id="choices")
        yield Footer()

    def on_mount(self) -> None:
        choices = self.query_one("#choices", OptionList)
        choices.highlighted = 0
        choices.focus()

    def _current(self):
        index = self.query_one("#choices", OptionList).highlighted
        return None if index is None else self.options[index][0]

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        event.stop()
        self.action_take()

    def action_take(self) -> None:
        key = self._current()
        if key is not None:
            self.dismiss((self.verb.lower(), key))

    def action_cancel(self) -> None:
        self.dismiss(None)


class FindingChoiceScreen(ChoiceScreen):
    """Choose a finding to retract (as if never made) or correct (flip its outcome)."""

    BINDINGS = [
        Binding("c", "correct", "Correct"),
        Binding("escape", "cancel", "Back", key_display="esc"),
    ]
    LIST = RetractList

    def __init__(self, options) -> None:
        super().__init__("Retract a finding (Enter) or correct its outcome (c)", options, "retract")

    def action_correct(self) -> None:
        key = self._current()
        if key is not None:
            self.dismiss(("correct", key))


HELP_TEXT = """\
# Keys

**Start screen**: `↑ ↓` move through the symptoms; `y` seen, `n` not seen,
`-` not looked at; `Tab` goes to the optional fields for the record
(technician, unit, site, work order); `b` begins; `q` quits.

**Main screen** (one meaning per key)

| Key | Does |
|-----|------|
| ↑ ↓ | move through the checks; the line under the list shows the whole name |
| ⏎ | open the highlighted check: how to do it, its outcomes, its caution, why |
| s | skip the highlighted check (say why; the log keeps the reason) |
| k | bring a skipped check back (skipped checks stay listed, dimmed, at the end) |
| u | undo the last action |
| x | retract a finding, or correct its outcome (c) |
| r | record a repair (the repair order comes first) |
| v | verify the last repair (shown while a repair awaits it, or when its own check read abnormal and the unit may work all the same) |
| m | add a note to the log |
| e | escalate: hand the unit over; a card shows what it means, its price and the tool's advice; `y` confirms, `u` undoes |
| f | show or hide the figures: information in bits, scores, uncertainty |
| ? | this help |
| q | quit: every action is already saved in the log |

**A check**: `a` acknowledges its safety caution (needed before an outcome),
`1`, `2`, ... enter the outcome named beside the key, `s` skips it,
`q` or `esc` goes back without entering anything.

**Anywhere**: `Ctrl+C` and `Ctrl+Q` quit as safely as `q` (the log is already
saved and the summary is brought up to date); `Ctrl+T` switches between a
light and a dark theme.

# The words and numbers

- **First row**: the recommended check; the line "Why" says what it is expected to save.
- **Cost**: what a check or repair takes, in the model's cost unit.
- **Narrows**: how much the check is expected to narrow the suspects down
  (a lot, well, somewhat, a little, not at all), against what is still unknown.
- **Abnormal**: the chance that the check reads abnormal.
- **⚑ ESCALATE**: the tool advises handing the unit over; the line says why
  (how likely a cause this model does not list is, in words: remote,
  unlikely, possible, likely, near certain) and what it costs.
- **outside the model** (under the suspects): how likely the cause is one the
  model does not list, all such causes together, in those words; each gate's
  share is listed among the suspects as **not listed (…):**, the
  gate on the line below.
- **Suspects**: the chance that each part has failed, given the findings;
  a repaired part leaves the list and is shown under the findings.
- With the figures shown (`f`): **Info**, the information the check is
  expected to give in bits; **Score**, bits per cost unit (a free
  informative check reads ∞); **uncertainty**, what is still unknown, in bits;
  the chance of a cause outside the model as a percentage.

⚠ The suggestions do not replace the equipment maker's procedures,
lockout/tagout, local codes or licensed practice.

Press Escape to close this help.
"""


class HelpScreen(ModalScreen):
    """The keys and what the numbers mean."""

    BINDINGS = [
        Binding("escape", "close", "Close", key_display="esc"),
        Binding("question_mark", "close", "Close", show=False),
        Binding("q", "close", "Close", show=False),
    ]

    def __init__(self, engine: str = "") -> None:
        super().__init__()
        self.engine = engine

    def compose(self) -> ComposeResult:
        with VerticalScroll(classes="card", id="help-card"):
            text = HELP_TEXT
            if self.engine:
                text += (f"\nThe probabilities are computed exactly by the {self.engine} "
                         "(a decision diagram is used where the model is too wide for a join tree).\n")
            yield Markdown(text)
        yield Footer()

    def action_close(self) -> None:
        self.dismiss(None)


class SafetyScreen(ModalScreen):
    """The safety notice, shown once when a saved session is reopened."""

    BINDINGS = [Binding("enter", "close", "Understood", key_display="⏎"),
                Binding("escape", "close", "Understood", show=False)]

    def compose(self) -> ComposeResult:
        with Vertical(classes="card"):
            yield Static(Text(SAFETY_NOTICE), id="safety")
            yield Static("Press Enter to go on with the saved session.")
        yield Footer()

    def action_close(self) -> None:
        self.dismiss(None)


class SummaryScreen(Screen):
    """The end-of-session summary, as written beside the log."""

    BINDINGS = [
        Binding("q", "app.quit_session", "Quit"),
        Binding("escape", "back", "Back", key_display="esc"),
    ]

    def __init__(self, markdown: str) -> None:
        super().__init__(id="summary")
        self.markdown = markdown

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="summary-body"):
            yield Markdown(self.markdown, id="summary-text")
        yield Footer()

    def action_back(self) -> None:
        self.app.pop_screen()
