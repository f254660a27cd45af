"""Ranking and diagnosis figures against brute-force enumeration (tests/bruteforce.py).

Sources: the mutual information I(F;T|e) = H(T|e) - H(T|F,e) and the chain
rule H(F|e) - sum_t P(t|e) H(F|e,t) (Cover & Thomas, Elements of Information
Theory, 2006, eqs. 2.39-2.45), evaluated by enumerating every root state
(bruteforce.py), independently of the join tree.
"""

from __future__ import annotations

import math
import random

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import bruteforce as bf
from randommodels import random_model
from troubleshoot.advice.diagnosis import (
    Suspect,
    entropy_bits,
    most_probable_explanation,
    suspects,
)
from troubleshoot.advice.repair import repair_order
from troubleshoot.errors import ImpossibleFindings
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, Repair
from troubleshoot.advice.ranking import outcome_information, rank, score_of

TOL = 1e-9  # exact paths (DESIGN.md, Numbers)


def random_case(seed: int):
    """A random model with random findings, sometimes with repairs and findings after them."""
    rng = random.Random(seed)
    model = random_model(seed, n_events=rng.randint(3, 7), n_gates=rng.randint(2, 5),
                         n_checks=rng.randint(2, 5), tiny=rng.random() < 0.3)
    engine = Engine(model)
    findings = [Finding(model.top, 1, 0)]
    repairs: list[str] = []
    for check in rng.sample(model.checks, rng.randint(0, len(model.checks))):
        findings.append(Finding(check.id, rng.randint(0, 1), 0))
    if rng.random() < 0.5:
        repairs.append(rng.choice(model.basic_events).id)
        findings.append(Finding(model.top, 1, 1))
        if rng.random() < 0.5:
            findings.append(Finding(rng.choice(model.checks).id, rng.randint(0, 1), 1))
    try:
        posterior = engine.propagate(findings, tuple(repairs))
    except ImpossibleFindings:
        return None
    return model, engine, findings, tuple(repairs), posterior


SEEDS = st.integers(min_value=0, max_value=10_000)
FAST = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FAST
@given(SEEDS)
def test_bits_equal_brute_force_mutual_information(seed):
    case = random_case(seed)
    if case is None:
        return
    model, _, findings, repairs, posterior = case
    ranking = rank(posterior, [c.id for c in model.checks])
    assert len(ranking) == len(model.checks)
    for row in ranking.rows:
        # Source: bruteforce.check_information_bits (enumeration of every root state).
        expected = bf.check_information_bits(model, findings, repairs, row.check)
        assert row.bits == pytest.approx(expected, abs=TOL)


@FAST
@given(SEEDS)
def test_bits_equal_expected_entropy_drop_over_outcomes(seed):
    case = random_case(seed)
    if case is None:
        return
    model, engine, findings, repairs, posterior = case
    h_now = entropy_bits(posterior)
    epoch = len(repairs)
    for check_id, (bits, p_outcomes) in outcome_information(posterior, [c.id for c in model.checks]).items():
        expected_after = 0.0
        total = 0.0
        for outcome in range(len(model.check_by_id[check_id].outcomes)):
            try:
                after = engine.propagate(findings + [Finding(check_id, outcome, epoch)], repairs)
            except ImpossibleFindings:
                assert p_outcomes[outcome] == pytest.approx(0.0, abs=TOL)
                continue
            p_t = math.exp(after.log_p - posterior.log_p)  # P(t | e)
            assert p_outcomes[outcome] == pytest.approx(p_t, abs=TOL)
            total += p_t
            expected_after += p_t * entropy_bits(after)
        # Chain rule: I(F;T|e) = H(F|e) - sum_t P(t|e) H(F|e,t) (Cover & Thomas 2006).
        assert bits == pytest.approx(h_now - expected_after, abs=TOL)
        assert total == pytest.approx(1.0, abs=TOL)


