"""The exact optimal policy and exact expected costs, checked by brute force.

Reference: every probability here comes from tests/bruteforce.py (enumeration
of every root state, independent of the engine and of troubleshoot.study.optimal),
and the optimum from a plain recursion over every policy, without memoisation
or pruning (Bellman 1957).
"""

from __future__ import annotations

import math
from dataclasses import replace
from types import SimpleNamespace

import numpy as np
import pytest

import bruteforce
from randommodels import random_model
from troubleshoot.advice.diagnosis import Suspect, is_unlisted
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, Repair, Verification
from troubleshoot.study.optimal import Enumeration, OptimalTooLarge, expected_cost, repair_phase_cost, solve
from troubleshoot.session import settings_for, verification_for
from troubleshoot.advice.repair import next_repair, repair_cost
from troubleshoot.study.strategies import STRATEGY_NAMES, make_strategy
from troubleshoot.study.synthetic import synthetic_model

TOLERANCE = 1e-9  # exact paths (DESIGN.md)


def small_model() -> Model:
    """Four basic events, two gates, three checks; probabilities and costs illustrative."""
    events = (
        BasicEvent("e1", "fuse blown", 0.10, repair=Repair("replace fuse", 10.0)),
        BasicEvent("e2", "relay failed", 0.05, repair=Repair("replace relay", 30.0)),
        BasicEvent("e3", "motor failed", 0.02, repair=Repair("replace motor", 60.0)),
        BasicEvent("e4", "belt broken", 0.04, repair=Repair("replace belt", 8.0)),
    )
    gates = (
        Gate("power", "no power to the motor", "or", ("e1", "e2")),
        Gate("top", "the fan does not turn", "or", ("power", "e3", "e4")),
    )
    checks = (
        Check("volts", "voltage at the motor", 3.0, ("present", "absent"), (Cause("power", 0.95),), 0.02),
        Check("fuse", "fuse continuity", 5.0, ("good", "open"), (Cause("e1", 0.99),), 0.01),
        Check("belt", "belt inspection", 2.0, ("intact", "broken"), (Cause("e4", 0.9), Cause("e3", 0.1)), 0.05),
    )
    return Model(name="fan", top="top", gates=gates, basic_events=events, checks=checks,
                 verification=Verification("run the fan", 4.0))


def graded_model() -> Model:
    """The fan with its voltage read as present / low / absent (format 1.1, noisy-MAX)."""
    model = small_model()
    volts = Check("volts", "voltage at the motor", 3.0, ("present", "low", "absent"),
                  (Cause("power", shows=(("absent", 0.9), ("low", 0.05))), Cause("e3", shows=(("low", 0.6),))),
                  leak=(("low", 0.03), ("absent", 0.01)))
    return replace(model, checks=(volts,) + model.checks[1:])


# ------------------------------------------------------------ brute-force references


def _outcome_weights(model, findings, check_id, outcome):
    """P(findings, check = outcome) by enumeration (bruteforce.posterior)."""
    post = bruteforce.posterior(model, list(findings) + [SimpleNamespace(target=check_id, outcome=outcome, epoch=0)])
    return 0.0 if post["joint"] is None else math.exp(post["log_p"])


def _reference_repair_cost(model, findings, settings) -> float:
    """The repair phase's expected cost by enumeration over every repair step, from bruteforce alone."""
    findings = list(findings)
    repairs: list[str] = []
    reach = 1.0
    total = 0.0
    base = math.exp(bruteforce.posterior(model, findings)["log_p"])
    for _ in range(len(model.hypotheses)):
        post = bruteforce.posterior(model, findings, tuple(repairs))
        ranked = sorted((Suspect(r, model.label_of(r), post["marginals"][r], r in repairs, is_unlisted(model, r))
                         for r in model.hypotheses), key=lambda s: (-s.p, s.id))
        root = next_repair(model, tuple(ranked), settings.group_min_p)
        if root is None:
            break
        total += reach * (repair_cost(model, root) + verification_for(model, root).cost)
        repairs.append(root)
        # The top event verification fails: an exact observation of the top after the repairs.
        findings.append(SimpleNamespace(target=model.top, outcome=1, epoch=len(repairs)))
        still = bruteforce.posterior(model, findings, tuple(repairs))
        if still["joint"] is None:
            break
        reach = math.exp(still["log_p"]) / base
    return total


def _complaint(model):
    return [SimpleNamespace(target=model.top, outcome=1, epoch=0)]


