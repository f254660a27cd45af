"""The terminal UI, driven key by key with textual's Pilot at 80 x 24 on the demo models.

The technician in these tests answers every check as the equipment would with
one component failed: a check reads abnormal exactly when one of its causes
has occurred, following the fault tree's gate logic (NUREG-0492, chapter IV:
an OR gate occurs when any input occurs, an AND gate when all do, an
at-least-k gate when k do). The log the UI writes is confirmed by
``troubleshoot replay``, which re-runs every action from the model.
"""

from __future__ import annotations

import ast
import asyncio
import importlib.util
import io
import re
from pathlib import Path

import pytest
from rich.console import Console

import bruteforce as bf
from troubleshoot.session.summary import summary_markdown, summary_path
from troubleshoot.ui.app import TroubleshootApp
from troubleshoot.ui.screens import (
    SAFETY_NOTICE,
    ChoiceScreen,
    CheckScreen,
    ConfirmScreen,
    FindingChoiceScreen,
    HelpScreen,
    MainScreen,
    PromptScreen,
    SafetyScreen,
    StartScreen,
    SummaryScreen,
)

SIZE = (80, 24)
UI_SOURCES = sorted((Path(__file__).resolve().parents[1] / "troubleshoot" / "ui").glob("*.py")) + [
    Path(__file__).resolve().parents[1] / "troubleshoot" / "session" / "summary.py"
]


def sessionlog():
    from troubleshoot.session import logfile

    return logfile


def screen_text(app) -> str:
    """What the terminal shows, as plain text (the screen and the screens beneath a dialog)."""
    width, height = app.size
    console = Console(width=width, height=height, file=io.StringIO(), force_terminal=True, color_system=None,
                      record=True, legacy_windows=False, safe_box=False)
    console.print(app.screen._compositor.render_update(full=True, screen_stack=app._background_screens))
    return console.export_text()


def flat(text: str) -> str:
    """Screen text without box-drawing and block characters, whitespace collapsed (wrapped lines rejoin)."""
    return " ".join(re.sub("[\u2500-\u259f]", " ", text).split())


async def settle(app, pilot) -> None:
    """Let every session worker finish and its result reach the screen."""
    for _ in range(200):
        await pilot.pause()
        await app.workers.wait_for_complete()
        await pilot.pause()
        if not app.busy:
            return
    raise AssertionError("the session worker never finished")


def failed_nodes(model, failed_events: set[str]) -> set[str]:
    """Every event and gate that has occurred when exactly ``failed_events`` have (NUREG-0492 gate logic)."""
    memo: dict[str, bool] = {}

    def occurs(node: str) -> bool:
        if node not in memo:
            if node in model.event_by_id:
                memo[node] = node in failed_events
            else:
                gate = model.gate_by_id[node]
                inputs = [occurs(i) for i in gate.inputs]
                if gate.kind == "or":
                    memo[node] = any(inputs)
                elif gate.kind == "and":
                    memo[node] = all(inputs)
                elif gate.kind == "atleast":
                    memo[node] = sum(inputs) >= gate.k
                elif gate.kind == "not":
                    memo[node] = not inputs[0]
                else:  # inhibit: the input and the condition
                    memo[node] = inputs[0] and occurs(gate.condition)
        return memo[node]

    return {n for n in list(model.gate_by_id) + list(model.event_by_id) if occurs(n)}


class Technician:
    """Answers checks as the unit would with one failed component (until it is repaired)."""

    def __init__(self, model, fault: str):
        self.model = model
        self.fault = fault

    def outcome(self, check_id: str, repairs) -> int:
        failed = set() if self.fault in repairs else {self.fault}
        present = failed_nodes(self.model, failed)
        if check_id == self.model.top:
            return 1 if self.model.top in present else 0
        return bf.noise_free_outcome(self.model.check_by_id[check_id], lambda t: t in present)


def new_app(tmp_path, demo="rooftop", name="session.jsonl", **kwargs):
    session = sessionlog().new_session(demo, log_path=tmp_path / name, **kwargs)
    return TroubleshootApp(session), tmp_path / name


