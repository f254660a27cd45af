"""Expected cost of repair against the formula written out plainly (Heckerman, Breese & Rommelse 1995)."""

from __future__ import annotations

import random

import pytest

from randommodels import random_model
from troubleshoot.advice.diagnosis import expected_repair_cost, repair_order, suspects, top_verification, verification_for
from troubleshoot.errors import ImpossibleFindings
from troubleshoot.engine.inference import Engine, Finding


def plain_expected_repair_cost(posterior) -> float:
    # ECR = sum_j (c_j + v_j) * (1 - sum_(i<j) p_i), single fault, p renormalised
    # over the unrepaired suspects, repairs in the order p / c (Kadane & Simon 1977).
    model = posterior.model
    ranked = tuple(s for s in suspects(posterior) if not s.repaired and s.p > 1e-12)
    total = sum(s.p for s in ranked)
    remaining, cost = 1.0, 0.0
    for step in repair_order(model, ranked):
        if step.cost is None:
            continue
        verify = verification_for(model, step.id)
        extra = top_verification(model).cost if verify.target != model.top else 0.0
        cost += remaining * (step.cost + verify.cost + extra)
        remaining -= step.p / total
        if remaining <= 1e-12:
            break
    return cost


@pytest.mark.parametrize("seed", range(25))
def test_expected_repair_cost_matches_the_plain_formula(seed):
    model = random_model(seed, n_events=7, n_gates=5, n_checks=4)
    rng = random.Random(seed)
    engine = Engine(model)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], rng.randint(0, 2)))
    findings = [Finding(model.top, 1, 0)]
    try:
        engine.propagate(findings, repairs)
    except ImpossibleFindings:
        pytest.skip("the drawn tree can never fail (the complaint is impossible)")
    for check in model.checks[:3]:  # keep each drawn outcome the model allows
        trial = findings + [Finding(check.id, rng.randint(0, 1), 0)]
        try:
            engine.propagate(trial, repairs)
        except ImpossibleFindings:
            continue
        findings = trial
    post = engine.propagate(findings, repairs)
    assert expected_repair_cost(post) == pytest.approx(plain_expected_repair_cost(post), rel=1e-12, abs=1e-12)
