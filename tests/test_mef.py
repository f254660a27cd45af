"""Import and export of fault trees in the Open-PSA Model Exchange Format (MEF).

Outside references used here:
- the Aralia benchmark fault trees (Rauzy et al., Reliability Engineering &
  System Safety 79(1), 2003), as tabled in the public repository
  openpra-org/generic-openpsa-models (folder models/Aralia), with their
  published counts of basic events and gates;
- brute-force enumeration of all 2^n basic-event states (an evaluator written
  in this file, independent of the engine);
- hand computation with the probability rules of NUREG-0492, chapter VI.
"""

from __future__ import annotations

import itertools
import math
from pathlib import Path

import pytest
from conftest import aralia_path

from troubleshoot import cli
from troubleshoot.errors import ModelError
from troubleshoot.model.mef import DEFAULT_MISSION_TIME_HOURS, read_mef, write_mef
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, exponential_probability

FILES = Path(__file__).resolve().parent / "mef_files"

#: Published counts (basic events, gates) of the Aralia trees: Rauzy et al. 2003,
#: as tabled in openpra-org/generic-openpsa-models. Gates counted as the MEF
#: file defines them (define-gate), before any decomposition.
ARALIA = {"chinese": (25, 36), "baobab2": (32, 40), "das9201": (122, 82)}


def aralia_file(name: str) -> Path:
    return aralia_path(name)


def validation_errors(model: Model) -> list[str]:
    try:
        from troubleshoot.model.validate import validate_model
    except ImportError:
        pytest.skip("troubleshoot.model.validate is not available in this installation")
    return [str(p) for p in validate_model(model) if p.severity == "error"]


# -- a tiny brute-force evaluator over the Model (independent of the engine) --


def gate_value(model: Model, node: str, state: dict[str, bool]) -> bool:
    """Truth of an event or gate in one joint state of the root events (NUREG-0492 gate rules)."""
    if node in state:
        return state[node]
    gate = model.gate_by_id[node]
    values = [gate_value(model, x, state) for x in gate.inputs]
    if gate.kind == "and":
        result = all(values)
    elif gate.kind == "or":
        result = any(values) or (gate.unlisted is not None and state[gate.id + "~unlisted"])
    elif gate.kind == "atleast":
        result = sum(values) >= gate.k
    elif gate.kind == "not":
        result = not values[0]
    elif gate.kind == "inhibit":
        result = values[0] and gate_value(model, gate.condition, state)
    else:
        raise AssertionError(gate.kind)
    return result


def brute_force_probability(model: Model, node: str | None = None) -> float:
    """P(node) by enumerating all 2^n states of the independent root events."""
    roots = list(model.hypotheses)
    total = 0.0
    for bits in itertools.product((False, True), repeat=len(roots)):
        state = dict(zip(roots, bits))
        weight = math.prod(model.prior_of(r) if b else 1.0 - model.prior_of(r) for r, b in state.items())
        if gate_value(model, node or model.top, state):
            total += weight
    return total


def fault_tree_fields(model: Model):
    """What MEF carries of a model: top, gates and basic events (not checks, costs, repairs)."""
    gates = {g.id: (g.label, g.kind, g.inputs, g.k, g.condition, g.unlisted) for g in model.gates}
    events = {e.id: (e.label, e.rate, e.exposure) for e in model.basic_events}
    probabilities = {e.id: e.probability for e in model.basic_events}
    return model.top, gates, events, probabilities


def assert_same_fault_tree(original: Model, again: Model) -> None:
    top, gates, events, probabilities = fault_tree_fields(original)
    top2, gates2, events2, probabilities2 = fault_tree_fields(again)
    assert top2 == top
    assert gates2 == gates
    assert events2 == events
    assert probabilities2.keys() == probabilities.keys()
    for event_id, p in probabilities.items():
        # Exact for a float probability; a rate law is re-evaluated as 1 - exp(-rate t),
        # which the validator already requires to agree to 1e-9 relative.
        assert math.isclose(probabilities2[event_id], p, rel_tol=1e-9, abs_tol=0.0), event_id


# -- the public benchmark trees ------------------------------------------------


