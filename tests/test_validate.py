"""Semantic checks on models built by code (no file involved)."""

from __future__ import annotations

import dataclasses

import pytest
from hypothesis import given, settings
from model_strategies import models

from troubleshoot.model import (
    BasicEvent,
    Cause,
    Check,
    Gate,
    Model,
    Repair,
    Verification,
    exponential_probability,
)
from troubleshoot.model.validate import (
    errors_only,
    is_valid_id,
    validate_model,
    warnings_only,
)


def small_model(**changes) -> Model:
    """top = OR(a, b); one check on a. Valid as it stands."""
    fields = {
        "name": "small",
        "top": "top",
        "gates": (Gate("top", "Unit fails", "or", ("a", "b"), line=3),),
        "basic_events": (BasicEvent("a", "Part A", 0.1, line=7), BasicEvent("b", "Part B", 0.2, line=9)),
        "checks": (Check("look", "Look at A", 5.0, ("fine", "broken"), (Cause("a", 0.9),), line=12),),
    }
    fields.update(changes)
    return Model(**fields)


def gate(kind, inputs, **more) -> Gate:
    return Gate("top", "Unit fails", kind, tuple(inputs), line=3, **more)


def messages(model) -> str:
    return "\n".join(p.message for p in errors_only(validate_model(model)))


def test_valid_model_has_no_problem():
    assert validate_model(small_model()) == []


@settings(max_examples=60, deadline=None)
@given(model=models())
def test_generated_models_are_valid(model):
    assert validate_model(model) == []


def test_problems_name_the_path_and_line():
    model = small_model(gates=(gate("or", ("a", "nowhere")),))
    (problem,) = errors_only(validate_model(model, "unit.xml"))
    assert (problem.path, problem.line, problem.severity) == ("unit.xml", 3, "error")
    assert "'nowhere' is not defined" in problem.message


@pytest.mark.parametrize(
    "changes, words",
    [
        ({"top": ""}, "no top event"),
        ({"top": "ghost"}, "top event 'ghost' is not defined"),
        ({"top": "look"}, "is a check or symptom"),
        ({"gates": (gate("or", ()),)}, "has no inputs"),
        ({"gates": (gate("or", ("a", "a", "b")),)}, "twice"),
        ({"gates": (gate("atleast", ("a", "b"), k=3),)}, "k must be between 1 and 2"),
        ({"gates": (gate("atleast", ("a", "b"), k=0),)}, "k must be between 1 and 2"),
        ({"gates": (gate("atleast", ("a", "b")),)}, "k=None"),
        ({"gates": (gate("or", ("a", "b"), k=1),)}, "only at-least gates take k"),
        ({"gates": (gate("not", ("a", "b")),)}, "exactly one"),
        ({"gates": (gate("inhibit", ("a",)),), "basic_events": (BasicEvent("a", "A", 0.1),)}, "no condition"),
        ({"gates": (gate("inhibit", ("a",), condition="zz"),)}, "condition 'zz' is not defined"),
        ({"gates": (gate("or", ("a",), condition="b"),)}, "only INHIBIT gates take one"),
        ({"gates": (gate("and", ("a", "b"), unlisted=0.1),)}, "only OR gates take unlisted-causes"),
        ({"gates": (gate("or", ("a", "b"), unlisted=1.5),)}, "unlisted-causes probability 1.5"),
        ({"gates": (gate("xor", ("a", "b")),)}, "unknown kind 'xor'"),
        ({"probability_basis": "mission-time"}, "needs a mission time"),
        ({"mission_time": 100.0}, "per-demand basis"),
        ({"probability_basis": "hourly"}, "unknown"),
        ({"isolation_threshold": 0.0}, "isolation threshold"),
        ({"name": ""}, "no name"),
        ({"cost_unit": ""}, "cost unit"),
        ({"verification": Verification("works?", -1.0)}, "verification cost -1.0"),
        ({"verification": Verification("works?", 1.0, outcomes=("ok", "ok"))}, "two different"),
    ],
)
def test_each_structural_problem_is_reported(changes, words):
    assert words in messages(small_model(**changes))


@pytest.mark.parametrize(
    "event, words",
    [
        (BasicEvent("b", "B", 1.5), "outside [0, 1]"),
        (BasicEvent("b", "B", -0.1), "outside [0, 1]"),
        (BasicEvent("b", "B", float("nan")), "outside [0, 1]"),
        (BasicEvent("b", "B", 0.0, rate=1e-5), "no exposure time"),
        (BasicEvent("b", "B", 0.0, exposure=10.0), "no failure rate"),
        (BasicEvent("b", "B", 0.0, rate=-1e-5, exposure=10.0), "not a finite number >= 0"),
        (BasicEvent("b", "B", 0.0, rate=1e-5, exposure=0.0), "above 0"),
        (BasicEvent("b", "B", 0.5, rate=1e-5, exposure=10.0), "disagrees"),
        (BasicEvent("b", "B", 0.2, repair=Repair("fix", -5.0)), "cost -5.0 min"),
        (BasicEvent("b", "B", 0.2, repair=Repair("fix", 5.0, verify="ghost")), "verify check 'ghost'"),
        (BasicEvent("b~x", "B", 0.2), "reserved for derived ids"),
        (BasicEvent("2b", "B", 0.2), "not a valid id"),
    ],
)
def test_each_basic_event_problem_is_reported(event, words):
    model = small_model(basic_events=(BasicEvent("a", "Part A", 0.1), event))
    assert words in messages(model)


