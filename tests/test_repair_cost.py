"""Repair order and expected cost of repair.

Sources: Kadane & Simon 1977 (with one fault, trying items in decreasing
p / cost minimises sum_j cost_j (1 - sum_(i<j) p_i)); Heckerman, Breese &
Rommelse 1995 (the expected cost of a repair sequence, each repair verified).
The references below are written out in the test: every order tried, and the
sum written plainly.
"""

from __future__ import annotations

import itertools
import math
import random

import numpy as np
import pytest

from randommodels import random_model
from troubleshoot.advice.diagnosis import Suspect, suspects
from troubleshoot.advice.repair import (
    _kadane_simon_ranked,
    kadane_simon_order,
    repair_cost,
    repair_order,
    repair_plan,
    repair_plan_of,
    verification_cost,
)
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.errors import ImpossibleFindings
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, Repair, Verification


def sequence_cost(p, cost, order) -> float:
    """sum_j cost_j * P(item j is reached), one fault among the items (Kadane & Simon 1977)."""
    remaining, total = 1.0, 0.0
    for i in order:
        total += remaining * cost[i]
        remaining -= p[i]
    return total


@pytest.mark.parametrize("seed", range(40))
def test_kadane_simon_order_is_the_best_of_every_order(seed):
    rng = random.Random(seed)
    n = rng.randint(2, 7)
    raw = [rng.random() for _ in range(n)]
    p = [x / sum(raw) for x in raw]
    cost = [rng.choice([1.0, 5.0, 20.0, 60.0, 480.0]) + rng.choice([0.0, 20.0]) for _ in range(n)]
    ids = [f"e{i}" for i in range(n)]
    best = min(sequence_cost(p, cost, order) for order in itertools.permutations(range(n)))
    ours = sequence_cost(p, cost, kadane_simon_order(ids, np.array(p), np.array(cost)))
    assert ours == pytest.approx(best, rel=1e-12, abs=1e-12)


def repair_only_model(rng: random.Random, n: int) -> Model:
    """One OR gate over n parts, each with a repair; a priced verification of the unit."""
    events = tuple(BasicEvent(f"e{i}", f"part {i}", rng.uniform(0.01, 0.2),
                              repair=Repair(f"replace part {i}", rng.choice([5.0, 15.0, 30.0, 120.0])))
                   for i in range(n))
    return Model("repairs", "top", (Gate("top", "unit fails", "or", tuple(e.id for e in events)),), events,
                 verification=Verification("run the unit", 20.0))


@pytest.mark.parametrize("seed", range(20))
def test_repair_order_counts_the_verification(seed):
    # With a verification of 20 after every repair, the order that minimises the
    # expected cost is by p / (c + 20), not by p / c (Kadane & Simon 1977).
    rng = random.Random(seed)
    model = repair_only_model(rng, rng.randint(2, 7))
    group = tuple(Suspect(e.id, e.label, rng.random()) for e in model.basic_events)
    total = sum(s.p for s in group)
    p = [s.p / total for s in group]
    full = [model.event_by_id[s.id].repair.cost + 20.0 for s in group]
    best = min(sequence_cost(p, full, order) for order in itertools.permutations(range(len(group))))
    index = {s.id: i for i, s in enumerate(group)}
    ours = [index[step.id] for step in repair_order(model, group)]
    assert sequence_cost(p, full, ours) == pytest.approx(best, rel=1e-12)


def test_two_parts_with_a_verification_cost():
    # Worked by hand: a (p 0.5, repair 10), b (p 0.4, repair 5), every repair then a 20 min run.
    # By p / c, b (0.08) before a (0.05); by p / (c + v), a (0.5/30 = 0.0167) before b (0.4/25 = 0.016).
    # One fault, p renormalised over a and b: a first costs 30 + (1 - 0.5/0.9) * 25 = 41.11,
    # b first 25 + (1 - 0.4/0.9) * 30 = 41.67.
    model = Model("two", "top", (Gate("top", "unit", "or", ("a", "b")),),
                  (BasicEvent("a", "a", 0.1, repair=Repair("fix a", 10.0)),
                   BasicEvent("b", "b", 0.1, repair=Repair("fix b", 5.0))),
                  verification=Verification("run it", 20.0))
    group = (Suspect("a", "a", 0.5), Suspect("b", "b", 0.4))
    assert [s.id for s in repair_order(model, group)] == ["a", "b"]
    plan = repair_plan(model, group, 0.0, None)
    assert plan.cost_of_stopping_after[-1] == pytest.approx(30 + (1 - 0.5 / 0.9) * 25)


