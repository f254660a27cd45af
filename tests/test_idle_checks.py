"""A check that reads only parts which cannot matter now is left out of the decision.

References: the probabilities the rule rests on (P(a part has failed | e),
P(repairing it alone puts the unit right | e), P(a cause outside the model
| e) after each outcome) are recomputed here by brute-force enumeration over
every root state (tests/bruteforce.py, written from faulttrees/FORMAT.md),
not through the engine. The gap it closes was found against the exact
optimum (``study/optimal.solve``, checked in tests/test_optimal.py); see
tests/test_optimum_study.py for the model it was found on.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import bruteforce
from troubleshoot.advice import policy
from troubleshoot.advice.policy import (
    IDLE_FIX_SHARE,
    IDLE_OUTSIDE_MOVE,
    Action,
    _KeptRows,
    decide,
    reads_only_idle_parts,
    settings_for,
)
from troubleshoot.advice.ranking import rank
from troubleshoot.engine.inference import Finding
from troubleshoot.model import BasicEvent, Cause, Check, Escalation, Gate, Model, Repair, Verification, unlisted_id
from troubleshoot.session import Session


def voted_unit() -> Model:
    """A single point of failure beside three pumps of which two must run (illustrative figures).

    One pump down does not stop the unit: the other two carry it. So once the
    pump group is tested normal, a failed pump is no cause of the complaint.
    """
    events = (BasicEvent("controller", "controller failed", 0.05, repair=Repair("replace the controller", 60.0)),
              BasicEvent("pump_a", "pump A worn", 0.08, repair=Repair("rebuild pump A", 40.0)),
              BasicEvent("pump_b", "pump B worn", 0.08, repair=Repair("rebuild pump B", 40.0)),
              BasicEvent("pump_c", "pump C worn", 0.08, repair=Repair("rebuild pump C", 40.0)))
    gates = (Gate("top", "no pressure", "or", ("controller", "pumps"), unlisted=0.02),
             Gate("pumps", "fewer than two pumps run", "atleast", ("pump_a", "pump_b", "pump_c"), k=2))
    checks = (Check("pump_group_test", "run the pump group on test", 15.0, ("normal", "low"),
                    (Cause("pumps", 0.99),)),
              Check("inspect_pump_a", "inspect pump A", 5.0, ("good", "worn"), (Cause("pump_a", 0.95),)),
              Check("controller_display", "controller display", 2.0, ("normal", "fault code"),
                    (Cause("controller", 0.9),)))
    return Model("unit", "top", gates, events, checks=checks, verification=Verification("run it", 10.0),
                 escalation=Escalation("call the pump contractor", 400.0))


def _session(findings: list[tuple[str, int]]) -> Session:
    model = voted_unit()
    session = Session(model)
    for check_id, outcome in findings:
        session.record_finding(check_id, model.check_by_id[check_id].outcomes[outcome])
    return session


def _reference(model: Model, findings, part: str, check_id: str) -> tuple[float, float]:
    """By enumeration: P(repairing ``part`` alone puts the unit right | e) / P(part failed | e), and how far
    the check's outcomes move P(outside the model | e) on average."""
    now = bruteforce.posterior(model, findings)
    p_part = now["marginals"][part]
    after_repair = bruteforce.evaluate(model, now["states"], now["roots"], {part})
    p_fix = float(now["joint"][~after_repair[model.top]].sum())
    outside = unlisted_id(model.top)
    moved = 0.0
    for outcome in range(len(model.check_by_id[check_id].outcomes)):
        later = bruteforce.posterior(model, tuple(findings) + (Finding(check_id, outcome, 0),))
        if later["marginals"] is None:
            continue
        p_outcome = math.exp(later["log_p"] - now["log_p"])
        moved += p_outcome * abs(later["marginals"][outside] - now["marginals"][outside])
    return p_fix / p_part, moved


def test_a_pump_of_a_group_tested_normal_cannot_matter():
    session = _session([("pump_group_test", 0)])
    posterior = session.view.posterior
    findings = tuple(posterior.findings)
    share, moved = _reference(session.model, findings, "pump_a", "inspect_pump_a")
    # The premise, by enumeration: pump A may well be worn, but rebuilding it alone
    # would almost never put the unit right, and reading it says nothing of the causes
    # outside the model.
    assert bruteforce.posterior(session.model, findings)["marginals"]["pump_a"] > 0.05
    assert share < IDLE_FIX_SHARE and moved < IDLE_OUTSIDE_MOVE
    row = rank(posterior, ("inspect_pump_a",)).best
    assert reads_only_idle_parts(session.engine, posterior, row)


def test_a_pump_matters_while_the_group_is_in_question():
    session = _session([])
    posterior = session.view.posterior
    share, _ = _reference(session.model, tuple(posterior.findings), "pump_a", "inspect_pump_a")
    assert share >= IDLE_FIX_SHARE  # by enumeration: with the group in doubt, rebuilding A may fix it
    row = rank(posterior, ("inspect_pump_a",)).best
    assert not reads_only_idle_parts(session.engine, posterior, row)


@pytest.mark.parametrize("check_id", ["controller_display", "pump_group_test"])
def test_a_single_point_of_failure_or_a_gate_always_matters(check_id):
    # The controller alone stops the unit; the group test reads a gate, not a part.
    session = _session([("pump_group_test", 0)] if check_id != "pump_group_test" else [])
    posterior = session.view.posterior
    row = rank(posterior, (check_id,)).best
    assert not reads_only_idle_parts(session.engine, posterior, row)


def test_when_only_idle_checks_are_left_the_tool_repairs_and_says_why():
    session = _session([("pump_group_test", 0)])
    posterior = session.view.posterior
    decision = decide(session.engine, posterior, settings_for(session.model), ("inspect_pump_a",))
    assert rank(posterior, ("inspect_pump_a",)).best.bits >= settings_for(session.model).min_bits  # informative
    assert decision.action == Action.REPAIR and decision.target == "controller"
    assert decision.reason.kind == "no-check-matters"
    assert "parts whose repair would not put the unit right now" in decision.reason.text
    assert all(a.action != Action.CHECK for a in decision.alternatives)


@pytest.mark.parametrize("findings", [[], [("pump_group_test", 0)], [("inspect_pump_a", 1)]])
def test_the_rule_only_removes_checks_that_cannot_matter(findings, monkeypatch):
    # Where no check is idle, or the idle one would not be advised anyway, the decision is
    # the one taken with the rule switched off, figure for figure.
    session = _session(findings)
    posterior, model = session.view.posterior, session.model
    candidates = tuple(c.id for c in model.checks if c.id not in dict(findings))
    with_rule = decide(session.engine, posterior, settings_for(model), candidates)
    monkeypatch.setattr(policy, "reads_only_idle_parts", lambda *args: False)
    without = decide(session.engine, posterior, settings_for(model), candidates)
    assert (with_rule.action, with_rule.target, with_rule.alternatives) == (without.action, without.target,
                                                                            without.alternatives)
    assert np.isfinite(with_rule.expected_cost)


def test_checks_are_tested_only_as_far_as_the_decision_reads_them():
    # A large model pays for the rule only on the checks a decision looks at.
    tested = []

    def keep(row):
        tested.append(row)
        return row % 2 == 0

    rows = _KeptRows(tuple(range(100)), keep)
    assert rows[:2] == (0, 2) and tested == [0, 1, 2]
    assert rows[0] == 0 and bool(rows) and len(tested) == 3
    assert list(rows)[:3] == [0, 2, 4]
    assert len(rows) == 50 and len(tested) == 100 and rows[-1] == 98