@pytest.mark.parametrize("name", sorted(ARALIA))
def test_aralia_tree_imports_with_published_counts(name):
    model, report = read_mef(aralia_file(name))
    events, gates = ARALIA[name]  # Rauzy et al. 2003 via openpra-org/generic-openpsa-models
    assert len(model.basic_events) == events
    assert len(model.gates) == gates
    assert model.top == "r1"  # the README of the benchmark folder names r1 the top gate
    assert model.name == name
    assert model.checks == () and model.symptoms == ()
    assert model.cost_unit == "min" and model.probability_basis == "per-demand"
    assert {g.kind for g in model.gates} <= {"and", "or", "atleast"}
    assert report == []  # nothing in these files needs a note
    assert validation_errors(model) == []


@pytest.mark.parametrize("name", sorted(ARALIA))
def test_aralia_export_then_import_is_unchanged(name, tmp_path):
    model, _ = read_mef(aralia_file(name))
    out = tmp_path / f"{name}.xml"
    write_mef(model, out)
    again, report = read_mef(out)
    assert report == []
    assert_same_fault_tree(model, again)


def test_baobab2_voting_gate_keeps_k():
    model, _ = read_mef(aralia_file("baobab2"))
    # baobab2.xml, line 5: <atleast min="3"> over g3, g4, g5, g1, g2
    assert model.gate_by_id["r1"].kind == "atleast"
    assert model.gate_by_id["r1"].k == 3
    assert model.gate_by_id["r1"].inputs == ("g3", "g4", "g5", "g1", "g2")


# -- a file with every supported feature and some unsupported ones -------------


def notes_at(report, line):
    return [p.message for p in report if p.line == line]


def test_feature_file_imports_and_reports_with_lines():
    model, report = read_mef(FILES / "features.xml")
    assert validation_errors(model) == []
    assert all(p.severity == "warning" for p in report)
    # Voting gate 2 of 3; pump-a is a repeated event (under 'pumps' and 'controller').
    pumps = model.gate_by_id["pumps"]
    assert (pumps.kind, pumps.k, pumps.inputs) == ("atleast", 2, ("pump-a", "pump-b", "pump-c"))
    assert pumps.label == "Two of three pumps fail"  # the MEF <label>
    assert model.gate_by_id["controller"].label == "controller"  # no label: the name
    users = [g.id for g in model.gates if "pump-a" in g.inputs]
    assert users == ["pumps", "controller"]
    # The house event 'maintenance' is false: and(sensor, false) = false drops out.
    top = model.gate_by_id["no-cooling"]
    assert top.kind == "or" and top.inputs == ("pumps", "valve_1", "controller")
    assert "sensor" not in model.event_by_id
    assert any("house event 'maintenance' is false" in m for m in notes_at(report, 12))
    # Parameter over arithmetic, exponential with the mission time and with a fixed time.
    rate = 2 * 1e-5
    a, b = model.event_by_id["pump-a"], model.event_by_id["pump-b"]
    assert (a.rate, a.exposure) == (rate, DEFAULT_MISSION_TIME_HOURS)
    assert a.probability == pytest.approx(1 - math.exp(-rate * 8760.0), rel=1e-12)  # exponential law
    assert (b.rate, b.exposure) == (rate, 100.0)
    assert b.probability == pytest.approx(1 - math.exp(-rate * 100.0), rel=1e-12)
    assert model.event_by_id["pump-c"].probability == pytest.approx(0.5 - 1 / 4, abs=1e-15)
    assert model.probability_basis == "mission-time"
    assert model.mission_time == DEFAULT_MISSION_TIME_HOURS
    assert any("8760 h assumed" in p.message for p in report)
    # Renamed id ('~' is reserved) keeps its MEF label; reported at its definition.
    valve = model.event_by_id["valve_1"]
    assert valve.label == "Inlet valve stuck shut"
    assert any("renamed 'valve_1'" in m for m in notes_at(report, 57))
    # lognormal-deviate (mean, error factor, level): its mean is used, reported at line 59.
    assert valve.probability == 0.002
    assert any("lognormal-deviate" in m and "mean" in m for m in notes_at(report, 59))
    # Not supported: the CCF group (line 34) and the event tree (line 64).
    assert any("common-cause" in m for m in notes_at(report, 34))
    assert any("event tree" in m for m in notes_at(report, 64))


def test_mission_time_can_be_given(tmp_path):
    model, report = read_mef(FILES / "features.xml", mission_time=1000.0)
    pump_a = model.event_by_id["pump-a"]
    assert pump_a.exposure == 1000.0 and model.mission_time == 1000.0
    assert not any("assumed" in p.message for p in report)