async def past_the_safety_notice(app, pilot) -> None:
    """A reopened session starts on the safety notice: acknowledge it, then settle on the main screen."""
    await settle(app, pilot)
    await pilot.press("enter")
    await settle(app, pilot)


async def mark_symptoms_and_begin(app, pilot, technician) -> None:
    assert isinstance(app.screen, StartScreen)
    for symptom in app.session.model.symptoms:
        await pilot.press("y" if technician.outcome(symptom.id, ()) else "n")
    await pilot.press("b")
    await settle(app, pilot)
    assert isinstance(app.screen, MainScreen)


async def enter_outcome(app, pilot, index: int) -> None:
    """On an open check: acknowledge its caution when it has one, then enter outcome ``index``."""
    screen = app.screen
    assert isinstance(screen, CheckScreen)
    if screen.card.caution:
        await pilot.press("a")
    await pilot.press(str(index + 1))
    await settle(app, pilot)


async def diagnose_to_the_end(app, pilot, technician, max_steps=60) -> None:
    """Top check after top check, repair in the repair order, verify, until the repair is confirmed."""
    for _ in range(max_steps):
        state = app.state
        if state.status == "confirmed":
            return
        if state.status == "diagnosing":
            assert isinstance(app.screen, MainScreen)
            check_id = state.next_check.check  # the recommended check is the first row
            assert rows(app)[0] == check_id
            await pilot.press("home", "enter")
            await pilot.pause()
            assert app.screen.card.target == check_id
            await enter_outcome(app, pilot, technician.outcome(check_id, state.repairs))
        elif state.status in ("isolated", "ambiguity"):
            await pilot.press("r")
            await pilot.pause()
            assert isinstance(app.screen, ChoiceScreen)
            await pilot.press("enter")
            await settle(app, pilot)
        else:  # awaiting verification: the verification opens after the repair, or with key v
            if not isinstance(app.screen, CheckScreen):
                await pilot.press("v")
                await pilot.pause()
            screen = app.screen
            assert isinstance(screen, CheckScreen) and screen.card.verification
            await enter_outcome(app, pilot, technician.outcome(screen.card.target, state.repairs))
    raise AssertionError(f"no confirmed repair after {max_steps} steps; status {app.state.status}")


def rows(app) -> list[str]:
    """The check ids in the order the main screen lists them."""
    return app.screen.query_one("#checks").row_ids()


def replay_ok(log: Path) -> None:
    if importlib.util.find_spec("troubleshoot.commands.replay") is None:
        pytest.skip("troubleshoot replay is not written yet; cannot confirm the log")
    from troubleshoot.cli import main

    assert main(["replay", str(log)]) == 0


def run(coro):
    return asyncio.run(coro)


# ---------------------------------------------------------------------- whole sessions


