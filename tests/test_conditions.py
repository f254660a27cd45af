"""An INHIBIT gate's condition is shown but never treated as a fault.

Source: W. E. Vesely et al., *Fault Tree Handbook*, NUREG-0492 (1981),
chapter IV: the inhibit gate's output occurs when its input occurs in the
presence of the conditioning event; the conditioning event (a demand peak,
a season, an operating mode) is not a failure of the system. So, with the
fault found, the condition may be near certain without being the thing to
repair: it must not be isolated, put in the ambiguity group or the repair
order's head, and the suggest contract and the screen say what it is.

The model is written here (figures illustrative): a cold night (condition)
lets a weak heater element leave the tank cold; a stuck thermostat does it
whatever the night.
"""

from __future__ import annotations

import json

from troubleshoot.advice.diagnosis import condition_events, is_condition
from troubleshoot.cli import main
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, Repair, Verification
from troubleshoot.model.xmlfile import save_model
from troubleshoot.session import Session, settings_for


def tank_model() -> Model:
    events = (BasicEvent("element_weak", "heater element weak", 0.02, repair=Repair("replace the element", 40.0)),
              BasicEvent("cold_night", "cold night (below -10 C)", 0.5),
              BasicEvent("thermostat_stuck", "thermostat stuck open", 0.01,
                         repair=Repair("replace the thermostat", 20.0)))
    gates = (Gate("weak_in_cold", "element too weak for the night", "inhibit", ("element_weak",),
                  condition="cold_night"),
             Gate("tank_cold", "tank water cold in the morning", "or", ("weak_in_cold", "thermostat_stuck")))
    checks = (Check("element_current", "element current against its rating", 5.0, ("normal", "low"),
                    (Cause("element_weak", 0.98),), 0.01),
              Check("thermostat_click", "thermostat clicks when turned down", 2.0, ("clicks", "silent"),
                    (Cause("thermostat_stuck", 0.9),), 0.01),
              Check("night_log", "overnight outdoor temperature log", 1.0, ("mild", "below -10 C"),
                    (Cause("cold_night", 0.99),), 0.01))
    return Model(name="tank", top="tank_cold", gates=gates, basic_events=events, checks=checks,
                 verification=Verification("heat the tank overnight", 10.0))


def test_a_condition_with_no_repair_is_known_as_such():
    model = tank_model()
    assert condition_events(model) == {"cold_night"}
    assert is_condition(model, "cold_night") and not is_condition(model, "element_weak")


def _state_with_the_condition_first():
    """The tank with the element measured low, the thermostat clicking and the night log cold."""
    model = tank_model()
    session = Session(model, settings_for(model))
    session.record_finding("element_current", 1)
    session.record_finding("thermostat_click", 0)
    session.record_finding("night_log", 1)
    return session.state


def test_a_near_certain_condition_is_not_isolated_grouped_or_repaired():
    model = tank_model()
    state = _state_with_the_condition_first()
    night = next(s for s in state.suspects if s.id == "cold_night")
    element = next(s for s in state.suspects if s.id == "element_weak")
    # The findings make both the fault and its condition near certain (the inhibit gate needs
    # both), the condition the likelier of the two: the first suspect is not the one to repair.
    assert night.condition and night.p > element.p
    assert state.suspects[0].id == "cold_night"
    assert element.p >= settings_for(model).isolation_threshold
    assert state.isolated is not None and state.isolated.id == "element_weak"
    assert "cold_night" not in [s.id for s in state.ambiguity_group or ()]
    assert state.decision.action == "repair" and state.decision.target == "element_weak"
    steps = {r.id: r for r in state.repair_order}
    assert "cold_night" not in steps or steps["cold_night"].note == "a condition, not a fault: nothing to repair"


def test_suggest_json_marks_the_condition(tmp_path, capsys):
    path = tmp_path / "tank.xml"
    save_model(tank_model(), path)
    assert main(["suggest", str(path), "--finding", "element_current=low", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    flags = {s["id"]: s["condition"] for s in doc["suspects"]}
    assert flags == {"element_weak": False, "cold_night": True, "thermostat_stuck": False}


def _rendered(widget, show, selector: str) -> str:
    """Mount ``widget`` alone in an 80 x 24 app, call ``show(widget)``, return what ``selector`` renders."""
    import asyncio

    from textual.app import App

    class One(App):
        def compose(self):
            yield widget

    app = One()
    out: list[str] = []

    async def scenario():
        async with app.run_test(size=(80, 24)) as pilot:
            show(widget)
            await pilot.pause()
            out.append(str(app.query_one(selector).render()))

    asyncio.run(scenario())
    return out[0]


def test_the_suspects_panel_says_condition_before_its_name():
    from troubleshoot.advice.diagnosis import Suspect
    from troubleshoot.ui.widgets import SuspectsPanel

    suspects = [Suspect("cold_night", "cold night (below -10 C)", 0.97, condition=True),
                Suspect("element_weak", "heater element weak", 0.96)]
    text = _rendered(SuspectsPanel(id="suspects"), lambda panel: panel.show(suspects), "#suspects-text")
    assert "condition: cold night (below -10 C)" in text
    assert "condition: heater element weak" not in text and "heater element weak" in text


def test_the_line_mode_marks_the_condition():
    from troubleshoot.session.render import render_brief

    line = next(x for x in render_brief(_state_with_the_condition_first()).splitlines() if x.startswith("suspects:"))
    assert line.startswith("suspects: cold_night 1.000 (condition), element_weak 0.999,")


def test_the_status_bar_top_suspect_is_a_fault_not_the_condition():
    from troubleshoot.ui.widgets import StatusBar, percent

    state = _state_with_the_condition_first()
    element = next(s for s in state.suspects if s.id == "element_weak")
    night = next(s for s in state.suspects if s.id == "cold_night")
    assert percent(element.p) != percent(night.p)

    text = _rendered(StatusBar(id="bar"), lambda bar: bar.show("tank water cold", state, busy=False), "#bar")
    assert f"top suspect {percent(element.p)}" in text


def test_the_summary_never_calls_the_condition_the_most_probable_fault():
    from troubleshoot.session.summary import summary_markdown

    model = tank_model()
    session = Session(model, settings_for(model))
    session.record_finding("night_log", 1)
    state = session.state
    assert state.suspects[0].id == "cold_night" and state.isolated is None and not state.ambiguity_group
    text = summary_markdown(model, state)
    line = next(x for x in text.splitlines() if "Most probable fault when it stopped" in x)
    fault = next(s for s in state.suspects if not s.condition)
    assert fault.label in line and "cold night" not in line
