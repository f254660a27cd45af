"""The session engine: statuses, the stopping rule, repairs and verification,
and every bad action refused with the state unchanged.

Expected posteriors come from tests/bruteforce.py (enumeration of every root
state), independent of the join tree; the repair order follows Kadane & Simon
(1977): P(failed) / repair cost, descending.
"""

from __future__ import annotations

import json
from dataclasses import replace
import math

import pytest

import bruteforce as bf
from troubleshoot.advice import policy
from troubleshoot.errors import ImpossibleFindings, SessionError, TroubleshootError
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.model.source import load_any_model
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, Repair, Verification
from troubleshoot.session.actions import AddNote, RecordFinding, RecordRepair, SkipCheck
from troubleshoot.session import (
    AMBIGUITY,
    AWAITING_VERIFICATION,
    CONFIRMED,
    DIAGNOSING,
    ISOLATED,
    Session,
    SessionSettings,
    settings_for,
)

TOL = 1e-9


def pump_model(unlisted: float | None = 0.01) -> Model:
    """A pump that fails by a tripped breaker, a worn impeller or a closed valve (illustrative)."""
    events = (
        BasicEvent("breaker", "breaker tripped", 0.05, repair=Repair("reset breaker", 5)),
        BasicEvent("impeller", "impeller worn", 0.03, repair=Repair("replace impeller", 120, verify="flow")),
        BasicEvent("valve", "valve closed", 0.02, repair=Repair("open valve", 2)),
        BasicEvent("sensor", "sensor drifted", 0.01),
    )
    gates = (Gate("top", "no flow", "or", ("breaker", "impeller", "valve", "sensor"), unlisted=unlisted),)
    checks = (
        Check("lamp", "breaker lamp", 1, ("off", "on"), (Cause("breaker", 1.0),)),
        Check("flow", "flow gauge", 4, ("flow normal", "flow low"), (Cause("impeller", 0.9),),
              false_alarm=0.01, caution="isolate the pump before opening the gauge cock"),
        Check("valve_look", "look at the valve", 3, ("open", "closed"), (Cause("valve", 1.0),)),
        Check("sensor_cal", "calibrate sensor", 10, ("ok", "drifted"), (Cause("sensor", 1.0),)),
    )
    return Model(name="pump", top="top", gates=gates, basic_events=events, checks=checks,
                 verification=Verification("run the pump", 2, outcomes=("flows", "no flow")),
                 cost_unit="min", isolation_threshold=0.95)


def snapshot(session: Session):
    return json.dumps(session.state.to_dict(), sort_keys=True, default=str), session.posterior.log_p, \
        list(session.actions)


def test_start_state_matches_brute_force_and_is_plain_data():
    model = pump_model()
    s = Session(model)
    st = s.state
    ref = bf.posterior(model, [Finding("top", 1, 0)])
    assert st.status == DIAGNOSING
    assert st.entropy_bits == pytest.approx(bf.entropy_bits(ref["joint"]), abs=TOL)
    for sus in st.suspects:
        assert sus.p == pytest.approx(ref["marginals"][sus.id], abs=TOL)
    assert st.next_check is not None and st.next_check == st.ranking[0]
    assert st.findings[0].kind == "complaint" and st.cost_spent == 0
    json.dumps(st.to_dict(), allow_nan=False)  # plain data, no NaN or Infinity


def test_isolation_repair_verification_confirmed_with_costs():
    model = pump_model()
    s = Session(model)
    s.record_finding("lamp", "on")
    assert s.status == ISOLATED and s.state.isolated.id == "breaker"
    assert s.state.repair_order[0].id == "breaker"
    s.record_repair("breaker")
    assert s.status == AWAITING_VERIFICATION
    assert s.state.verification.target == "top" and s.state.verification.outcomes == ("flows", "no flow")
    s.record_verification("flows")
    assert s.status == CONFIRMED
    assert s.state.cost_spent == pytest.approx(1 + 5 + 2)  # lamp + reset + run the pump, in min
    with pytest.raises(SessionError, match="confirmed"):
        s.record_finding("flow", "flow low")