def test_whole_session_to_confirmed_repair(tmp_path):
    app, log = new_app(tmp_path, "rooftop")
    model = app.session.model
    fault = "run_capacitor_failed"
    technician = Technician(model, fault)

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            text = flat(screen_text(app))
            assert model.top_label in text  # the complaint
            assert "lockout/tagout" in text and "licensed practice" in text  # the safety notice
            await mark_symptoms_and_begin(app, pilot, technician)

            # The first check with a caution: an outcome before acknowledging is refused.
            state = app.state
            cautions = {r.check for r in state.ranking if r.caution}
            with_caution = next(i for i, c in enumerate(rows(app)) if c in cautions)
            await pilot.press("home", *["down"] * with_caution, "enter")
            await pilot.pause()
            screen = app.screen
            assert isinstance(screen, CheckScreen) and screen.card.caution
            assert screen.card.caution in flat(screen_text(app))
            actions_before = len(app.session.actions)
            await pilot.press("1")
            await settle(app, pilot)
            assert app.screen is screen, "an outcome before the acknowledgement must keep the check open"
            assert "Refused" in screen.message and "acknowledge" in screen.message
            assert len(app.session.actions) == actions_before
            await pilot.press("a")
            assert "acknowledged" in screen.message
            await pilot.press(str(technician.outcome(screen.card.target, ()) + 1))
            await settle(app, pilot)
            # The acknowledgement is logged, then the finding.
            assert [a.kind for a in app.session.actions[actions_before:]] == ["acknowledge", "finding"]
            assert app.session.actions[actions_before].check == screen.card.target

            await diagnose_to_the_end(app, pilot, technician)
            assert isinstance(app.screen, SummaryScreen), app.messages
            assert fault in app.session.repairs
            shown = screen_text(app)
            assert "Diagnosis summary" in shown
            await pilot.press("q")
            await pilot.pause()
        return app.return_code

    assert run(scenario()) == 0
    summary = summary_path(log).read_text(encoding="utf-8")
    assert summary_path(log) == log.with_suffix(".md")
    assert model.top_label in summary
    assert f"Fault repaired and confirmed:** {model.label_of(fault)}" in summary
    assert "**Ending:** Confirmed" in summary
    assert str(log) in summary
    assert f"Cost of the steps, by the model's figures:** {app.state.cost_spent:g} {model.cost_unit}" in summary
    assert "Caution acknowledged" in summary  # the acknowledgement is logged and listed
    for view in app.state.findings:
        if view.kind == "finding":
            assert view.label in summary and view.outcome in summary
    replay_ok(log)


def test_second_demo_checks_repair_and_verification(tmp_path):
    app, log = new_app(tmp_path, "booster")
    model = app.session.model
    # The repairable component with the highest prior: the likeliest real case.
    fault = max((e for e in model.basic_events if e.repair), key=lambda e: e.probability).id
    technician = Technician(model, fault)

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            await mark_symptoms_and_begin(app, pilot, technician)
            for _ in range(2):
                check_id = rows(app)[0]
                await pilot.press("home", "enter")
                await pilot.pause()
                await enter_outcome(app, pilot, technician.outcome(check_id, ()))
            await pilot.press("r")
            await pilot.pause()
            await pilot.press("enter")
            await settle(app, pilot)
            # The repair's own check, then (when it reads normal) the unit itself.
            for _ in range(2):
                if app.state.status != "awaiting-verification":
                    break
                if not isinstance(app.screen, CheckScreen):
                    await pilot.press("v")
                    await settle(app, pilot)
                screen = app.screen
                assert isinstance(screen, CheckScreen) and screen.card.verification
                await enter_outcome(app, pilot, technician.outcome(screen.card.target, app.state.repairs))
            assert app.state.status != "awaiting-verification"
            await pilot.press("q")  # the main screen and the summary screen both quit on q
        return app.return_code

    assert run(scenario()) == 0
    assert len([a for a in app.session.actions if a.kind == "finding"]) == len(model.symptoms) + 2
    replay_ok(log)


