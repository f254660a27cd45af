"""The policy against the exact optimum on generated small models (issue 11), and the study that measures it.

References: the exact optimum is :func:`troubleshoot.study.optimal.solve`,
itself checked against an independent search over every policy tree in
tests/test_optimal.py; here it is checked on larger models (5 to 8 basic
events) by following its own table with the exact evaluator (a bound
mistaken for a value shows as a table that does not reach its cost).
"""

from __future__ import annotations

import json
import math

import pytest

from troubleshoot.cli import main
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.errors import ImpossibleFindings
from troubleshoot.model import BasicEvent, Cause, Check, Escalation, Gate, Model, Repair, Verification
from troubleshoot.model.validate import validate_model
from troubleshoot.session import Session, settings_for
from troubleshoot.study.optimal import MAX_STATES, expected_cost, solve
from troubleshoot.study.optimum_study import part_check_model, small_model
from troubleshoot.study.strategies import make_strategy, protocol_actor

TOLERANCE = 1e-9  # exact paths (DESIGN.md)


@pytest.mark.parametrize("seed", [1, 2, 309683])
def test_small_models_are_seeded_and_as_documented(seed):
    model = small_model(seed)
    assert model == small_model(seed)  # same seed, same model
    assert 5 <= len(model.basic_events) <= 8
    assert any(g.unlisted for g in model.gates)  # a cause outside the model is possible
    assert not [p for p in validate_model(model) if p.severity == "error"]
    dearest = max(e.repair.cost for e in model.basic_events) + model.verification.cost
    assert model.escalation.cost >= dearest  # a specialist costs at least the dearest repair (issue 11)


@pytest.mark.parametrize("seed", [309683, 280862])
def test_optimal_table_followed_reaches_its_cost_on_generated_models(seed):
    # A budget cut taken for a value makes solve() report less than its own table achieves
    # (before the fix, on a 7-event model of an earlier draw of this generator, 188.79 min was
    # reported where an unpruned recursion gives 190.00 min).
    model = small_model(seed)
    solution = solve(model)
    act = protocol_actor(model, make_strategy("optimal", solution), settings_for(model), Engine(model))
    assert expected_cost(model, act) == pytest.approx(solution.expected_cost, rel=1e-9, abs=TOLERANCE)


def _tool_and_optimum(model, max_states: int = MAX_STATES) -> tuple[float, float]:
    """The exact optimum and the tool's exact expected cost on the same protocol."""
    best = solve(model, max_states=max_states).expected_cost
    tool = expected_cost(model, protocol_actor(model, make_strategy("info-per-cost"), settings_for(model),
                                               Engine(model)))
    return best, tool


# Measured by `troubleshoot optimum-study --models 30 --seed 1` (README): the ratio of the
# tool's exact expected cost to the optimum on each model. The bound is 1.03 per model.
# 309683 (1.0578 before) and 704298 (1.036 before) were the worst while escalating at once was
# kept out of the comparison with a check even when no check beyond the one weighed was left;
# with every informative check within the horizon weighed to the end, both are at the optimum.
# 840829 was the worst then (1.0291); with the complete horizon's plan taking the first repairs'
# chance of failing on from the network it is 1.0153, and 403447 (1.0215) is the worst.
@pytest.mark.parametrize("seed, factor", [(177682, 1.0), (61687, 1.0), (871278, 1.0), (674005, 1.0),
                                          (280862, 1.03), (309683, 1.0), (704298, 1.0), (840829, 1.03)])
def test_policy_is_within_the_stated_factor_of_the_optimum(seed, factor):
    model = small_model(seed)
    best, tool = _tool_and_optimum(model)
    assert best - TOLERANCE <= tool <= factor * best + TOLERANCE


def test_policy_within_the_bound_on_an_eight_event_model_with_two_likely_faults():
    # small-8-seed849353 needs more than the study's default 60,000 states (optimum-study
    # --max-states 250000, README): 1.0533 while the complete horizon's leaves took one fault
    # among the suspects, 1.0084 with the first repairs' chance of failing on from the network.
    best, tool = _tool_and_optimum(small_model(849353), max_states=300_000)
    assert best - TOLERANCE <= tool <= 1.03 * best + TOLERANCE


