"""Escalation in the terminal UI, key by key with textual's Pilot at 80 x 24.

What is checked comes from faulttrees/FORMAT.md ("<escalation cost>": the
label says what escalating means, the price is in the model's cost unit,
counted once; without it escalating is advised with no price once the cause
lies outside the model) and from the model files the tests write; the log
the UI writes is confirmed by ``troubleshoot replay``.
"""

from __future__ import annotations

from textual.widgets._footer import FooterKey

from test_escalation import unit
from test_ui import SIZE, _inside, flat, new_app, past_the_safety_notice, replay_ok, run, screen_text, settle
from troubleshoot.model.xmlfile import save_model
from troubleshoot.session.logfile import new_session, read_log
from troubleshoot.ui.app import TroubleshootApp
from troubleshoot.ui.screens import CheckScreen, ConfirmScreen, MainScreen, SummaryScreen


def unit_app(tmp_path, price: float | None = 300.0):
    model_path = tmp_path / "unit.xml"
    save_model(unit(price), model_path)
    session = new_session(str(model_path), log_path=tmp_path / "unit.jsonl")
    return TroubleshootApp(session), tmp_path / "unit.jsonl"


async def clear_both_parts(app, pilot) -> None:
    """Begin, then answer both checks normal: the cause is then almost surely outside the model."""
    await settle(app, pilot)
    await pilot.press("b")
    await settle(app, pilot)
    for _ in range(2):
        await pilot.press("home", "enter")
        await pilot.pause()
        assert isinstance(app.screen, CheckScreen)
        await pilot.press("1")
        await settle(app, pilot)


def test_advised_escalation_comes_first_with_its_reason_and_price_then_e_escalates(tmp_path):
    app, log = unit_app(tmp_path, 300.0)

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await clear_both_parts(app, pilot)
            assert app.state.decision.action == "escalate"
            text = flat(screen_text(app))
            diagnosis = flat(str(app.screen.query_one("#diagnosis-text").render()))
            # First, in plain words: the advice, why, what it means and its price with its unit.
            assert diagnosis.startswith("⚑ ESCALATE — a cause this model does not list: near certain")
            assert "call the maker's engineer — 300 min. Key e escalates." in diagnosis
            assert text.startswith("⚑ ESCALATE")  # the status line says it too
            # The outside-model figure in words under the suspects; its number is one key away.
            p = app.state.outside_model_p
            suspects = app.screen.query_one("#suspects")
            assert suspects.border_subtitle == "outside the model: near certain"
            # Each gate's share in words, the gate on its own line so 80 columns show it whole.
            lines = screen_text(app).splitlines()
            row = next(i for i, line in enumerate(lines) if "not listed (near certain):" in line)
            assert "no airflow" in lines[row + 1].split("││")[0]
            await pilot.press("f")
            await pilot.pause()
            assert suspects.border_subtitle == f"outside the model: {p * 100:.1f} %"
            await pilot.press("f")
            await pilot.pause()
            # The card: what it means, its price, the tool's advice; n goes back without a trace.
            await pilot.press("e")
            await pilot.pause()
            card = app.screen
            assert isinstance(card, ConfirmScreen) and card.id == "escalate-card"
            words = flat(card.question)
            assert "What it means: call the maker's engineer" in words
            assert "Price: 300 min, counted once" in words
            assert "The tool advises it: a cause this model does not list: near certain" in words
            for widget in card.query("Static"):
                assert _inside(widget.region, *SIZE)
            await pilot.press("n")
            await settle(app, pilot)
            assert isinstance(app.screen, MainScreen) and app.state.status != "escalated"
            assert [line.action.kind for line in read_log(log).actions] == ["finding", "finding"]
            # y escalates: the session ends escalated and the summary comes up.
            await pilot.press("e")
            await pilot.pause()
            await pilot.press("y")
            await settle(app, pilot)
            await pilot.pause()
            assert app.state.status == "escalated"
            assert isinstance(app.screen, SummaryScreen)
            assert "**Ending:** Escalated — handed over: call the maker's engineer (300 min)" in app.screen.markdown
            await pilot.press("escape")
            await pilot.pause()
            main = flat(screen_text(app))
            assert "⚑ HANDED OVER: call the maker's engineer — 300 min" in main
            # Finished: no escalate key in the footer any more, and e does nothing.
            assert "Escalate" not in {k.description for k in app.screen.query(FooterKey)}
            await pilot.press("e")
            await pilot.pause()
            assert isinstance(app.screen, MainScreen)
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0
    escalation = read_log(log).actions[-1].record["action"]
    assert escalation["action"] == "escalate" and escalation["cost"] == 300.0 and escalation["advised"] is True
    replay_ok(log)


