"""The exact optimal policy over the tool's protocol, checked by an independent brute-force search.

Reference: the protocol as troubleshoot.study.optimal documents it (checks and
repairs interleaved, checks again after a failed repair, a repair verified by
its own check and then the unit, escalation at its price), searched here by a
plain recursion over every policy tree (Bellman 1957): no memo, no bound,
every check (informative or not) at every step. Probabilities come from
tests/bruteforce.py (gate values by enumeration, written from FORMAT.md) and
the noisy-OR written below from FORMAT.md, not from the product's solver.
"""

from __future__ import annotations

import dataclasses
import random

import numpy as np
import pytest

import bruteforce
from randommodels import random_model
from troubleshoot.model import BasicEvent, Cause, Check, Escalation, Gate, Model, Repair, Verification
from troubleshoot.session import settings_for
from troubleshoot.engine.inference import Engine
from troubleshoot.study.optimal import OptimalTooLarge, expected_cost, solve
from troubleshoot.study.strategies import STRATEGY_NAMES, make_strategy, protocol_actor
from troubleshoot.study.synthetic import synthetic_model

TOLERANCE = 1e-9  # exact paths (DESIGN.md)


def small_model(escalation: float | None = 150.0, n_checks: int = 3, n_events: int = 4) -> Model:
    """Four basic events, two gates, three checks; probabilities and costs illustrative."""
    events = (
        BasicEvent("e1", "fuse blown", 0.10, repair=Repair("replace fuse", 10.0, verify="fuse")),
        BasicEvent("e2", "relay failed", 0.05, repair=Repair("replace relay", 30.0)),
        BasicEvent("e3", "motor failed", 0.02, repair=Repair("replace motor", 60.0)),
        BasicEvent("e4", "belt broken", 0.04, repair=Repair("replace belt", 8.0)),
    )[:n_events]
    gates = (
        Gate("power", "no power to the motor", "or", ("e1", "e2")),
        Gate("top", "the fan does not turn", "or", ("power",) + tuple(e.id for e in events[2:]), unlisted=0.01),
    )
    checks = (
        Check("volts", "voltage at the motor", 3.0, ("present", "absent"), (Cause("power", 0.95),), 0.02),
        Check("fuse", "fuse continuity", 5.0, ("good", "open"), (Cause("e1", 0.99),), 0.01),
        Check("belt", "belt inspection", 2.0, ("intact", "broken"), (Cause("e4", 0.9), Cause("e3", 0.1)), 0.05),
    )[:n_checks]
    return Model(name="fan", top="top", gates=gates, basic_events=events, checks=checks,
                 verification=Verification("run the fan", 4.0),
                 escalation=None if escalation is None else Escalation("call the service engineer", escalation))


# ------------------------------------------------------------ the brute-force reference


class Reference:
    """Every joint root state with its prior; gate values by tests/bruteforce.py."""

    def __init__(self, model: Model):
        self.model = model
        self.roots, self.states, self.prior = bruteforce.root_states(model)
        self.values = {}
        # FORMAT.md: escalation at its price; a model without one is charged its dearest
        # repair with that repair's verification (the README's rule for studies).
        if model.escalation is not None:
            self.escalation = model.escalation.cost
        else:
            self.escalation = max(e.repair.cost + self.verify_cost(e.id) for e in model.basic_events if e.repair)

    def verify_cost(self, root):
        repair = self.model.event_by_id[root].repair
        top = self.model.verification.cost if self.model.verification else 0.0
        return (self.model.check_by_id[repair.verify].cost + top) if repair.verify else top

    def value(self, node, repaired):
        key = frozenset(repaired)
        if key not in self.values:
            self.values[key] = bruteforce.evaluate(self.model, self.states, self.roots, set(key))
        return self.values[key][node].astype(bool)

    def p_abnormal(self, check_id, repaired):
        # Noisy-OR with a leak (FORMAT.md: P(normal) = (1 - false alarm) * prod (1 - detection)).
        check = self.model.check_by_id[check_id]
        p_normal = np.full(len(self.states), 1.0 - check.false_alarm)
        for cause in check.causes:
            p_normal = p_normal * np.where(self.value(cause.target, repaired), 1.0 - cause.detection, 1.0)
        return 1.0 - p_normal