def _double_fault_model() -> Model:
    """Two subsystems in series, each with an unlisted cause; figures illustrative."""
    events = (BasicEvent("a1", "pump seal leaking", 0.03, repair=Repair("replace the seal", 30.0)),
              BasicEvent("a2", "pump impeller worn", 0.01, repair=Repair("replace the impeller", 90.0)),
              BasicEvent("b1", "valve stuck", 0.01, repair=Repair("free the valve", 20.0)),
              BasicEvent("b2", "valve actuator failed", 0.01, repair=Repair("replace the actuator", 60.0)))
    gates = (Gate("pump", "pump lost", "or", ("a1", "a2"), unlisted=0.005),
             Gate("valve", "valve path lost", "or", ("b1", "b2"), unlisted=0.005),
             Gate("top", "no flow", "or", ("pump", "valve")))
    checks = (Check("pump_test", "test the pump", 5.0, ("normal", "abnormal"), (Cause("pump", 0.98),), 0.01),
              Check("valve_test", "test the valve path", 5.0, ("normal", "abnormal"), (Cause("valve", 0.98),), 0.01),
              Check("seal_look", "look at the seal", 5.0, ("normal", "abnormal"), (Cause("a1", 0.95),), 0.01))
    return Model(name="double-fault", top="top", gates=gates, basic_events=events, checks=checks,
                 verification=Verification("run the unit", 5.0), escalation=Escalation("call the specialist", 400.0))


def test_second_fault_after_a_confirmed_repair_is_sought_not_escalated():
    # The seal was found leaking and replaced, yet the unit still fails: a second fault
    # (the valve path, listed) is now likelier than any cause outside the model.
    model = _double_fault_model()
    session = Session(model, settings_for(model))
    session.record_finding("pump_test", 1)
    session.record_finding("seal_look", 1)
    assert session.view.decision.action == "repair" and session.view.decision.target == "a1"
    session.record_repair("a1")
    session.record_verification(1)  # still no flow
    view = session.view
    listed = sum(s.p for s in view.suspects if not s.unlisted and not s.repaired and s.id.startswith("b"))
    assert listed > view.decision.outside_model.p
    assert view.decision.action in ("check", "repair")
    assert view.decision.action != "escalate"