def test_ties_within_rounding_go_by_id():
    ids = ["z", "a", "m"]
    p = np.array([0.3, 0.1 * 3, 0.2])
    cost = np.array([3.0, 3.0 * (1 + 1e-13), 4.0])  # z and a tie up to rounding
    assert kadane_simon_order(ids, p, cost) == [1, 0, 2]


def plain_plan_cost(model, ranked, group_min_p, escalation):
    """Expected cost of repairing in order and escalating after k repairs, written out plainly.

    Order (from the README and the repair module's documentation): the suspects with
    P >= group_min_p first, the others after, each part by p / (repair + verification),
    ties by id. One fault among the unrepaired suspects (p renormalised).
    """
    live = [s for s in ranked if not s.repaired and s.p > 1e-12]
    total = sum(s.p for s in live)

    def full(s):
        repair = model.event_by_id[s.id].repair
        verify = model.check_by_id[repair.verify].cost + (model.verification.cost if model.verification else 0.0) \
            if repair.verify else (model.verification.cost if model.verification else 0.0)
        return repair.cost + verify

    def key(s):
        return (-s.p / full(s) if full(s) > 0 else -np.inf, s.id)

    repairable = [s for s in live if s.id in model.event_by_id and model.event_by_id[s.id].repair]
    order = sorted([s for s in repairable if s.p >= group_min_p], key=key) + \
        sorted([s for s in repairable if s.p < group_min_p], key=key)
    out = []
    for k in range(len(order) + 1):
        remaining, cost = 1.0, 0.0
        for s in order[:k]:
            cost += remaining * full(s)
            remaining -= s.p / total
        remaining = max(0.0, remaining)
        out.append(cost + (escalation * remaining if escalation is not None else 0.0))
    return out


def allowed_findings(engine, checks, findings, repairs, rng) -> list:
    """``findings`` and a drawn outcome of each check, each kept only if the model allows it."""
    for check in checks:
        trial = findings + [Finding(check.id, rng.randint(0, 1), 0)]
        try:
            engine.propagate(trial, repairs)
        except ImpossibleFindings:
            continue
        findings = trial
    return findings


@pytest.mark.parametrize("seed", range(25))
def test_repair_plan_matches_the_plain_formula(seed):
    model = random_model(seed, n_events=7, n_gates=5, n_checks=4)
    rng = random.Random(seed)
    engine = Engine(model)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], rng.randint(0, 2)))
    findings = [Finding(model.top, 1, 0)]
    try:
        engine.propagate(findings, repairs)
    except ImpossibleFindings:
        pytest.skip("the drawn tree can never fail (the complaint is impossible)")
    findings = allowed_findings(engine, model.checks[:3], findings, repairs, rng)
    ranked = suspects(engine.propagate(findings, repairs))
    for escalation in (None, 250.0):
        plan = repair_plan(model, ranked, 0.05, escalation)
        plain = plain_plan_cost(model, ranked, 0.05, escalation)
        if escalation is None:
            assert plan.cost_of_stopping_after[-1] == pytest.approx(plain[-1], rel=1e-9, abs=1e-9)
        else:
            assert plan.cost_of_stopping_after == pytest.approx(plain, rel=1e-9, abs=1e-9)


# ---------------------------------------------------------------- the array paths against plain Python
#
# The repair order and the suspect list are computed in whole arrays (the
# policy asks for them on every outcome it weighs). Source for each check: the
# rule as the module documents it, written out below in plain Python (sort by
# the figure, group values tied to their group's first, ids inside a group),
# and the figures must agree exactly, not approximately.


def plain_kadane_simon(ids, p, cost, tolerance=1e-9):
    """Decreasing p / cost (infinite when free); a ratio within ``tolerance`` (relative) of its group's
    first joins the group; each group by id."""
    ratio = [p[i] / cost[i] if cost[i] > 0 else math.inf for i in range(len(ids))]

    def tied(a, b):
        if math.isinf(a) or math.isinf(b):
            return a == b
        return abs(a - b) <= tolerance * max(abs(a), abs(b))

    out, group = [], []
    for i in sorted(range(len(ids)), key=lambda i: (-ratio[i], ids[i])):
        if group and not tied(ratio[group[0]], ratio[i]):
            out += sorted(group, key=lambda j: ids[j])
            group = []
        group.append(i)
    return out + sorted(group, key=lambda j: ids[j])