def test_undo_skip_retract_correct_and_note(tmp_path):
    app, log = new_app(tmp_path)
    session = app.session

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            await pilot.press("b")  # no symptom marked: every symptom stays a candidate check
            await settle(app, pilot)
            assert session.actions == []
            # Undo with nothing to undo is refused with a message, not a crash.
            await pilot.press("u")
            await settle(app, pilot)
            assert any("nothing to undo" in m for m in app.messages)

            # Skip the top check with a reason: it leaves the ranking; an empty reason is refused.
            top = next(r for r in app.state.ranking if r.check == rows(app)[0])
            await pilot.press("home", "s")
            await pilot.pause()
            assert isinstance(app.screen, PromptScreen)
            await pilot.press("enter")
            await pilot.pause()
            assert isinstance(app.screen, PromptScreen), "an empty reason must be refused"
            await pilot.press(*"no ladder")
            await pilot.press("enter")
            await settle(app, pilot)
            assert app.state.skipped == ((top.check, "no ladder"),)
            assert top.check not in [r.check for r in app.state.ranking]
            assert "skipped" in screen_text(app)

            # Undo brings it back.
            await pilot.press("u")
            await settle(app, pilot)
            assert app.state.skipped == ()
            assert rows(app)[0] == top.check

            # Record an outcome, then retract it: the finding is gone, the check is back.
            await pilot.press("home", "enter")
            await pilot.pause()
            await enter_outcome(app, pilot, 1)
            assert [v.target for v in app.state.findings if v.kind == "finding"] == [top.check]
            assert top.check not in [r.check for r in app.state.ranking]
            await pilot.press("x")
            await pilot.pause()
            assert isinstance(app.screen, FindingChoiceScreen)
            await pilot.press("enter")
            await settle(app, pilot)
            assert [v for v in app.state.findings if v.kind == "finding"] == []
            assert top.check in [r.check for r in app.state.ranking]

            # Record again, then correct its outcome (key c in the retract list).
            await pilot.press("home", "enter")
            await pilot.pause()
            await enter_outcome(app, pilot, 1)
            await pilot.press("x")
            await pilot.pause()
            await pilot.press("c")
            await settle(app, pilot)
            (finding,) = [v for v in app.state.findings if v.kind == "finding"]
            assert finding.outcome_index == 0

            # A note goes to the log and the findings panel.
            await pilot.press("m")
            await pilot.pause()
            await pilot.press(*"flat roof")
            await pilot.press("enter")
            await settle(app, pilot)
            assert app.state.notes == ("flat roof",)

            # Help opens and closes.
            await pilot.press("question_mark")
            await pilot.pause()
            assert isinstance(app.screen, HelpScreen)
            await pilot.press("escape")
            await pilot.pause()
            assert isinstance(app.screen, MainScreen)
            await pilot.press("q")
            await pilot.pause()
        return app.return_code

    assert run(scenario()) == 0
    kinds = [a.kind for a in session.actions]
    for kind in ("skip", "undo", "finding", "retract", "correct", "note"):
        assert kind in kinds
    assert summary_path(log).exists()  # quitting brings the summary up to date
    replay_ok(log)


def test_wrong_repair_fault_persists_and_diagnosis_goes_on(tmp_path):
    app, log = new_app(tmp_path)
    model = app.session.model
    technician = Technician(model, "run_capacitor_failed")

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            await mark_symptoms_and_begin(app, pilot, technician)
            # Repair something that is not the fault: the last entry of the repair list.
            await pilot.press("r")
            await pilot.pause()
            await pilot.press("end", "enter")
            await settle(app, pilot)
            screen = app.screen
            assert isinstance(screen, CheckScreen) and screen.card.verification
            assert app.state.status == "awaiting-verification"
            repaired = app.state.repairs[-1]
            assert repaired != technician.fault
            await enter_outcome(app, pilot, technician.outcome(screen.card.target, app.state.repairs))
            assert app.state.status in ("diagnosing", "isolated", "ambiguity")
            assert any("persists" in m for m in app.messages)
            assert isinstance(app.screen, MainScreen)
            # The diagnosis goes on: the next check is recorded after the repair.
            check_id = rows(app)[0]
            await pilot.press("home", "enter")
            await pilot.pause()
            await enter_outcome(app, pilot, technician.outcome(check_id, app.state.repairs))
            assert app.state.findings[-1].target == check_id and app.state.findings[-1].epoch == 1
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0
    replay_ok(log)


def test_resume_opens_the_main_screen_after_the_safety_notice(tmp_path):
    log_module = sessionlog()
    first = log_module.new_session("rooftop", log_path=tmp_path / "s.jsonl")
    symptom = first.model.symptoms[0]
    first.record_finding(symptom.id, 1)
    first.close()
    session = log_module.resume_session(tmp_path / "s.jsonl")
    app = TroubleshootApp(session)

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            assert isinstance(app.screen, SafetyScreen)
            assert "lockout/tagout" in flat(screen_text(app))
            await pilot.press("enter")
            await pilot.pause()
            assert isinstance(app.screen, MainScreen)
            assert symptom.outcomes[1] in screen_text(app)  # the finding made before
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0