def test_optimum_study_command_prints_ratios_and_skips_openly(capsys):
    assert main(["optimum-study", "--models", "1", "--seed", "1", "--max-states", "3000", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    solved = [r for r in doc["rows"] if r["optimal_expected_cost"] is not None]
    assert doc["models"] == len(solved) and doc["skipped"] == len(doc["rows"]) - len(solved)
    for row in doc["rows"]:
        assert (row["skipped"] is None) == (row["optimal_expected_cost"] is not None)
    for row in solved:
        assert row["exact_expected_cost"]["info-per-cost"] >= row["optimal_expected_cost"] - TOLERANCE
    if solved:
        ratios = [r["exact_expected_cost"]["info-per-cost"] / r["optimal_expected_cost"] for r in solved]
        assert doc["strategies"]["info-per-cost"]["worst_ratio"] == pytest.approx(max(ratios), rel=1e-12)


@pytest.mark.parametrize("seed", [1, 2, 309683])
def test_part_check_models_add_one_check_on_a_single_part(seed):
    model = part_check_model(seed)
    assert model == part_check_model(seed)  # same seed, same model
    base = small_model(seed)
    assert model.basic_events == base.basic_events and model.gates == base.gates
    assert model.checks[:-1] == base.checks
    part = model.checks[-1]
    assert len(part.causes) == 1 and part.causes[0].target in model.event_by_id
    assert not [p for p in validate_model(model) if p.severity == "error"]


def test_optimum_study_of_the_part_family_says_so_and_studies_three_checks(capsys):
    assert main(["optimum-study", "--family", "part", "--models", "1", "--seed", "1", "--max-states", "30000",
                 "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["family"] == "part"
    assert doc["rows"] and all(r["checks"] == 3 for r in doc["rows"])
    for row in doc["rows"]:
        if row["optimal_expected_cost"] is not None:
            assert row["exact_expected_cost"]["info-per-cost"] >= row["optimal_expected_cost"] - TOLERANCE


# Measured by `troubleshoot optimum-study --family part --models 30 --seed 1` (README). On 320236
# the tool read a part of a subsystem tested normal before the repair (1.0674); a check that
# reads only parts which cannot matter now is left out (advice/policy.reads_only_idle_parts):
# 1.0086, within the 1.03.
@pytest.mark.parametrize("seed, factor", [(371036, 1.0), (57636, 1.0), (320236, 1.03)])
def test_policy_on_part_check_models_is_within_the_measured_factor_of_the_optimum(seed, factor):
    model = part_check_model(seed)
    best, tool = _tool_and_optimum(model)
    assert best - TOLERANCE <= tool <= factor * best + TOLERANCE


def test_optimum_study_refuses_bad_arguments(capsys):
    assert main(["optimum-study", "--models", "0"]) == 2
    assert "--models" in capsys.readouterr().err
    with pytest.raises(SystemExit) as stop:
        main(["optimum-study", "--family", "none"])
    assert stop.value.code == 2


def _optimal_action(model, observations, repairs):
    """The exact optimum's action in the protocol state with these observations and repairs."""
    from troubleshoot.study.optimal import State

    solution = solve(model)
    return solution.action(State(tuple(observations), tuple(repairs)))


def test_escalates_when_the_checks_left_are_weighed_to_the_end_and_escalating_is_cheaper():
    # small-7-seed704298 after two failed repairs (e5, e1): escalating (190 min) is cheaper than a
    # 10 min check, whatever it reads, followed by the best finish. One check ahead with repairing
    # first at its leaves had called the check worth 214 min against 221 for repairing, and checked.
    model = small_model(704298)
    session = Session(model, settings_for(model))
    for root in ("e5", "e1"):
        session.record_repair(root)
        session.record_verification(1)
    decision = session.view.decision
    assert decision.action == "escalate"
    assert decision.expected_cost == pytest.approx(model.escalation.cost)
    # The independent reference: the exact optimal policy in the same state.
    observations = [(model.top, 1, epoch, kind) for epoch, kind in ((0, "complaint"), (1, "verification"),
                                                                    (2, "verification"))]
    assert _optimal_action(model, observations, ("e5", "e1")) == ("escalate", None)


def test_a_check_is_weighed_against_escalating_when_no_check_lies_beyond_it():
    # small-5-seed309683 at the complaint: a 2 min check, then escalating if it reads normal
    # (190 min) or repairing if not, beats repairing the cheapest suspect at once; the optimum
    # (exact, by enumeration) does the same.
    model = small_model(309683)
    session = Session(model, settings_for(model))
    decision = session.view.decision
    assert (decision.action, decision.target) == ("check", "t_g1")
    assert _optimal_action(model, [(model.top, 1, 0, "complaint")], ()) == ("check", "t_g1")
    # Its figure is the complete lookahead's: the check, then for each outcome the best of
    # finishing (repairs in order, escalation now or later; the plan's first repairs' chance of
    # failing on checked against enumeration above), repairing the first suspect and diagnosing
    # again, and the other check, written out here.
    from troubleshoot.advice.policy import cost_of_repair_then, exact_finish_plan, finish_plan_of

    engine, posterior = session.engine, session.posterior
    settings = settings_for(model)

    def best_after(findings, left):
        post = engine.propagate(findings, ())
        best = exact_finish_plan(engine, post, settings).best
        first = finish_plan_of(post, settings).sequence[:1]
        if first:
            best = min(best, cost_of_repair_then(engine, post, first[0], settings))
        for check_id in left:
            check = model.check_by_id[check_id]
            total = check.cost
            for outcome in range(len(check.outcomes)):
                try:
                    later = engine.propagate(findings + (Finding(check_id, outcome, 0),), ())
                except ImpossibleFindings:
                    continue
                p = math.exp(later.log_p - post.log_p)
                total += p * best_after(findings + (Finding(check_id, outcome, 0),), tuple(c for c in left
                                                                                        if c != check_id))
            best = min(best, total)
        return best

    figure = best_after(tuple(posterior.findings), ("t_g0", "t_g1"))
    assert decision.expected_cost == pytest.approx(figure, rel=1e-12)


@pytest.mark.parametrize("seed", [834821, 849353, 309683, 1, 2])
def test_exact_plan_takes_the_first_repairs_chance_of_failing_on_from_enumeration(seed):
    # Reference: exact enumeration (tests/bruteforce.py): P(the unit still fails after
    # repairing the plan's first j suspects | findings) = sum over root states of
    # P(state | findings) * [top fails with those roots working]; escalation priced as the
    # model says; the costs then follow the expected cost of repair (Heckerman, Breese &
    # Rommelse 1995): sum_j (c_j + v_j) P(repair j is made) + E P(still failing after k).
    import numpy as np

    import bruteforce
    from troubleshoot.advice.policy import EXACT_REPAIRS, exact_finish_plan, finish_plan_of

    model = small_model(seed)
    engine = Engine(model)
    settings = settings_for(model)
    check = model.checks[0].id
    findings = [Finding(model.top, 1, 0), Finding(check, 1, 0)]
    posterior = engine.propagate(findings)
    plan = exact_finish_plan(engine, posterior, settings)
    single = finish_plan_of(posterior, settings)
    assert plan.sequence == single.sequence
    exact = bruteforce.posterior(model, findings)
    states, roots, joint = exact["states"], exact["roots"], exact["joint"]
    for j in range(1, max(1, min(EXACT_REPAIRS, len(plan.sequence))) + 1):
        fails = bruteforce.evaluate(model, states, roots, set(plan.sequence[:j]))[model.top]
        assert plan.reached[j] == pytest.approx(float(joint[fails].sum()), abs=1e-12)
    full = [model.event_by_id[r].repair.cost + model.verification.cost for r in plan.sequence]
    price = model.escalation.cost
    for k in range(len(plan.sequence) + 1):
        spent = sum(full[j] * plan.reached[j] for j in range(k))
        assert plan.cost_of_stopping_after[k] == pytest.approx(spent + price * plan.reached[k], abs=1e-9)
    assert np.all(np.diff(plan.reached) <= 1e-12)  # a coherent tree: more repairs, no more failing