def reference_optimum(model: Model) -> float:
    """min over every policy tree of the protocol, by plain recursion over histories (no pruning).

    Histories that saw the same findings at the same epochs after the same
    repairs in the same order are one node (the order of checks within an
    epoch does not change what is known); nothing else is merged.
    """
    ref = Reference(model)
    checks = [c.id for c in model.checks]
    repairable = [e.id for e in model.basic_events if e.repair is not None]
    top_cost = model.verification.cost if model.verification else 0.0

    memo = {}

    def best(w, repaired, done, seen=frozenset()):
        """Least expected cost from weights w (P(state, history)), returned times P(history)."""
        key = (repaired, seen)
        if key not in memo:
            memo[key] = search(w, repaired, done, seen)
        return memo[key]

    def search(w, repaired, done, seen):
        mass = w.sum()
        options = [mass * ref.escalation]
        for t in checks:
            if t in done:
                continue
            p = ref.p_abnormal(t, repaired)
            total = mass * model.check_by_id[t].cost
            for o, wo in ((1, w * p), (0, w * (1.0 - p))):
                if wo.sum() > 0:
                    total += best(wo, repaired, done | {t}, seen | {(t, o, len(repaired))})
            options.append(total)
        p_failed = w @ ref.states / mass
        for r in repairable:
            if r in repaired or p_failed[ref.roots.index(r)] <= 1e-12:
                continue
            now = repaired + (r,)
            fails = ref.value(model.top, now).astype(float)
            repair = model.event_by_id[r].repair
            total = mass * repair.cost
            if repair.verify is None:
                total += mass * top_cost
                still = w * fails
                if still.sum() > 0:
                    total += best(still, now, frozenset(), seen | {("top", 1, len(now))})
            else:
                p = ref.p_abnormal(repair.verify, now)
                total += mass * model.check_by_id[repair.verify].cost
                abnormal, normal = w * p, w * (1.0 - p)
                if abnormal.sum() > 0:
                    total += best(abnormal, now, frozenset({repair.verify}), seen | {(repair.verify, 1, len(now))})
                total += normal.sum() * top_cost
                still = normal * fails
                if still.sum() > 0:
                    total += best(still, now, frozenset({repair.verify}),
                                  seen | {(repair.verify, 0, len(now)), ("top", 1, len(now))})
            options.append(total)
        return min(options)

    w = ref.prior * ref.value(model.top, ()).astype(float)
    return best(w / w.sum(), (), frozenset())


# ------------------------------------------------------------------------ tests


@pytest.mark.parametrize("escalation", [150.0, 40.0, None])
def test_optimal_equals_brute_force_over_every_policy_tree(escalation):
    model = small_model(escalation, n_checks=2, n_events=3)
    assert solve(model).expected_cost == pytest.approx(reference_optimum(model), rel=1e-9, abs=TOLERANCE)


def _random_case(seed: int) -> Model:
    # Small enough for the reference, which merges nothing but identical histories:
    # a model of 6 basic events and 4 noisy checks, checks redone after every repair,
    # takes it hours (the product's solver prunes; the reference must not).
    rng = random.Random(seed)
    model = random_model(seed, n_events=3, n_gates=rng.randint(1, 2), n_checks=2)
    # Escalation priced as practice would: at least the dearest repair.
    dearest = max(e.repair.cost for e in model.basic_events)
    return dataclasses.replace(model, escalation=Escalation("call the specialist", 3.0 * dearest),
                               verification=Verification("run the unit", 5.0))


@pytest.mark.parametrize("seed", range(6))
def test_optimal_equals_brute_force_on_random_models(seed):
    # Up to 6 basic events and 4 checks (issue 11), every gate kind, unlisted causes.
    model = _random_case(seed)
    ref = Reference(model)
    if (ref.prior * ref.value(model.top, ())).sum() <= 0:
        pytest.skip("the drawn tree can never fail")
    assert solve(model).expected_cost == pytest.approx(reference_optimum(model), rel=1e-9, abs=TOLERANCE)


def test_the_optimal_table_followed_achieves_its_cost():
    model = small_model(n_checks=2)
    solution = solve(model)
    strategy = make_strategy("optimal", solution)
    act = protocol_actor(model, strategy, settings_for(model), Engine(model))
    assert expected_cost(model, act) == pytest.approx(solution.expected_cost, abs=TOLERANCE)


@pytest.mark.parametrize("name", [n for n in STRATEGY_NAMES if n != "optimal"])
def test_every_strategy_costs_at_least_the_optimum(name):
    model = small_model(n_checks=2)
    act = protocol_actor(model, make_strategy(name), settings_for(model), Engine(model))
    assert solve(model).expected_cost <= expected_cost(model, act) + TOLERANCE


def test_too_large_model_is_refused_with_a_message():
    model = synthetic_model(20, 1)
    with pytest.raises(OptimalTooLarge, match="root events"):
        solve(model)