def test_unknown_expression_without_mean_is_refused_with_its_line():
    with pytest.raises(ModelError) as caught:
        read_mef(FILES / "unknown_expression.xml")
    [problem] = caught.value.problems
    assert problem.line == 14 and "periodic-test" in problem.message


def test_several_top_gates_need_a_choice():
    with pytest.raises(ModelError) as caught:
        read_mef(FILES / "two_tops.xml")
    message = str(caught.value)
    assert "top-one" in message and "top-two" in message and "--top" in message
    model, report = read_mef(FILES / "two_tops.xml", top="top-two")
    assert model.top == "top-two" and model.name == "second"
    assert [g.id for g in model.gates] == ["top-two"]
    assert [e.id for e in model.basic_events] == ["a", "c"]
    assert any("left out" in p.message for p in report)  # the other tree and event b


# -- semantics: brute force against a hand computation ---------------------------


def test_small_tree_top_probability_by_brute_force_equals_hand_value():
    model, report = read_mef(FILES / "small_tree.xml")
    assert validation_errors(model) == []
    # top = or(g1, g2, and(a, b)); with h-on true and h-off false:
    #   g1 = and(a, atleast 2 of (b, c, true)) = and(a, or(b, c))
    #   g2 = not(nor(xor(d, e), false)) = xor(d, e)
    #   and(a, b) implies g1, so top = g1 or g2, over disjoint sets of events.
    # Hand (NUREG-0492 ch. VI rules): P(g1) = 0.1 * (1 - 0.8 * 0.7) = 0.044,
    #   P(g2) = 0.5 * 0.8 + 0.2 * 0.5 = 0.5, P(top) = 1 - 0.956 * 0.5 = 0.522.
    assert brute_force_probability(model, "g1") == pytest.approx(0.044, abs=1e-12)
    assert brute_force_probability(model, "g2") == pytest.approx(0.5, abs=1e-12)
    assert brute_force_probability(model) == pytest.approx(0.522, abs=1e-12)
    # The xor became only gates of our own kinds, and the expansion is reported.
    assert {g.kind for g in model.gates} <= {"and", "or", "not", "atleast"}
    assert any("xor" in p.message for p in report)
    assert any("house event 'h-on' is true" in p.message for p in report)


def test_xor_of_three_is_odd_parity(tmp_path):
    source = tmp_path / "xor3.xml"
    source.write_text(
        '<?xml version="1.0"?>\n<opsa-mef><define-fault-tree name="x">\n'
        '<define-gate name="top"><xor><basic-event name="a"/><basic-event name="b"/>'
        '<basic-event name="c"/></xor></define-gate>\n'
        '<define-basic-event name="a"><float value="0.1"/></define-basic-event>\n'
        '<define-basic-event name="b"><float value="0.2"/></define-basic-event>\n'
        '<define-basic-event name="c"><float value="0.3"/></define-basic-event>\n'
        "</define-fault-tree></opsa-mef>\n"
    )
    model, _ = read_mef(source)
    p = {"a": 0.1, "b": 0.2, "c": 0.3}
    # Hand: P(an odd number of a, b, c fail), summed over the four odd states.
    odd = sum(
        math.prod(p[x] if s else 1 - p[x] for x, s in zip("abc", bits))
        for bits in itertools.product((0, 1), repeat=3)
        if sum(bits) % 2 == 1
    )
    assert brute_force_probability(model) == pytest.approx(odd, abs=1e-12)
    assert validation_errors(model) == []


# -- export -> import on models of our own ----------------------------------------


def hand_made_models() -> list[Model]:
    """Models using every gate kind, unlisted causes, rates, and ids MEF must rename."""
    checks = (Check("look", "Look at the lamp", 2.0, ("off", "on"), (Cause("g.or", 0.9),)),)
    first = Model(
        name="pump skid",
        top="top",
        gates=(
            Gate("top", "Skid fails", "or", ("g.or", "g-inh", "vote"), unlisted=0.01),
            Gate("g.or", "Motor side", "or", ("motor", "not-supply")),
            Gate("not-supply", "Supply not present", "not", ("supply",)),
            Gate("g-inh", "Seal leak when hot", "inhibit", ("seal",), condition="hot"),
            Gate("vote", "Two of three sensors", "atleast", ("s1", "s2", "s3"), k=2),
        ),
        basic_events=(
            BasicEvent("motor", "Motor burnt", exponential_probability(1e-5, 8760.0), rate=1e-5, exposure=8760.0),
            BasicEvent("supply", "Supply present", 0.9),
            BasicEvent("seal", "Seal worn", 0.05),
            BasicEvent("hot", "Running hot", 0.2),
            BasicEvent("s1", "Sensor 1", 0.01),
            BasicEvent("s2", "Sensor 2", exponential_probability(2e-4, 50.0), rate=2e-4, exposure=50.0),
            BasicEvent("s3", "Sensor 3", 0.03),
        ),
        checks=checks,
        probability_basis="mission-time",
        mission_time=8760.0,
    )
    second = Model(
        name="trivial--name-",
        top="g",
        gates=(Gate("g", "Only gate", "and", ("x.1",)),),
        basic_events=(BasicEvent("x.1", "Dotted id", 0.25),),
    )
    return [first, second]


