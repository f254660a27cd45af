"""Scripted sessions on the demo models (scenarios/*.json) isolate the injected fault.

Each scenario names a demo model, the true fault(s), the outcome a technician
would see for every check after each number of repairs, and what must
happen: the suspect isolated (or first in the repair order) before each
repair, the repairs made, and the final status. The runner answers whatever
check the session asks for from the script, repairs what the session
isolates, and verifies as the script says. The scripted outcomes are checked
against the fault tree itself: a check reads abnormal exactly when one of its
causes has occurred with the true faults (and the repairs made), evaluated
by tests/bruteforce.evaluate, independent of the engine.

A scenario with ``"escalation": false`` runs its demo without the model's
escalation (the default of format 1.0 applies: escalation is never chosen
by cost): it scripts a technician who repairs where, with the escalation's
price, the tool would hand the unit over; its description says so.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pytest

import bruteforce as bf
from troubleshoot.session import (
    AMBIGUITY,
    AWAITING_VERIFICATION,
    DIAGNOSING,
    ISOLATED,
    Session,
    settings_for,
)

SCENARIO_DIR = Path(__file__).resolve().parents[1] / "scenarios"
SCENARIOS = sorted(SCENARIO_DIR.glob("*.json"))
MAX_STEPS = 200


def load_demo(name: str):
    from troubleshoot.model.demos import demo_path
    from troubleshoot.model.xmlfile import load_model

    path = demo_path(name)
    if not path.is_file():
        pytest.fail(f"scenario needs the demo model {name!r}, which is missing at {path}")
    # The scripts walk the repair order to the fault: the demos' escalation price
    # is left out, so the 1.0 rules apply (escalation never chosen by cost).
    return dataclasses.replace(load_model(path), escalation=None)


def scenario_model(doc: dict):
    """The demo a scenario runs on; without its escalation when the scenario says ``"escalation": false``."""
    model = load_demo(doc["model"])
    if doc.get("escalation", True) is False:
        model = dataclasses.replace(model, escalation=None)
    return model


def noise_free_outcomes(model, faults, repairs) -> dict[str, str]:
    """What each check reads with these faults when every cause shows its most likely
    reading (bruteforce.evaluate and bruteforce.noise_free_outcome)."""
    roots = list(model.hypotheses)
    states = np.array([[r in faults for r in roots]])
    value = bf.evaluate(model, states, roots, set(repairs))
    out = {}
    for check in model.checks + model.symptoms:
        out[check.id] = check.outcomes[bf.noise_free_outcome(check, lambda t: bool(value[t][0]))]
    out[model.top] = bool(value[model.top][0])
    return out


def run_scenario(doc: dict) -> tuple[Session, list, list]:
    """Drive a session from a scenario script; returns it, the isolated suspects and the repairs."""
    model = scenario_model(doc)
    settings = settings_for(model, **doc.get("settings", {}))
    session = Session(model, settings)
    isolated, repairs = [], []
    verifications = list(doc.get("verifications", []))
    for _ in range(MAX_STEPS):
        state = session.state
        if state.status == DIAGNOSING:
            check = state.next_check.check
            answers = doc["answers"][session.epoch]
            assert check in answers, f"the script has no outcome for {check!r} after {session.epoch} repair(s)"
            session.record_finding(check, answers[check])
        elif state.status in (ISOLATED, AMBIGUITY):
            target = state.isolated.id if state.isolated else state.repair_order[0].id
            isolated.append(state.isolated.id if state.isolated else None)
            repairs.append(target)
            session.record_repair(target)
        elif state.status == AWAITING_VERIFICATION:
            assert verifications, "the script has no verification outcome left"
            session.record_verification(verifications.pop(0))
        else:
            break
    return session, isolated, repairs


def test_there_are_scenarios_for_each_demo():
    names = {json.loads(p.read_text(encoding="utf-8"))["model"] for p in SCENARIOS}
    assert {"rooftop", "booster"} <= names


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_scenario_isolates_the_injected_fault(path):
    doc = json.loads(path.read_text(encoding="utf-8"))
    model = load_demo(doc["model"])
    faults = set(doc["true_faults"])
    assert faults <= set(model.hypotheses)
    session, isolated, repairs = run_scenario(doc)
    expect = doc["expect"]
    # The fault is isolated, or heads the repair order the tool proposes when
    # no further check is expected to pay for itself.
    proposed = [iso or rep for iso, rep in zip(isolated, repairs)]
    assert proposed == expect["isolated"]
    assert repairs == expect["repairs"]
    assert session.status == expect["final_status"] == "confirmed"
    # The last repair is one of the injected faults: the one that was isolated.
    assert repairs[-1] in faults
    # The script is what the equipment would show: every answer used matches the fault tree.
    for epoch, answers in enumerate(doc["answers"]):
        truth = noise_free_outcomes(model, faults, repairs[:epoch])
        for check, outcome in answers.items():
            assert truth[check] == outcome, f"{path.name}: {check} after {epoch} repair(s)"
    # Each verification matches the top event (or the verify check) after the repair.
    for view in session.state.findings:
        if view.kind == "verification":
            truth = noise_free_outcomes(model, faults, repairs[: view.epoch])
            if view.target == model.top:
                assert view.outcome_index == int(truth[model.top])
            else:
                assert view.outcome == truth[view.target]