@FAST
@given(SEEDS)
def test_remaining_entropy_and_suspects_equal_brute_force(seed):
    case = random_case(seed)
    if case is None:
        return
    model, engine, findings, repairs, posterior = case
    ref = bf.posterior(model, findings, repairs)
    # Source: entropy of the enumerated posterior joint over every root state.
    assert entropy_bits(posterior) == pytest.approx(bf.entropy_bits(ref["joint"]), abs=TOL)
    ranked = suspects(posterior)
    assert {s.id for s in ranked} == set(model.hypotheses)
    for s in ranked:
        assert s.p == pytest.approx(ref["marginals"][s.id], abs=TOL)
    # Most probable first; values within 1e-12 are ties, ordered by id (DESIGN.md, Numbers).
    assert all(a.p >= b.p - 1e-12 for a, b in zip(ranked, ranked[1:]))
    assert all(a.id < b.id for a, b in zip(ranked, ranked[1:]) if abs(a.p - b.p) <= 1e-15)


@FAST
@given(SEEDS)
def test_most_probable_explanation_is_the_brute_force_argmax(seed):
    case = random_case(seed)
    if case is None:
        return
    model, engine, findings, repairs, posterior = case
    ref = bf.posterior(model, findings, repairs)
    joint = ref["joint"]
    best = int(np.argmax(joint))
    explanation = most_probable_explanation(engine, posterior)
    assert explanation.exact
    # Source: the largest entry of the enumerated posterior joint.
    assert explanation.p == pytest.approx(joint[best], abs=TOL)
    row = [ref["roots"].index(r) for r in explanation.failed]
    state = np.zeros(len(ref["roots"]), bool)
    state[row] = True
    index = int(np.flatnonzero((ref["states"] == state).all(axis=1))[0])
    assert joint[index] == pytest.approx(joint[best], abs=TOL)


def small_model(costs=(5.0, 5.0, 0.0), detections=(1.0, 1.0, 1.0)) -> Model:
    events = (
        BasicEvent("a", "part a", 0.1, repair=Repair("replace a", 10)),
        BasicEvent("b", "part b", 0.1, repair=Repair("replace b", 40)),
    )
    gates = (Gate("top", "unit fails", "or", ("a", "b"), unlisted=0.01),)
    checks = (
        Check("see_a", "look at a", costs[0], ("ok", "bad"), (Cause("a", detections[0]),)),
        Check("see_b", "look at b", costs[1], ("ok", "bad"), (Cause("b", detections[1]),)),
        Check("free_a", "a's lamp", costs[2], ("off", "on"), (Cause("a", detections[2]),)),
        Check("blind", "reads nothing", 0.0, ("ok", "bad"), (Cause("b", 0.0),)),
    )
    return Model(name="small", top="top", gates=gates, basic_events=events, checks=checks)


def test_order_score_then_cost_then_id_and_free_checks():
    model = small_model()
    posterior = Engine(model).propagate([Finding("top", 1, 0)])
    ranking = rank(posterior, model.checks)
    ids = [r.check for r in ranking.rows]
    # a and b are symmetric (same prior, same detection): see_a and see_b tie on
    # bits and cost, so the id decides; the free informative check comes first,
    # the free uninformative one (0 bits) scores 0 and comes last.
    assert ids == ["free_a", "see_a", "see_b", "blind"]
    assert math.isinf(ranking.rows[0].score)
    assert ranking.rows[-1].bits == 0.0 and ranking.rows[-1].score == 0.0
    assert ranking.rows[1].bits == pytest.approx(ranking.rows[2].bits, abs=1e-15)
    for r in ranking.rows:
        assert sum(r.p_outcomes) == pytest.approx(1.0, abs=TOL)
    assert score_of(1.0, 0.0) == math.inf and score_of(0.0, 0.0) == 0.0 and score_of(1.0, 4.0) == 0.25


def test_repair_order_by_probability_per_cost_unlisted_last():
    model = small_model()
    group = (Suspect("b", "part b", 0.6), Suspect("a", "part a", 0.3),
             Suspect("top~unlisted", "unlisted", 0.1, unlisted=True))
    order = repair_order(model, group)
    # Kadane & Simon 1977: p/cost descending: a 0.3/10 = 0.03 before b 0.6/40 = 0.015.
    assert [s.id for s in order] == ["a", "b", "top~unlisted"]
    assert order[0].ratio == pytest.approx(0.03) and order[-1].cost is None and order[-1].note