def test_fault_persists_after_repair_posterior_takes_repair_into_account():
    model = pump_model()
    s = Session(model)
    s.record_repair("breaker")
    s.record_verification("no flow")
    findings = [Finding("top", 1, 0), Finding("top", 1, 1)]
    ref = bf.posterior(model, findings, ("breaker",))
    # Source: enumeration with the breaker held working after the repair.
    for sus in s.suspects:
        assert sus.p == pytest.approx(ref["marginals"][sus.id], abs=TOL)
    assert s.entropy_bits == pytest.approx(bf.entropy_bits(ref["joint"]), abs=TOL)
    assert s.status in (DIAGNOSING, ISOLATED, AMBIGUITY)
    assert "breaker" not in [r.id for r in s.state.repair_order]
    # After a repair, a check can be done again (new epoch).
    s.record_finding("lamp", "off")
    assert s.findings[-1] == Finding("lamp", 0, 1)


def test_verify_check_named_by_the_repair():
    s = Session(pump_model())
    s.record_finding("flow", "flow low")
    s.record_repair("impeller")
    assert s.state.verification.target == "flow"
    s.record_verification("flow normal")
    assert s.findings[-1] == Finding("flow", 0, 1)
    # Only a working unit confirms a repair (common practice): the top event is asked next.
    assert s.status == AWAITING_VERIFICATION
    assert s.state.verification.target == s.model.top
    s.record_verification(0)
    assert s.status == CONFIRMED
    assert s.findings[-1] == Finding(s.model.top, 0, 1)


def pump_in_doubt() -> tuple[Model, Session, float]:
    """The pump after the impeller was replaced with the flow gauge still reading low, and
    P(it still fails) by enumeration (tests/bruteforce.py, the top event at epoch 1)."""
    model = pump_model()
    s = Session(model)
    s.record_finding("flow", "flow low")
    s.record_repair("impeller")
    s.record_verification("flow low")
    findings = [Finding("top", 1, 0), Finding("flow", 1, 0), Finding("flow", 1, 1)]
    return model, s, bf.posterior(model, findings, ("impeller",))["marginals"]["top"]


def test_a_unit_in_doubt_after_its_repairs_own_check_read_abnormal_is_tried_first():
    # Only the impeller makes the flow gauge read low: read low again after the impeller was
    # replaced, it is most likely the gauge's false alarm (1 %), and the unit may well work.
    model, s, p_fails = pump_in_doubt()
    assert 0.0 < p_fails < 0.5
    st = s.state
    assert st.status == AWAITING_VERIFICATION
    assert st.verification is not None and st.verification.target == "top"
    decision = s.view.decision
    assert decision.action == "verify" and decision.reasons[0].kind == "unit-may-work"
    assert dict(decision.reasons[0].probabilities)["unit works"] == pytest.approx(1.0 - p_fails, abs=TOL)
    assert {a.action for a in decision.alternatives} >= {"verify", "repair"}
    s.record_verification("flows")
    assert s.status == CONFIRMED
    assert s.state.cost_spent == pytest.approx(4 + 120 + 4 + 2)


def test_the_lookahead_from_a_unit_in_doubt_counts_trying_the_unit():
    # After the impeller with the flow gauge still low, finishing at once may be trying the
    # unit (2 min) and, only if it still fails, going on: v + P(fails | e) * F(e, fails).
    # Before, every leaf of the lookahead took the unit to fail, so a check was valued as if
    # the unit surely failed after it.
    model, s, p_fails = pump_in_doubt()
    view = s.view
    doubt = view.posterior
    failing = view.engine.propagate(tuple(doubt.findings) + (Finding("top", 1, 1),), doubt.repairs)
    finish_failing = policy.cost_to_finish(view.engine, failing, view.candidates, 0, view.settings)
    trying = model.verification.cost + p_fails * finish_failing
    plan = policy.finish_plan_of(doubt, view.settings)
    without = min(policy.finish_value(plan), policy.cost_of_repair_then(view.engine, doubt, plan.sequence[0],
                                                                         view.settings))
    assert trying < without
    assert policy.cost_to_finish(view.engine, doubt, view.candidates, 0, view.settings) == pytest.approx(
        trying, rel=1e-9)