def test_rate_with_matching_probability_is_accepted():
    # p = 1 - exp(-lambda t): NUREG-0492 chapter VI.
    event = BasicEvent("b", "B", exponential_probability(1e-5, 100.0), rate=1e-5, exposure=100.0)
    assert validate_model(small_model(basic_events=(BasicEvent("a", "A", 0.1), event))) == []


@pytest.mark.parametrize(
    "check, words",
    [
        (Check("look", "L", 5.0, ("fine", "broken"), ()), "has no cause"),
        (Check("look", "L", 5.0, ("fine", "broken"), (Cause("zz", 0.9),)), "cause 'zz' is not defined"),
        (Check("look", "L", 5.0, ("fine", "broken"), (Cause("a", 1.2),)), "detection probability 1.2"),
        (Check("look", "L", 5.0, ("fine", "broken"), (Cause("a", 0.9), Cause("a", 0.5))), "twice"),
        (Check("look", "L", 5.0, ("fine", "broken"), (Cause("a", 0.9),), false_alarm=2.0), "false-alarm"),
        (Check("look", "L", -1.0, ("fine", "broken"), (Cause("a", 0.9),)), "cost -1.0 min"),
        (Check("look", "L", float("inf"), ("fine", "broken"), (Cause("a", 0.9),)), "cost inf min"),
        (Check("look", "L", 5.0, ("same", "same"), (Cause("a", 0.9),)), "two different"),
        (Check("look", "L", 5.0, ("fine", ""), (Cause("a", 0.9),)), "non-empty"),
    ],
)
def test_each_check_problem_is_reported(check, words):
    assert words in messages(small_model(checks=(check,)))


def test_symptom_must_cost_nothing():
    symptom = Check("hot", "Hot", 3.0, ("cool", "hot"), (Cause("a", 0.5),))
    assert "symptoms cost 0" in messages(small_model(symptoms=(symptom,)))


def test_ids_are_unique_across_events_gates_checks_and_symptoms():
    clash = Check("a", "Clash", 1.0, ("fine", "broken"), (Cause("b", 0.9),), line=20)
    problems = errors_only(validate_model(small_model(checks=(clash,))))
    assert len(problems) == 1
    assert problems[0].line == 20
    assert "already used by a basic event at line 7" in problems[0].message


def test_cycle_is_reported_once_with_its_path():
    gates = (
        Gate("top", "Top", "or", ("g1", "a"), line=3),
        Gate("g1", "G1", "and", ("g2", "b"), line=5),
        Gate("g2", "G2", "or", ("g1",), line=8),
    )
    problems = errors_only(validate_model(small_model(gates=gates)))
    assert len(problems) == 1
    assert "cycle (g1 -> g2 -> g1)" in problems[0].message
    assert problems[0].line == 5


def test_self_loop_is_a_cycle():
    assert "cycle (top -> top)" in messages(small_model(gates=(gate("or", ("a", "b", "top")),)))


def test_unreachable_event_and_gate_are_warnings_not_errors():
    model = small_model(
        basic_events=(BasicEvent("a", "A", 0.1), BasicEvent("b", "B", 0.2), BasicEvent("lost", "L", 0.1, line=30)),
        gates=(gate("or", ("a", "b")), Gate("spare", "Spare", "or", ("lost",), line=33)),
    )
    problems = validate_model(model)
    assert errors_only(problems) == []
    assert sorted(p.line for p in warnings_only(problems)) == [30, 33]
    assert all("not under the top event" in p.message for p in problems)


def test_all_problems_come_in_one_pass():
    model = small_model(
        top="top",
        gates=(gate("atleast", ("a", "ghost"), k=5),),
        basic_events=(BasicEvent("a", "A", 1.5), BasicEvent("b", "B", 0.2)),
        checks=(Check("look", "L", 5.0, ("fine", "broken"), ()),),
    )
    text = messages(model)
    for words in ("'ghost' is not defined", "k must be between", "outside [0, 1]", "has no cause"):
        assert words in text


@pytest.mark.parametrize("text", ["a", "_x", "pump-1.b", "é_valve", "A9"])
def test_valid_ids(text):
    assert is_valid_id(text)


@pytest.mark.parametrize("text", ["", "1a", "a b", "a:b", "a~b", "-a", None, 5])
def test_invalid_ids(text):
    assert not is_valid_id(text)


def test_validation_does_not_change_the_model():
    model = small_model(top="ghost")
    before = dataclasses.astuple(model)
    validate_model(model)
    assert dataclasses.astuple(model) == before
