"""Escalation: the model element (format 1.1), the policy's choice, and the default without it.

References: the expected cost of stopping after k repairs, written out in
tests/test_repair_cost.py (Kadane & Simon 1977); FORMAT.md for the element
and for the default (never chosen by cost, offered once the cause lies
outside the model with probability at least the isolation threshold).
"""

from __future__ import annotations

import dataclasses
import re

import pytest

from troubleshoot.advice.policy import Action, decide, outside_model, settings_for
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.errors import ModelError
from troubleshoot.model import BasicEvent, Cause, Check, Escalation, Gate, Model, Repair, Verification
from troubleshoot.model.xmlfile import load_model, save_model
from troubleshoot.session import Session


def unit(escalation: float | None = 300.0) -> Model:
    """Two listed parts with their checks, and causes outside the model under the top gate."""
    events = (BasicEvent("fan", "fan motor failed", 0.05, repair=Repair("replace the fan motor", 60.0)),
              BasicEvent("fuse", "fuse blown", 0.05, repair=Repair("replace the fuse", 10.0)))
    checks = (Check("fan_turns", "does the fan turn by hand", 5.0, ("free", "seized"), (Cause("fan", 0.99),)),
              Check("fuse_ok", "fuse continuity", 5.0, ("good", "open"), (Cause("fuse", 0.99),)))
    return Model("unit", "top", (Gate("top", "no airflow", "or", ("fan", "fuse"), unlisted=0.05),), events,
                 checks=checks, verification=Verification("run it", 10.0),
                 escalation=None if escalation is None else Escalation("call the maker's engineer", escalation))


def cleared(model: Model):
    """Both listed parts checked and found sound: most of the posterior lies outside the model."""
    engine = Engine(model)
    post = engine.propagate([Finding("top", 1, 0), Finding("fan_turns", 0, 0), Finding("fuse_ok", 0, 0)])
    return engine, post


def test_escalates_with_the_cost_it_states_when_the_cause_is_outside():
    model = unit(300.0)
    engine, post = cleared(model)
    out = outside_model(engine, post)
    assert out.p > 0.9 and dict(out.by_gate)["top"] == pytest.approx(out.p)
    decision = decide(engine, post, settings_for(model), ())
    assert decision.action == Action.ESCALATE and decision.target is None
    assert decision.expected_cost == pytest.approx(300.0)
    assert "outside the model" in decision.reasons[0].text and "300 min" in decision.reasons[0].text
    assert any(a.action == Action.REPAIR for a in decision.alternatives)


def test_without_escalation_the_old_rule_holds_except_the_documented_stop():
    model = unit(None)
    engine = Engine(model)
    start = engine.propagate([Finding("top", 1, 0)])
    session = Session(model)
    assert session.view.decision.action != Action.ESCALATE  # never chosen by cost
    engine, post = cleared(model)
    decision = decide(engine, post, settings_for(model), ())
    # The documented stop: P(outside) >= the isolation threshold offers escalation, with no price.
    assert decision.action == Action.ESCALATE and decision.expected_cost is None
    assert all(a.expected_cost is None for a in decision.alternatives if a.action == Action.ESCALATE)
    assert start.log_p < 0


def test_escalation_round_trips_and_needs_format_1_1(tmp_path):
    model = unit(300.0)
    path = tmp_path / "unit.xml"
    save_model(model, path)
    text = path.read_text()
    assert 'format-version="1.1"' in text and re.search(r'<escalation cost="300(\.0)?"', text)
    assert load_model(path).escalation == model.escalation
    path.write_text(text.replace('format-version="1.1"', 'format-version="1.0"'))
    with pytest.raises(ModelError, match="escalation> belongs to format version 1.1"):
        load_model(path)


def test_a_1_0_file_means_what_it_meant():
    from troubleshoot.model.demos import demo_path

    model = load_model(demo_path("rooftop"))
    old = dataclasses.replace(model, escalation=None)
    session = Session(old)
    assert session.state.decision.action == Action.CHECK
    assert session.state.outside_model_p == pytest.approx(outside_model(session.engine, session.posterior).p)