# ---------------------------------------------------------------------- layout


def _inside(region, width, height) -> bool:
    return region.width > 0 and region.height > 0 and region.x >= 0 and region.y >= 0 \
        and region.right <= width and region.bottom <= height


@pytest.mark.parametrize("theme", ["textual-dark", "textual-light"])
def test_every_panel_and_footer_key_fits_80_by_24(tmp_path, theme):
    app, _ = new_app(tmp_path)
    from textual.widgets._footer import FooterKey

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            app.theme = theme
            await settle(app, pilot)
            await pilot.press("b")
            await settle(app, pilot)
            screen = app.screen
            for panel_id in ("status", "diagnosis", "checks-panel", "checks", "check-detail", "suspects",
                             "findings"):
                region = screen.query_one(f"#{panel_id}").region
                assert _inside(region, *SIZE), f"{panel_id} is not fully on the 80 x 24 screen: {region}"
            assert screen.query_one("#checks").region.height >= 4  # header and at least 3 checks
            keys = [k for k in screen.query(FooterKey)]
            labels = {k.description for k in keys}
            assert {"Open", "Skip", "Undo", "Retract", "Repair", "Note", "Help", "Quit"} <= labels
            for key in keys:
                assert _inside(key.region, *SIZE), f"footer key {key.description!r} does not fit in 80 columns"
            text = screen_text(app)
            # Every number has its unit: costs, chances and suspects; no bits by default.
            row = app.state.ranking[1]
            assert f"{row.cost:g} {app.state.cost_unit}" in text
            assert " %" in text and "bit" not in text
            top = app.state.suspects[0]
            assert f"{top.p * 100:.1f} %" in text
            # The figures are one key away, with their units.
            await pilot.press("f")
            await pilot.pause()
            text_figures = screen_text(app)
            assert " bit" in text_figures and "bit/" in text_figures
            await pilot.press("f")
            await pilot.pause()
            # The status is said in a word, not only a colour.
            assert "DIAGNOSING" in text

            # The check dialog fits too, caution and message included.
            await pilot.press("home")
            cautions = {r.check for r in app.state.ranking if r.caution}
            index = next(i for i, c in enumerate(rows(app)) if c in cautions)
            await pilot.press(*["down"] * index, "enter")
            await pilot.pause()
            for widget_id in ("check-title", "check-caution", "check-outcomes", "check-message"):
                assert _inside(app.screen.query_one(f"#{widget_id}").region, *SIZE), widget_id
            for key in app.screen.query(FooterKey):
                assert _inside(key.region, *SIZE)
            await pilot.press("escape", "q")
        return app.return_code

    assert run(scenario()) == 0


def test_larger_terminal_shows_whole_labels_and_marks_the_recommended_check(tmp_path):
    app, _ = new_app(tmp_path)

    async def scenario():
        async with app.run_test(size=(140, 40)) as pilot:
            await settle(app, pilot)
            await pilot.press("b")
            await settle(app, pilot)
            assert app.state.ranking[0].label in screen_text(app)
            # The recommended check is marked, first and under the cursor.
            recommended = app.state.next_check
            assert recommended is not None
            assert app.screen.query_one("#checks").highlighted_check() == recommended.check
            assert rows(app)[0] == recommended.check
            assert "► " + ("⚠ " if recommended.caution else "") + recommended.label in screen_text(app)
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0


# ---------------------------------------------------------------------- summary, command, boundaries


