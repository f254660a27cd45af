"""The two bundled demo models: sizes, structure, and that hazardous work carries a caution."""

from __future__ import annotations

import re

import pytest

from troubleshoot.commands.check import repeated_events
from troubleshoot.model.demos import DEFAULT_DEMO, DEMOS, demo_path
from troubleshoot.model import exponential_probability
from troubleshoot.model.xmlfile import load_model_with_warnings

# Words in a check's instructions that mean the work itself carries a hazard
# (electrical, stored pressure, refrigerant, rotating parts): common practice
# of field service, where such steps come with a caution.
HAZARD_WORDS = re.compile(
    r"lock out|volt|megger|capacitor|refrigerant|fit gauges|bleed|drain|strainer body|"
    r"fan|blower|shaft|coupling|run pump|terminal|loop wire|milliamp",
    re.IGNORECASE,
)


def load(demo):
    return load_model_with_warnings(demo_path(demo))


@pytest.mark.parametrize("demo", sorted(DEMOS))
def test_demo_loads_without_warnings(demo):
    model, warnings = load(demo)
    assert warnings == []
    assert model.cost_unit == "min"
    assert model.verification is not None and model.verification.cost > 0
    assert model.top_label


def test_default_demo_is_the_rooftop_unit():
    assert DEFAULT_DEMO == "rooftop" and demo_path().name == "rooftop_ac.xml"


def test_rooftop_sizes_and_features():
    model, _ = load("rooftop")
    assert 12 <= len(model.basic_events) <= 18
    assert 8 <= len(model.checks) <= 14
    assert 2 <= len(model.symptoms) <= 3
    assert any(g.kind == "or" and g.unlisted is not None for g in model.gates)
    assert repeated_events(model)
    assert all(e.repair is not None and e.repair.cost > 0 for e in model.basic_events)
    assert model.top_label == "Unit runs but does not cool"


def test_booster_sizes_and_features():
    model, _ = load("booster")
    assert 50 <= len(model.basic_events) <= 100
    assert 15 <= len(model.checks) <= 30
    assert 1 <= len(model.symptoms) <= 5
    assert any(g.kind == "atleast" for g in model.gates)
    assert len(repeated_events(model)) >= 2
    # The transmitter feeds the controller; control power feeds every pump and the controller.
    assert "pressure_signal_wrong" in model.gate_by_id["control_fault"].inputs
    assert "control_power_lost" in repeated_events(model)


@pytest.mark.parametrize("demo", sorted(DEMOS))
def test_each_demo_has_at_least_two_three_outcome_measurements(demo):
    # Issue 12: real readings such as low / normal / high (format 1.1).
    model, _ = load(demo)
    graded = [c for c in model.checks if len(c.outcomes) == 3]
    assert len(graded) >= 2
    for check in graded:
        assert all(c.shows for c in check.causes) and check.leak, check.id


@pytest.mark.parametrize("demo", sorted(DEMOS))
def test_marked_illustrative(demo):
    text = demo_path(demo).read_text(encoding="utf-8")
    comment = re.search(r"<!--(.*?)-->", text, re.DOTALL)
    assert comment and "illustrative" in comment.group(1).lower()
    model, _ = load(demo)
    assert "illustrative" in model.description.lower()


@pytest.mark.parametrize("demo", sorted(DEMOS))
def test_checks_have_instructions_small_cause_sets_and_cautions(demo):
    model, _ = load(demo)
    for check in model.checks + model.symptoms:
        assert check.instructions, check.id
        assert 1 <= len(check.causes) <= 4, check.id
        if HAZARD_WORDS.search(check.instructions):
            assert check.caution, f"{check.id} describes hazardous work but has no caution"
    for symptom in model.symptoms:
        assert symptom.cost == 0


@pytest.mark.parametrize("demo", sorted(DEMOS))
def test_rates_give_the_exponential_probability(demo):
    model, _ = load(demo)
    rated = [e for e in model.basic_events if e.rate is not None]
    assert rated
    for event in rated:
        # p = 1 - exp(-lambda t): NUREG-0492 chapter VI.
        assert event.probability == pytest.approx(exponential_probability(event.rate, event.exposure), rel=1e-12)
        assert 0 < event.probability < 0.1


@pytest.mark.parametrize("demo", sorted(DEMOS))
def test_escalation_costs_at_least_the_most_expensive_repair(demo):
    # Common practice: a specialist's visit or a unit swap costs at least as
    # much as the dearest repair the technician could make on site.
    model, _warnings = load(demo)
    assert model.escalation is not None and model.escalation.label
    dearest = max(e.repair.cost for e in model.basic_events if e.repair is not None)
    assert model.escalation.cost >= dearest
    # Its price is marked illustrative in the file, as every demo figure is.
    text = demo_path(demo).read_text(encoding="utf-8")
    block = text[text.rindex("<!--", 0, text.index("<escalation")):text.index("<escalation")]
    assert "Illustrative price" in block