def test_a_check_advised_above_the_escalation_price_says_why():
    # The policy's documented rule (advice/policy.py, "Escalation"): while informative checks
    # lie beyond the lookahead, a check is weighed against repairing first, not against
    # escalating at once. Where its figure is above the price, the reason and the escalation
    # card must say so, not leave the technician two figures at odds. Booster demo (illustrative):
    # pump alarm on, then every panel, supply and reading check normal.
    from troubleshoot.model.demos import demo_path
    from troubleshoot.ui.screens import escalation_card_text

    model = load_model(demo_path("booster"))
    session = Session(model)
    for check_id, outcome in [("low_suction_alarm", 0), ("pump_fault_alarm", 1), ("short_cycling", 0),
                              ("p2_panel_status", 0), ("control_power", 0), ("p1_panel_status", 0),
                              ("main_voltage", 0), ("pt_vs_gauge", 0), ("controller_screen", 0),
                              ("p3_panel_status", 0)]:
        session.record_finding(check_id, model.check_by_id[check_id].outcomes[outcome])
    decision = session.state.decision
    assert decision.action == Action.CHECK
    assert decision.expected_cost > model.escalation.cost
    reason = decision.reasons[0]
    assert "escalating (600 min) is below that figure, but it counts no check after" in reason.text
    assert ("escalate", 600.0) in reason.costs
    card = escalation_card_text(session.state, model)
    assert "counts the checks it weighs and then repairs, none after them" in card
    # Below the price the reason says nothing of it.
    fresh = Session(model)
    first = fresh.state.decision
    assert first.expected_cost is not None and first.expected_cost < model.escalation.cost
    assert "below that figure" not in first.reasons[0].text
    assert "none after them" not in escalation_card_text(fresh.state, model)
    # A free check advised above the price: nothing is lost by reading it before escalating,
    # and the card says that rather than the lookahead's caveat. The same findings, the
    # short-cycling symptom left unread.
    free = Session(model)
    for check_id, outcome in [("low_suction_alarm", 0), ("pump_fault_alarm", 1), ("p2_panel_status", 0),
                              ("control_power", 0), ("p1_panel_status", 0), ("main_voltage", 0),
                              ("pt_vs_gauge", 0), ("controller_screen", 0), ("p3_panel_status", 0)]:
        free.record_finding(check_id, model.check_by_id[check_id].outcomes[outcome])
    decision = free.state.decision
    assert decision.reasons[0].kind == "free-check" and decision.expected_cost > model.escalation.cost
    card = escalation_card_text(free.state, model)
    assert "The check costs nothing: escalating after it costs no more than escalating now." in card
    assert "none after them" not in card


@pytest.mark.parametrize("faults", [("p1_coupling_broken", "p2_air_bound"),
                                    ("p2_coupling_broken", "p3_check_valve_stuck_closed")])
def test_two_pumps_down_at_once_are_found_before_the_contractor_is_called(faults):
    # The booster demo with its price (a contractor's visit, 600 min; illustrative). Two of
    # three pumps down at once stop the station (a 2-out-of-3 gate) and, until a second pump's
    # checks are read, look like a cause outside the model: after a failed repair and ten normal
    # readings, repairing in order was valued above the price and the tool handed the station
    # over (675 min with the visit). Looking two checks deep before handing over, it reads a
    # third pump's valves and a pump's hydraulic check and repairs a pump that restores two.
    # Reference: every outcome is what the fault tree gives with these faults
    # (tests/bruteforce.evaluate through test_scenarios.noise_free_outcomes), not the engine.
    from test_scenarios import noise_free_outcomes
    from troubleshoot.model.demos import demo_path
    from troubleshoot.session import AWAITING_VERIFICATION, DIAGNOSING

    model = load_model(demo_path("booster"))
    assert model.escalation is not None and model.escalation.cost == 600.0
    session = Session(model)
    kinds = []
    for _ in range(100):
        state = session.state
        truth = noise_free_outcomes(model, set(faults), session.repairs)
        decision = state.decision
        kinds.append(decision.reason.kind)
        if state.status == DIAGNOSING:
            session.record_finding(decision.target, truth[decision.target])
        elif state.status == AWAITING_VERIFICATION:
            target = state.verification.target
            session.record_verification(int(truth[target]) if target == model.top else truth[target])
        elif decision.action == Action.REPAIR:
            session.record_repair(decision.target)
        else:
            break
    assert session.status == "confirmed", kinds
    assert session.repairs[-1] in faults
    assert "check-before-escalating" in kinds
    assert float(session.state.cost_spent) < model.escalation.cost