def test_summary_markdown_from_session_data(tmp_path):
    session = sessionlog().new_session("rooftop", write_log=False)
    model = session.model
    session.record_finding(model.symptoms[0].id, 1)
    session.skip_check(model.checks[0].id, "no meter")
    session.add_note("roof hatch locked")
    text = summary_markdown(model, session.state, tmp_path / "x.jsonl")
    assert text.startswith("# Diagnosis summary")
    assert model.top_label in text
    assert model.symptoms[0].label in text and model.symptoms[0].outcomes[1] in text
    assert "no meter" in text and "roof hatch locked" in text
    assert f"{session.state.cost_spent:g} {model.cost_unit}" in text
    assert "not finished" in text and "Abandoned" in text
    assert summary_path("a/b.jsonl") == Path("a/b.md")
    assert summary_path("a/b.md") == Path("a/b.md.md")  # never overwrites the log


def test_start_command_refuses_a_bad_threshold(capsys):
    from troubleshoot.cli import main

    assert main(["start", "--threshold", "1.5"]) == 2
    err = capsys.readouterr().err
    assert "--threshold" in err and "Traceback" not in err


def test_start_command_refuses_an_unknown_model(capsys, tmp_path):
    from troubleshoot.cli import main

    assert main(["start", str(tmp_path / "missing.xml"), "--log", str(tmp_path / "s.jsonl")]) == 2
    assert "no such file" in capsys.readouterr().err


def test_ui_imports_neither_numpy_nor_the_numeric_core():
    # DESIGN.md: the TUI never imports numpy and never computes posteriors or rankings.
    forbidden = {"numpy", "troubleshoot.engine.inference", "troubleshoot.advice.ranking", "troubleshoot.engine.jointree",
                 "troubleshoot.engine.network", "troubleshoot.advice.diagnosis"}
    for source in UI_SOURCES:
        tree = ast.parse(source.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module]
            for name in names:
                assert not any(name == f or name.startswith(f + ".") for f in forbidden), \
                    f"{source.name} imports {name}"


def test_safety_notice_names_what_it_does_not_replace():
    for words in ("equipment maker's procedures", "lockout/tagout", "local codes", "licensed practice"):
        assert words in SAFETY_NOTICE


# ---------------------------------------------------------------------- plain words, keys, confirmation


def test_main_screen_speaks_plainly_with_the_recommendation_first(tmp_path):
    app, log = new_app(tmp_path, "booster")
    from textual.widgets._footer import FooterKey

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            await pilot.press("b")
            await settle(app, pilot)
            state = app.state
            text = flat(screen_text(app))
            # The recommended action is the first row, and its why-line is on screen.
            assert state.next_check is not None and rows(app)[0] == state.next_check.check
            assert state.why is not None and flat(state.why.text) in text
            # No bits, scores or entropy by default.
            assert "bit" not in screen_text(app)
            # The full name of the row under the cursor, however long, is on screen.
            labels = {r.check: r.label for r in state.ranking}
            longest = max(range(len(rows(app))), key=lambda i: len(labels.get(rows(app)[i], "")))
            assert len(labels[rows(app)[longest]]) > 40  # longer than the column at 80 columns
            await pilot.press("home", *["down"] * longest)
            await pilot.pause()
            assert flat(labels[rows(app)[longest]]) in flat(screen_text(app))

            # The recommended check's card: outcome names in the footer, the suspects it separates.
            await pilot.press("home", "enter")
            await pilot.pause()
            card = app.screen
            assert isinstance(card, CheckScreen) and card.card.why is not None
            descriptions = {k.description for k in card.query(FooterKey)}
            outcomes = tuple(app.session.model.check_by_id[card.card.target].outcomes)
            assert all(any(d and name.startswith(d.rstrip("…")) for d in descriptions) for name in outcomes)
            why_text = str(card.query_one("#check-why").render())
            for shift in card.card.why.suspects:
                assert shift.label in why_text
            # q closes the card, as Escape does.
            await pilot.press("q")
            await pilot.pause()
            assert isinstance(app.screen, MainScreen)

            # A skipped check stays listed, dimmed, at the end; k brings it back.
            first = rows(app)[0]
            await pilot.press("home", "s")
            await pilot.pause()
            await pilot.press(*"no key to the room", "enter")
            await settle(app, pilot)
            assert app.state.skipped == ((first, "no key to the room"),) and rows(app)[-1] == first
            assert "skipped" in screen_text(app)
            await pilot.press("end", "k")
            await settle(app, pilot)
            assert app.state.skipped == () and first in [r.check for r in app.state.ranking]
            assert app.session.actions[-1].to_record() == {"action": "unskip", "check": first}

            # Ctrl+C quits as safely as q: the log is kept and the summary written.
            await pilot.press("ctrl+c")
            await pilot.pause()
        return app.return_code

    assert run(scenario()) == 0
    assert summary_path(log).exists()
    replay_ok(log)