@pytest.mark.parametrize("seed", range(60))
def test_array_order_is_the_plain_kadane_simon_order(seed):
    # Many exact ties, ties up to rounding, ratios just inside and just outside
    # the tolerance (chains of them) and free repairs.
    rng = random.Random(seed)
    n = rng.choice([rng.randint(0, 40), rng.randint(40, 400)])  # item by item, and in whole arrays
    base = [rng.choice([0.1, 0.2, 0.3, 0.05]) for _ in range(n)]
    nudge = [rng.choice([0.0, 0.0, 1e-13, 4e-10, 9e-10, 1.1e-9, 1.9e-9, 2.1e-9, 5e-9]) for _ in range(n)]
    p = np.array([b * (1 + d) for b, d in zip(base, nudge)])
    cost = np.array([rng.choice([0.0, 1.0, 2.0, 2.0, 3.0]) for _ in range(n)])
    ids = [f"{rng.choice('abcxyz')}{i}" for i in range(n)]
    id_rank = np.empty(n, dtype=np.int64)
    id_rank[sorted(range(n), key=ids.__getitem__)] = np.arange(n)
    want = plain_kadane_simon(ids, p.tolist(), cost.tolist())
    assert _kadane_simon_ranked(id_rank, p, cost).tolist() == want
    assert kadane_simon_order(ids, p, cost) == want


def plain_suspects(posterior):
    """Every hypothesis as a Suspect, sorted by P (values within 1e-12 relative or 1e-15 of their neighbour
    in a chain share a place) and then by id."""
    model = posterior.model
    listed = [Suspect(r, model.label_of(r), float(p), r in posterior.repairs,
                      r not in model.event_by_id and r.endswith("unlisted"))
              for r, p in zip(model.hypotheses, posterior.root_marginals())]
    by_p = sorted(listed, key=lambda s: -s.p)
    place, places = 0, {}
    for k, s in enumerate(by_p):
        if k and not (by_p[k - 1].p == s.p or abs(by_p[k - 1].p - s.p)
                      <= max(1e-12 * max(abs(by_p[k - 1].p), abs(s.p)), 1e-15)):
            place += 1
        places[s.id] = place
    return tuple(sorted(listed, key=lambda s: (places[s.id], s.id)))


def tied_model(seed: int) -> Model:
    """An OR gate over parts drawn from two priors and two costs (exact ties everywhere), with unlisted
    causes, a verify check on some repairs and parts without a repair."""
    rng = random.Random(seed)
    n = rng.randint(3, 12)
    checks = (Check("look", "look", 2.0, ("normal", "abnormal"), (Cause("e0", 1.0),)),)
    events = tuple(BasicEvent(f"e{i}", f"part {i}", rng.choice([0.01, 0.02]),
                              repair=None if rng.random() < 0.15 else
                              Repair(f"fix {i}", rng.choice([5.0, 10.0]),
                                     verify="look" if rng.random() < 0.3 else None))
                   for i in rng.sample(range(n), n))  # the model's order is not the id order
    half = len(events) // 2
    gates = (Gate("left", "left", "or", tuple(e.id for e in events[:half]) or (events[0].id,), unlisted=0.01),
             Gate("top", "unit", "or", ("left",) + tuple(e.id for e in events[half:]), unlisted=0.02))
    return Model("tied", "top", gates, events, checks=checks, verification=Verification("run it", 20.0))


@pytest.mark.parametrize("seed", range(30))
def test_array_suspects_and_plan_are_the_plain_ones(seed):
    rng = random.Random(seed)
    model = tied_model(seed) if seed % 2 else random_model(seed, n_events=8, n_gates=5, n_checks=4)
    engine = Engine(model)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], rng.randint(0, 2)))
    findings = allowed_findings(engine, model.checks, [Finding(model.top, 1, 0)], repairs, rng)
    try:
        posterior = engine.propagate(findings, repairs)
    except ImpossibleFindings:
        pytest.skip("the drawn tree can never fail (the complaint is impossible)")
    ranked = suspects(posterior)
    assert ranked == plain_suspects(posterior)
    for group_min_p in (0.0, 0.05, 0.3):
        live = [s for s in ranked if not s.repaired and s.p > 1e-12]
        repairable = [s for s in live if s.id in model.event_by_id and model.event_by_id[s.id].repair]
        want = []
        for part in ([s for s in repairable if s.p >= group_min_p], [s for s in repairable if s.p < group_min_p]):
            ids = [s.id for s in part]
            full = [repair_cost(model, s.id) + verification_cost(model, s.id) for s in part]
            want += [ids[i] for i in plain_kadane_simon(ids, [s.p for s in part], full)]
        for escalation in (None, 250.0):
            plan = repair_plan(model, ranked, group_min_p, escalation)
            assert plan.sequence == tuple(want)
            assert repair_plan_of(posterior, group_min_p, escalation) == plan
            plain = plain_plan_cost(model, ranked, group_min_p, escalation)
            if escalation is None:
                assert plan.cost_of_stopping_after[-1] == pytest.approx(plain[-1], rel=1e-9, abs=1e-9)
            else:
                assert plan.cost_of_stopping_after == pytest.approx(plain, rel=1e-9, abs=1e-9)
