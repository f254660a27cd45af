"""The exact optimal policy over the tool's protocol, checked by independent brute-force searches.

Reference: the protocol as troubleshoot.study.optimal documents it (checks and
repairs interleaved, checks again after a failed repair, a repair verified by
its own check and then the unit, the unit tried at any time after its
repair's own check read abnormal, escalation at its price), searched here two
ways (Bellman 1957):

- :func:`reference_optimum`, a plain recursion over every policy tree: no
  bound, every check (informative or not) at every step, histories merged only
  when identical; exact but hours long beyond 3 basic events and 2 checks;
- :func:`information_state_optimum`, the same recursion over information
  states (the repairs made, the checks done since the last one, and the
  posterior over the 2^n root states that every finding so far leaves), with
  an exact branch and bound: escalating bounds every state from above, and
  no case ends without escalating or a repair verified working, so the
  cheapest of those bounds it from below. Checks that cannot move the
  posterior are left out (they only cost). It is checked against the first
  on the small models, then run on models of 6 basic events and 4 checks.

Probabilities come from tests/bruteforce.py (gate values by enumeration,
written from FORMAT.md) and the noisy-OR written below from FORMAT.md, not
from the product's solver.
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
        if repaired and not any(t == "top" and e == len(repaired) for t, _, e in seen):
            # The repair's own check read abnormal: the unit may work all the same; try it.
            still = w * ref.value(model.top, repaired).astype(float)
            total = mass * top_cost
            if still.sum() > 0:
                total += best(still, repaired, done, seen | {("top", 1, len(repaired))})
            options.append(total)
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


def information_state_optimum(model: Model) -> tuple[float, int]:
    """min over every policy, by a memoised recursion over information states with an exact bound.

    Returns the least expected cost and the number of information states solved.

    A state is (repairs made, checks done since the last repair, posterior
    over the root states rounded to 12 decimals): two histories that leave
    the same posterior with the same repairs and the same checks open have
    the same future. ``search`` returns the exact value when it is below its
    budget, else a lower bound at least the budget, flagged as such (a flag,
    not a comparison: p * (budget / p) can round below the budget).
    """
    ref = Reference(model)
    checks = [c.id for c in model.checks]
    repairable = [e.id for e in model.basic_events if e.repair is not None]
    column = {r: ref.roots.index(r) for r in repairable}
    top_cost = model.verification.cost if model.verification else 0.0
    # The cheapest way a case can end by repairing r: r, its own check (if any) and the unit.
    ending = {r: model.event_by_id[r].repair.cost + ref.verify_cost(r) for r in repairable}
    abnormal_memo: dict = {}
    fails_memo: dict = {}

    def p_abnormal(check_id, repaired):
        key = (check_id, repaired)
        if key not in abnormal_memo:
            abnormal_memo[key] = ref.p_abnormal(check_id, repaired)
        return abnormal_memo[key]

    def fails(repaired):
        if repaired not in fails_memo:
            fails_memo[repaired] = ref.value(model.top, repaired).astype(float)
        return fails_memo[repaired]

    memo: dict = {}

    def value(w, repaired, done, budget):
        """(P(branch) x V(branch), exact) for unnormalised weights ``w``."""
        mass = w.sum()
        belief = w / mass
        key = (repaired, done, np.round(belief, 12).tobytes())
        per_unit = budget / mass
        known = memo.get(key)
        if known is None or not (known[1] or known[0] >= per_unit):
            known = memo[key] = search(belief, repaired, done, per_unit)
        return mass * known[0], known[1]

    def search(b, repaired, done, budget):
        p_failed = ref.states.T @ b
        live = [r for r in repairable if r not in repaired and p_failed[column[r]] > 1e-12]
        best = ref.escalation
        # "top" in ``done``: the unit was tried since the last repair; until it is, it may already work.
        in_doubt = bool(repaired) and "top" not in done
        lowest = min([best] + [ending[r] for r in live] + ([top_cost] if in_doubt else []))
        if lowest >= min(best, budget):
            return (best, True) if best <= budget else (lowest, False)
        support = b > 0
        courses = []
        if in_doubt:
            courses.append((top_cost, [(b * fails(repaired), repaired, done | {"top"})]))
        for r in live:
            now = repaired | {r}
            repair = model.event_by_id[r].repair
            if repair.verify is None:
                courses.append((repair.cost + top_cost, [(b * fails(now), now, frozenset({"top"}))]))
            else:
                p = p_abnormal(repair.verify, now)
                normal = b * (1.0 - p)
                cost = repair.cost + model.check_by_id[repair.verify].cost + normal.sum() * top_cost
                opened = frozenset({repair.verify})
                courses.append((cost, [(b * p, now, opened), (normal * fails(now), now, opened | {"top"})]))
        for t in checks:
            p = p_abnormal(t, repaired)
            if t in done or np.ptp(p[support]) <= 1e-15:
                continue  # done since the last repair, or the same in every state still possible
            courses.append((model.check_by_id[t].cost,
                            [(b * p, repaired, done | {t}), (b * (1.0 - p), repaired, done | {t})]))
        for cost, branches in courses:
            limit = min(best, budget)
            total, exact = cost, True
            for w, now, opened in branches:
                if total >= limit or not exact:
                    break
                if w.sum() > 0:
                    part, exact = value(w, now, opened, limit - total)
                    total += part
            if exact and total < limit:
                best = total
        return (best, True) if best <= budget else (budget, False)

    w = ref.prior * fails(frozenset())
    return value(w / w.sum(), frozenset(), frozenset(), np.inf)[0], len(memo)


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


@pytest.mark.parametrize("seed", range(6))
def test_the_information_state_search_equals_every_policy_tree(seed):
    # The faster reference is itself checked against the plain one where both run.
    model = _random_case(seed)
    ref = Reference(model)
    if (ref.prior * ref.value(model.top, ())).sum() <= 0:
        pytest.skip("the drawn tree can never fail")
    assert information_state_optimum(model)[0] == pytest.approx(reference_optimum(model), rel=1e-9,
                                                                 abs=TOLERANCE)


@pytest.mark.parametrize("escalation", [150.0, 40.0, None])
def test_the_information_state_search_equals_every_policy_tree_on_the_fan(escalation):
    small = small_model(escalation, n_checks=2, n_events=3)
    assert information_state_optimum(small)[0] == pytest.approx(reference_optimum(small), rel=1e-9,
                                                                abs=TOLERANCE)


def _random_six_four(seed: int, unlisted: bool) -> Model:
    """random_model with 6 basic events and 4 checks; ``unlisted``: causes outside the model under the top gate."""
    rng = random.Random(seed)
    model = random_model(seed, n_events=6, n_gates=rng.randint(2, 4), n_checks=4)
    if unlisted:
        gates = tuple(dataclasses.replace(g, unlisted=0.05) if g.id == model.top else g for g in model.gates)
        model = dataclasses.replace(model, gates=gates)
    dearest = max(e.repair.cost for e in model.basic_events)
    return dataclasses.replace(model, escalation=Escalation("call the specialist", 3.0 * dearest),
                               verification=Verification("run the unit", 5.0))


#: (seed, unlisted causes) of random models whose trees can fail and take more than a few steps to
#: solve; each takes the two searches 1 to 20 s on a busy 2-core machine (other seeds take minutes).
#: Seed 1 is where a cut branch's bound once passed for its value (the optimum came out 55.12, the
#: true one is 56.23).
SIX_FOUR_CASES = ((1, False), (3, False), (23, False), (20, True), (27, True))


@pytest.mark.parametrize("seed, unlisted", SIX_FOUR_CASES)
def test_optimal_equals_the_information_state_search_at_6_events_and_4_checks(seed, unlisted):
    # Issue 11: up to 6 basic events and 4 checks, causes outside the model included.
    model = _random_six_four(seed, unlisted)
    assert len(model.basic_events) == 6 and len(model.checks) == 4
    assert (len(model.hypotheses) > 6) == unlisted
    expected, states = information_state_optimum(model)
    assert states > 10  # a real search, not a model ended in its first steps
    assert solve(model).expected_cost == pytest.approx(expected, rel=1e-9, abs=TOLERANCE)


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