def test_a_repair_of_an_unlikely_part_asks_for_confirmation(tmp_path):
    # A lower isolation threshold, so the run capacitor stands isolated after a few checks.
    app, log = new_app(tmp_path, "rooftop", isolation_threshold=0.6)
    model = app.session.model
    technician = Technician(model, "run_capacitor_failed")

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            await mark_symptoms_and_begin(app, pilot, technician)
            for _ in range(30):
                if app.state.status != "diagnosing":
                    break
                check_id = rows(app)[0]
                await pilot.press("home", "enter")
                await pilot.pause()
                await enter_outcome(app, pilot, technician.outcome(check_id, ()))
            state = app.state
            assert state.status == "isolated" and state.isolated.id == technician.fault
            # The why-line says what to do in words: the part, its chance, the repair.
            shown = flat(screen_text(app))
            assert f"{state.isolated.label} stands at {state.isolated.p * 100:.1f} %: repair it" in shown
            await pilot.press("r")
            await pilot.pause()
            choice = app.screen
            assert isinstance(choice, ChoiceScreen)
            # Repairs with the same words show the part they concern.
            compressor = [text for _, text in choice.options if text.startswith("Replace the compressor (")]
            assert len(compressor) == 2 and all("[" in t and "]" in t for t in compressor)
            parts = {model.event_by_id[e].label for e, _ in choice.options
                     if model.event_by_id[e].repair.label.startswith("Replace the compressor (")}
            assert all(any(p in t for t in compressor) for p in parts)
            # The last entry is a part with a chance below 10 %: it asks first; n goes back.
            p_of = {s.id: s.p for s in state.suspects}
            unlikely = choice.options[-1][0]
            assert p_of.get(unlikely, 0.0) < 0.10
            await pilot.press("end", "enter")
            await pilot.pause()
            assert isinstance(app.screen, ConfirmScreen)
            assert state.isolated.label in flat(screen_text(app))
            await pilot.press("n")
            await settle(app, pilot)
            assert isinstance(app.screen, MainScreen) and app.state.repairs == ()
            # y records it.
            await pilot.press("r")
            await pilot.pause()
            await pilot.press("end", "enter")
            await pilot.pause()
            await pilot.press("y")
            await settle(app, pilot)
            assert app.state.repairs == (unlikely,)
            # The repaired part leaves the suspects and shows under the findings.
            suspects_text = str(app.screen.query_one("#suspects-text").render()) if isinstance(
                app.screen, MainScreen) else ""
            assert model.label_of(unlikely) not in suspects_text
            await pilot.press("escape")
            await pilot.pause()
            findings_text = str(app.screen.query_one("#findings-text").render())
            assert "repaired: " + model.label_of(unlikely) in findings_text
            assert model.label_of(unlikely) not in str(app.screen.query_one("#suspects-text").render())
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0
    replay_ok(log)


def test_start_screen_fields_go_to_the_log_and_the_summary(tmp_path):
    app, log = new_app(tmp_path, "rooftop", job={"site": "Roof C"})

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            assert isinstance(app.screen, StartScreen)
            assert app.screen.query_one("#job-site").value == "Roof C"  # given on the command line
            app.screen.query_one("#job-technician").focus()
            await pilot.press(*"Kim Lee", "tab", *"SN-88")
            app.screen.query_one("#symptoms").focus()
            await pilot.press("b")
            await settle(app, pilot)
            assert isinstance(app.screen, MainScreen)
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0
    assert app.session.actions[0].to_record() == {"action": "job", "technician": "Kim Lee", "unit": "SN-88"}
    text = summary_path(log).read_text(encoding="utf-8")
    assert "**Technician:** Kim Lee" in text and "**Unit (serial or tag):** SN-88" in text
    assert "**Site:** Roof C" in text
    replay_ok(log)