def test_without_a_price_the_screen_and_the_card_say_so(tmp_path):
    app, log = unit_app(tmp_path, None)

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await clear_both_parts(app, pilot)
            diagnosis = flat(str(app.screen.query_one("#diagnosis-text").render()))
            assert "Hand the unit over (no price in the model). Key e escalates." in diagnosis
            await pilot.press("e")
            await pilot.pause()
            words = flat(app.screen.question)
            assert "Price: the model gives no price for escalating." in words
            await pilot.press("y")
            await settle(app, pilot)
            await pilot.pause()
            assert app.state.status == "escalated"
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0
    replay_ok(log)


def test_escalating_against_the_advice_and_undoing_it_on_a_demo(tmp_path):
    app, log = new_app(tmp_path, "rooftop")
    model = app.session.model

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await settle(app, pilot)
            await pilot.press("b")
            await settle(app, pilot)
            assert app.state.decision.action == "check"
            # In words by default (no percentage for it), under the suspects.
            assert app.screen.query_one("#suspects").border_subtitle == "outside the model: unlikely"
            await pilot.press("e")
            await pilot.pause()
            words = flat(app.screen.question)
            assert f"What it means: {model.escalation.label}" in words
            assert f"Price: {model.escalation.cost:g} {model.cost_unit}" in words
            assert "The tool advises the recommended check instead" in words
            assert model.escalation.instructions.split(";")[0] in words
            await pilot.press("y")
            await settle(app, pilot)
            await pilot.pause()
            assert app.state.status == "escalated"
            summary = app.screen.markdown
            assert "the technician's choice (the tool advised otherwise)" in summary
            await pilot.press("escape")
            await pilot.pause()
            # u takes the escalation back; the diagnosis goes on where it was.
            await pilot.press("u")
            await settle(app, pilot)
            assert app.state.status == "diagnosing"
            assert "Escalate" in {k.description for k in app.screen.query(FooterKey)}
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0
    kinds = [line.action.kind for line in read_log(log).actions]
    assert kinds == ["escalate", "undo"]
    replay_ok(log)


def test_every_footer_key_fits_80_columns_while_a_repair_awaits_verification(tmp_path):
    # Verify and Escalate both shown: the footer is the longest it gets on the main screen.
    session = new_session("rooftop", log_path=tmp_path / "v.jsonl")
    session.record_repair("filters_clogged")
    app = TroubleshootApp(session, fresh=False)

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await past_the_safety_notice(app, pilot)
            assert app.state.status == "awaiting-verification"
            keys = list(app.screen.query(FooterKey))
            assert {"Verify", "Escalate", "Help", "Quit"} <= {k.description for k in keys}
            for key in keys:
                assert _inside(key.region, *SIZE), f"footer key {key.description!r} does not fit in 80 columns"
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0


def test_the_escalation_card_names_trying_a_unit_in_doubt_as_the_advice(tmp_path):
    # Escalating is weighed against trying the unit whose repair's own check still read abnormal.
    from troubleshoot.ui.screens import escalation_card_text

    session = new_session("rooftop", log_path=tmp_path / "d.jsonl")
    session.record_finding("leak_search", "leak found")
    session.record_repair("refrigerant_leak")
    session.record_verification("pressures abnormal")
    # The free symptom first (the tool reads it before trying the unit: it costs nothing).
    session.record_finding("compressor_silent", "compressor heard")
    text = escalation_card_text(session.state, session.model)
    assert "The tool advises trying the unit first (it may work already) instead (expected " in text
    assert "Price: 720 min" in text


def test_v_tries_a_unit_in_doubt_even_when_the_tool_does_not_advise_it(tmp_path):
    # The pump of tests/test_session.py with its unit's test priced far above going on
    # (illustrative): the tool advises another course, yet the technician may try the unit.
    from dataclasses import replace

    from test_session import pump_model
    from troubleshoot.model import Verification

    path = tmp_path / "pump.xml"
    save_model(replace(pump_model(), verification=Verification("run the pump for a shift", 600,
                                                                outcomes=("flows", "no flow"))), path)
    session = new_session(str(path), log_path=tmp_path / "p.jsonl")
    session.record_finding("flow", "flow low")
    session.record_repair("impeller")
    session.record_verification("flow low")
    app = TroubleshootApp(session, fresh=False)

    async def scenario():
        async with app.run_test(size=SIZE) as pilot:
            await past_the_safety_notice(app, pilot)
            assert app.state.status != "awaiting-verification" and app.state.unit_check is not None
            assert "Verify" in {k.description for k in app.screen.query(FooterKey)}
            await pilot.press("v")
            await settle(app, pilot)
            assert isinstance(app.screen, CheckScreen) and app.screen.card.target == "top"
            await pilot.press("2")  # no flow: the unit still fails
            await settle(app, pilot)
            assert app.state.findings[-1].target == "top" and app.state.unit_check is None
            assert app.state.status != "awaiting-verification"
            await pilot.press("q")
        return app.return_code

    assert run(scenario()) == 0
    replay_ok(tmp_path / "p.jsonl")