@pytest.mark.parametrize("index", [0, 1])
def test_hand_made_model_export_then_import_is_unchanged(index, tmp_path):
    model = hand_made_models()[index]
    assert validation_errors(model) == []
    out = tmp_path / "model.xml"
    write_mef(model, out)
    text = out.read_text(encoding="utf-8")
    assert "Checks and symptoms are not part of an MEF fault tree" in text
    again, _ = read_mef(out)
    assert_same_fault_tree(model, again)
    assert validation_errors(again) == []
    if index == 0:
        assert "<system-mission-time/>" in text and again.mission_time == 8760.0
        # INHIBIT is written as plain MEF AND; the unlisted cause as a basic event.
        assert '<define-gate name="g-inh">' in text and "<inhibit" not in text
        assert 'name="top_unlisted"' in text
        # The probability of the top is the same before and after (brute force).
        assert brute_force_probability(again) == pytest.approx(brute_force_probability(model), abs=1e-12)


def test_export_names_are_legal_mef_identifiers(tmp_path):
    from lxml import etree

    out = tmp_path / "model.xml"
    write_mef(hand_made_models()[1], out)
    names = [e.get("name") for e in etree.parse(str(out)).iter() if e.get("name") and e.tag != "attribute"]
    # MEF 2.0d identifiers: no '.', no leading, trailing or doubled '-' (from memory of the schema).
    for name in names:
        assert "." not in name and "--" not in name and not name.startswith("-") and not name.endswith("-")


def _random_models():
    try:
        from model_strategies import models  # written alongside the engine's property tests
    except ImportError:
        return None
    return models


def test_generated_models_export_then_import_is_unchanged(tmp_path_factory):
    models = _random_models()
    if models is None:
        try:
            from randommodels import random_model
        except ImportError:
            pytest.skip("no model generator (tests/strategies.py or tests/randommodels.py) is present")
        for seed in range(25):
            model = random_model(seed)
            out = tmp_path_factory.mktemp("rt") / "m.xml"
            write_mef(model, out)
            assert_same_fault_tree(model, read_mef(out)[0])
        return
    from hypothesis import HealthCheck, given, settings

    @settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
    @given(models())
    def round_trip(model):
        out = tmp_path_factory.mktemp("rt") / "m.xml"
        write_mef(model, out)
        assert_same_fault_tree(model, read_mef(out)[0])

    round_trip()


# -- the command ------------------------------------------------------------------


@pytest.mark.parametrize(
    "name, line", [("malformed.xml", 7), ("unknown_expression.xml", 14)]
)
def test_import_command_on_bad_file_exits_2_with_file_and_line(name, line, tmp_path, capsys):
    source = FILES / name
    status = cli.main(["import-mef", str(source), "-o", str(tmp_path / "out.xml")])
    captured = capsys.readouterr()
    assert status == 2
    assert f"{source}:{line}:" in captured.err
    assert "Traceback" not in captured.err
    assert not (tmp_path / "out.xml").exists()


def test_import_command_writes_a_model_file(tmp_path, capsys):
    try:
        from troubleshoot.model.xmlfile import load_model
    except ImportError:
        pytest.skip("troubleshoot.model.xmlfile is not available in this installation")
    out = tmp_path / "small.xml"
    status = cli.main(["import-mef", str(FILES / "small_tree.xml"), "-o", str(out)])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    assert "house event 'h-on'" in captured.err  # the report reaches the user
    loaded = load_model(out)
    expected, _ = read_mef(FILES / "small_tree.xml")
    assert_same_fault_tree(expected, loaded)