def _reference_optimum(model, settings, findings=None, done=frozenset()) -> float:
    """min over every policy, by plain recursion over every check and outcome (no memo, no pruning)."""
    findings = findings if findings is not None else _complaint(model)
    best = _reference_repair_cost(model, findings, settings)
    p_e = math.exp(bruteforce.posterior(model, findings)["log_p"])
    for check in model.checks:
        if check.id in done:
            continue
        value = check.cost
        for o in range(len(check.outcomes)):
            p = _outcome_weights(model, findings, check.id, o) / p_e
            if p > 0:
                f = findings + [SimpleNamespace(target=check.id, outcome=o, epoch=0)]
                value += p * _reference_optimum(model, settings, f, done | {check.id})
        best = min(best, value)
    return best


def reference_strategy_cost(model, strategy, settings) -> float:
    """Exact expected cost of a strategy: recursion over outcomes, probabilities by bruteforce.

    The strategy's choices are read from a real Session driven down each branch.
    """
    from troubleshoot.session import Session

    session = Session(model, settings)

    def value(findings) -> float:
        p_e = math.exp(bruteforce.posterior(model, findings)["log_p"])
        total = 0.0
        for prob, action in strategy.choices(session.view):
            if action is None:
                total += prob * _reference_repair_cost(model, findings, settings)
                continue
            branch = model.check_by_id[action].cost
            for o in range(len(model.check_by_id[action].outcomes)):
                p = _outcome_weights(model, findings, action, o) / p_e
                if p > 0:
                    session.record_finding(action, o)
                    branch += p * value(findings + [SimpleNamespace(target=action, outcome=o, epoch=0)])
                    session.undo()
            total += prob * branch
        return total

    return value(_complaint(model))


# ------------------------------------------------------------------------ tests


def test_repair_phase_cost_matches_bruteforce():
    model = small_model()
    settings = settings_for(model)
    enum = Enumeration(model)
    # Reference: _reference_repair_cost, enumeration with repairs as interventions (bruteforce.py).
    for findings in ([], [("volts", 1)], [("volts", 0), ("belt", 0)], [("fuse", 1)]):
        w = enum.complaint()
        for t, o in findings:
            w = w * enum.likelihood(t, o)
        ref = _reference_repair_cost(model, _complaint(model) + [SimpleNamespace(target=t, outcome=o, epoch=0)
                                                                for t, o in findings], settings)
        assert repair_phase_cost(enum, w, settings) == pytest.approx(ref, abs=TOLERANCE)


@pytest.mark.parametrize("make", [small_model, graded_model])
def test_optimal_equals_exhaustive_search_over_policies(make):
    model = make()
    settings = settings_for(model)
    solution = solve(model, settings)
    # Reference: plain recursion over every policy (Bellman 1957) on bruteforce probabilities.
    assert solution.expected_cost == pytest.approx(_reference_optimum(model, settings), abs=TOLERANCE)
    # The policy table, followed, achieves that cost.
    policy_cost = expected_cost(model, make_strategy("optimal", solution.policy), settings)
    assert policy_cost == pytest.approx(solution.expected_cost, abs=TOLERANCE)


@pytest.mark.parametrize("make", [small_model, graded_model])
@pytest.mark.parametrize("name", [n for n in STRATEGY_NAMES if n != "optimal"])
def test_strategy_exact_cost_matches_bruteforce_and_is_no_better_than_optimal(name, make):
    model = make()
    settings = settings_for(model)
    strategy = make_strategy(name)
    exact = expected_cost(model, strategy, settings)
    # Reference: recursion over outcomes with bruteforce probabilities.
    assert exact == pytest.approx(reference_strategy_cost(model, strategy, settings), abs=TOLERANCE)
    assert solve(model, settings).expected_cost <= exact + TOLERANCE


@pytest.mark.parametrize("seed", range(6))
def test_optimal_is_a_lower_bound_on_generated_models(seed):
    # Models from troubleshoot.study.synthetic and tests/randommodels (every gate kind, unlisted causes).
    models = [synthetic_model(6 + seed % 3, seed), random_model(seed, n_events=5, n_gates=3, n_checks=3)]
    for model in models:
        settings = settings_for(model)
        try:
            best = solve(model, settings).expected_cost
        except OptimalTooLarge:
            continue
        if not np.isfinite(best):
            continue
        for name in [n for n in STRATEGY_NAMES if n != "optimal"]:
            try:
                cost = expected_cost(model, make_strategy(name), settings)
            except Exception as exc:  # a random model whose complaint is impossible
                pytest.skip(f"{model.name}: {exc}")
            assert best <= cost + TOLERANCE, (model.name, name)


def test_too_large_model_is_refused_with_a_message():
    model = synthetic_model(20, 1)
    with pytest.raises(OptimalTooLarge, match="root events"):
        solve(model)