def test_every_key_is_in_the_help():
    from troubleshoot.ui.screens import HELP_TEXT

    names = {"question_mark": "?", "escape": "esc", "minus": "-", "ctrl+c": "Ctrl+C", "ctrl+q": "Ctrl+Q",
             "ctrl+t": "Ctrl+T"}
    for owner in (TroubleshootApp, StartScreen, MainScreen, CheckScreen):
        for binding in owner.BINDINGS:
            key = names.get(binding.key, binding.key)
            assert f"`{key}`" in HELP_TEXT or f"| {key} |" in HELP_TEXT, (owner.__name__, binding.key)
    assert "`1`, `2`" in HELP_TEXT  # the outcome keys, named on the card


@pytest.mark.parametrize("demo, check_id", [("rooftop", "suction_pressure"), ("booster", "pt_vs_gauge"),
                                           ("booster", "p1_hydraulic")])
def test_three_outcome_check_keys_are_named_in_the_footer_and_card(tmp_path, demo, check_id):
    # Issue 12: keys 1..K, each outcome's name in the footer (cut to fit 80 columns) and whole on the card.
    app, _ = new_app(tmp_path, demo)
    from textual.widgets._footer import FooterKey

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            await pilot.press("b")
            await settle(app, pilot)
            await pilot.press("home")
            index = rows(app).index(check_id)  # the rows as the screen lists them
            await pilot.press(*["down"] * index, "enter")
            await pilot.pause()
            screen = app.screen
            assert isinstance(screen, CheckScreen)
            outcomes = app.session.model.check_by_id[check_id].outcomes
            footer = {k.key: k.description for k in screen.query(FooterKey)}
            for number, name in enumerate(outcomes, start=1):
                shown = footer[str(number)]
                assert shown == name or (shown.endswith("…") and name.startswith(shown[:-1])), (shown, name)
            for key in screen.query(FooterKey):
                assert _inside(key.region, *SIZE), f"footer key {key.description!r} does not fit in 80 columns"
            card = str(screen.query_one("#check-outcomes").render())
            assert all(f"key {i}: {name}" in card for i, name in enumerate(outcomes, start=1))
            await enter_outcome(app, pilot, 2)
            assert [(f.target, f.outcome) for f in app.state.findings][-1] == (check_id, outcomes[2])
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0


def test_a_unit_in_doubt_is_offered_for_trying_and_v_opens_its_verification(tmp_path):
    # The leak repaired, its own check (the refrigerant pressures) still reads abnormal:
    # the unit may work all the same, and the screen says so and offers the unit's test.
    session = sessionlog().new_session("rooftop", log_path=tmp_path / "doubt.jsonl")
    session.record_finding("leak_search", "leak found")
    session.record_repair("refrigerant_leak")
    session.record_verification("pressures abnormal")
    # The free symptom first (the tool reads it before trying the unit: it costs nothing).
    session.record_finding("compressor_silent", "compressor heard")
    app = TroubleshootApp(session, fresh=False)
    top = session.model.top

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await past_the_safety_notice(app, pilot)
            assert app.state.status == "awaiting-verification"
            diagnosis = flat(str(app.screen.query_one("#diagnosis-text").render()))
            assert "the unit may work" in diagnosis and "Key v opens it" in diagnosis
            await pilot.press("v")
            await settle(app, pilot)
            assert isinstance(app.screen, CheckScreen) and app.screen.card.verification
            assert app.screen.card.target == top
            await enter_outcome(app, pilot, 0)  # the unit cools
            assert app.state.status == "confirmed"
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0
    replay_ok(tmp_path / "doubt.jsonl")