def test_a_unit_in_doubt_is_weighed_against_the_cheapest_other_course():
    # The rooftop demo (illustrative figures): leak found and repaired, the pressures still
    # abnormal, the compressor heard running. Trying the unit is advised; the figure it is
    # compared with was the free airflow symptom's, 544 min (its lookahead took the unit to
    # fail), while repairing the filters was 235 min. The comparison is with the least of the
    # other courses.
    model, _ = load_any_model("rooftop")
    s = Session(model)
    s.acknowledge_caution("leak_search")
    s.record_finding("leak_search", "leak found")
    s.record_repair("refrigerant_leak")
    s.acknowledge_caution("refrigerant_pressures")
    s.record_verification(1)
    s.record_finding("compressor_silent", 0)
    decision = s.view.decision
    assert decision.action == "verify" and decision.reasons[0].kind == "unit-may-work"
    others = [a.expected_cost for a in decision.alternatives if a.action != "verify"]
    going_on = dict(decision.reasons[0].costs)["go on without verifying"]
    assert going_on == pytest.approx(min(others), rel=1e-12)
    repair = next(a for a in decision.alternatives if a.action == "repair")
    assert going_on <= repair.expected_cost


def test_verify_check_still_abnormal_sends_the_diagnosis_on():
    # Trying the unit is weighed, and not advised where it costs more than going on
    # (the unit's verification priced far above anything left to do; illustrative).
    model = replace(pump_model(), verification=Verification("run the pump for a shift", 600,
                                                            outcomes=("flows", "no flow")))
    s = Session(model)
    s.record_finding("flow", "flow low")
    s.record_repair("impeller")
    s.record_verification("flow low")
    assert s.status not in (CONFIRMED, AWAITING_VERIFICATION)
    assert s.state.verification is None
    decision = s.view.decision
    weighed = [a for a in decision.alternatives if a.action == "verify"]
    assert len(weighed) == 1 and weighed[0].expected_cost > decision.expected_cost
    # The technician may try the unit all the same: it still fails, and the diagnosis goes on knowing it.
    s.record_verification("no flow")
    assert s.findings[-1] == Finding("top", 1, 1)
    assert s.status not in (CONFIRMED, AWAITING_VERIFICATION)
    with pytest.raises(SessionError, match="already verified"):
        s.record_verification("flows")


def test_ambiguity_group_and_repair_order_when_no_check_is_worth_doing():
    model = pump_model()
    s = Session(model, SessionSettings(0.95, 0.01, 0.05))
    for check in ("flow", "sensor_cal"):
        s.skip_check(check, "no gauge on site")
    s.record_finding("lamp", "off")
    s.skip_check("valve_look", "valve in a locked pit")
    st = s.state
    assert st.status == AMBIGUITY and not st.ranking  # every check done or skipped
    group = [g.id for g in st.ambiguity_group]
    assert all(sus.p >= 0.05 for sus in st.ambiguity_group)
    order = st.repair_order
    ratios = [r.ratio for r in order if r.ratio is not None]
    assert ratios == sorted(ratios, reverse=True)  # Kadane & Simon 1977
    assert set(group) == {r.id for r in order}
    unrepairable = [r for r in order if r.cost is None]
    assert all(r.note for r in unrepairable)
    assert order[-len(unrepairable):] == tuple(unrepairable) if unrepairable else True


def test_min_bits_setting_stops_diagnosis():
    s = Session(pump_model(), settings_for(pump_model(), min_bits=100.0))
    assert s.status == AMBIGUITY


def test_skip_unskip_retract_correct_undo():
    model = pump_model()
    s = Session(model)
    s.skip_check("flow", "gauge missing")
    assert s.ranking.row("flow") is None and s.state.skipped == (("flow", "gauge missing"),)
    s.unskip_check("flow")
    assert s.ranking.row("flow") is not None
    s.record_finding("flow", "flow low")
    s.correct_finding("flow", "flow normal")
    fresh = Session(model)
    fresh.record_finding("flow", "flow normal")
    assert s.posterior.log_p == pytest.approx(fresh.posterior.log_p, abs=TOL)
    s.retract_finding("flow")
    assert s.posterior.log_p == pytest.approx(Session(model).posterior.log_p, abs=TOL)
    s.undo()  # the retraction
    assert s.findings[-1] == Finding("flow", 0, 0)
    s.add_note("customer says it started after a storm")
    s.undo()
    assert s.state.notes == ()


def test_one_propagation_per_action():
    model = pump_model()
    engine = Engine(model)
    s = Session(model, engine=engine)
    s.state
    start = engine.propagations
    s.record_finding("lamp", "off")
    s.ranking, s.suspects, s.entropy_bits, s.state, s.state
    # One propagation ranks every check; weighing the best k against
    # repairing now takes one more per outcome of each, and looking a second
    # check ahead k more per outcome of those.
    k = s.settings.value_lookahead
    assert engine.propagations <= start + 1 + 2 * k + 4 * k * k
    before = engine.propagations
    s.add_note("note")
    s.state
    assert engine.propagations == before  # a note does not change the posterior


def test_apply_all_equals_one_by_one_and_decides_once():
    # apply_all must reach the state apply reaches action by action, with the
    # same log of actions, while the policy decides only for the last state.
    model = pump_model()
    actions = [RecordFinding("lamp", "off"), SkipCheck("sensor_cal", "no calibrator"),
               RecordFinding("valve_look", "open"), AddNote("pump hums"), RecordRepair("impeller")]
    one_by_one = Session(model)
    for action in actions:
        one_by_one.apply(action)
    engine = Engine(model)
    batch = Session(model, engine=engine)
    start = engine.propagations
    batch.apply_all(actions)
    assert snapshot(batch) == snapshot(one_by_one)
    # One propagation per action that changes the findings or repairs, plus
    # the final state's weighing; applying one by one weighs after each.
    weighed_once = engine.propagations - start
    counted = Engine(model)
    again = Session(model, engine=counted)
    first = counted.propagations
    for action in actions:
        again.apply(action)
    assert weighed_once < counted.propagations - first


def test_apply_all_stops_at_a_refused_action_keeping_the_earlier_ones():
    s = Session(pump_model())
    with pytest.raises(SessionError, match="already done"):
        s.apply_all([RecordFinding("lamp", "off"), RecordFinding("lamp", "on")])
    expected = Session(pump_model())
    expected.record_finding("lamp", "off")
    assert snapshot(s) == snapshot(expected)


BAD_ACTIONS = [
    (lambda s: s.record_finding("nope", "on"), SessionError, "unknown check"),
    (lambda s: s.record_finding("top", "on"), SessionError, "event or gate"),
    (lambda s: s.record_finding("lamp", "blinking"), SessionError, "outcomes 1 'off', 2 'on', not 'blinking'"),
    (lambda s: s.record_finding("lamp", "3"), SessionError, "outcomes 1 'off', 2 'on', not '3'"),
    (lambda s: s.record_finding("lamp", 2), SessionError, "outcomes 1 'off', 2 'on', not 2"),
    (lambda s: s.record_finding("flow", "flow low"), SessionError, "already done"),
    (lambda s: s.record_repair("pump_motor"), SessionError, "not a basic event"),
    (lambda s: s.record_verification("flows"), SessionError, "nothing has been repaired"),
    (lambda s: s.retract_finding("lamp"), SessionError, "no finding"),
    (lambda s: s.retract_finding("top"), SessionError, "complaint"),
    (lambda s: s.correct_finding("flow", "flow low"), SessionError, "nothing to correct"),
    (lambda s: s.skip_check("lamp", "  "), SessionError, "say why"),
    (lambda s: s.unskip_check("lamp"), SessionError, "not skipped"),
    (lambda s: s.add_note(""), SessionError, "text"),
    (lambda s: s.apply({"action": "fly"}), SessionError, "unknown action"),
    (lambda s: s.apply({"action": "finding", "check": "lamp"}), SessionError, "outcome"),
]


@pytest.mark.parametrize("bad, error, words", BAD_ACTIONS)
def test_bad_action_refused_state_unchanged(bad, error, words):
    s = Session(pump_model())
    s.record_finding("flow", "flow low")
    before = snapshot(s)
    with pytest.raises(error, match=words):
        bad(s)
    assert snapshot(s) == before


def test_impossible_findings_refused_state_unchanged():
    # Without unlisted causes, ruling out breaker and valve and repairing the
    # impeller and the sensor leaves nothing that could make the pump still
    # fail: "still fails" has probability 0 (checked by enumeration below).
    model = pump_model(unlisted=None)
    s = Session(model)
    for check in ("lamp", "valve_look"):
        s.record_finding(check, 0)
    s.record_repair("impeller")
    s.record_repair("sensor")
    findings = list(s.findings) + [Finding("top", 1, 2)]
    assert bf.posterior(model, findings, ("impeller", "sensor"))["log_p"] == -math.inf
    before = snapshot(s)
    with pytest.raises(ImpossibleFindings, match="cannot all be true"):
        s.record_verification("no flow")
    assert snapshot(s) == before


def test_undo_with_nothing_and_repeated_repair_refused():
    s = Session(pump_model())
    with pytest.raises(SessionError, match="nothing to undo"):
        s.undo()
    s.record_repair("valve")
    before = snapshot(s)
    with pytest.raises(SessionError, match="already repaired"):
        s.record_repair("valve")
    assert snapshot(s) == before


def test_bad_settings_refused():
    with pytest.raises(TroubleshootError):
        settings_for(pump_model(), isolation_threshold=1.5)
    with pytest.raises(TroubleshootError):
        settings_for(pump_model(), min_bits=-1)
    assert math.isclose(settings_for(pump_model()).isolation_threshold, 0.95)


def test_doing_the_verify_check_records_the_verification():
    s = Session(pump_model())
    s.record_repair("impeller")
    s.record_finding("flow", "flow normal")  # the impeller repair's verify check
    assert s.actions[-1].to_record() == {"action": "verify", "outcome": "flow normal"}
    assert s.status == AWAITING_VERIFICATION and s.state.verification.target == s.model.top


def test_the_line_mode_says_why_a_unit_in_doubt_is_tried(tmp_path):
    # Typed as a technician would: the impeller replaced, the gauge still low, then the pump run.
    import io

    from troubleshoot.model.xmlfile import save_model
    from troubleshoot.session.logfile import new_session
    from troubleshoot.ui.plain import interact

    path = tmp_path / "pump.xml"
    save_model(pump_model(), path)
    session = new_session(str(path), log_path=tmp_path / "plain.jsonl")
    out = io.StringIO()
    interact(session, io.StringIO("ack flow\nflow=flow low\nrepair impeller\nack flow\nverify 2\nverify flows\n"
                                  "quit\n"), out)
    text = out.getvalue()
    assert "verify the repair: run the pump: 1 'flows', 2 'no flow'" in text
    assert "why: the unit may already work (P = " in text
    assert "status: confirmed" in text
    session.close()
