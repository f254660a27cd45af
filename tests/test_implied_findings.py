"""Findings that others imply are dropped without changing any figure, and dropping them stays linear.

The rule (``Engine.implied_dropped``, coherent trees): "failed" at epoch j is
implied by "failed" at a later epoch, "ok" at a later epoch by "ok" at an
earlier one. Checked two ways: against the rule written out here as it is
stated (every pair of findings compared), and end to end, the posterior with
many exact findings over several epochs against exact enumeration
(``tests/bruteforce.py``, written from the documentation).
"""

from __future__ import annotations

import math
import random

import pytest

from troubleshoot.advice.policy import outside_model
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.errors import ImpossibleFindings
from troubleshoot.model.types import BasicEvent, Escalation, Gate, Model, Repair

import bruteforce
from randommodels import random_model


def implied_by_pairs(findings, checks) -> list[Finding]:
    """The docstring's rule, compared pair by pair (quadratic: the reference, not the product)."""
    exact = [f for f in findings if f.target not in checks]
    kept = []
    for f in findings:
        if f.target not in checks:
            if f.outcome == 1 and any(g.target == f.target and g.outcome == 1 and g.epoch > f.epoch for g in exact):
                continue
            if f.outcome == 0 and any(g.target == f.target and g.outcome == 0 and g.epoch < f.epoch for g in exact):
                continue
        kept.append(f)
    return kept


def exact_findings(model: Model, rng: random.Random, repairs: tuple[str, ...], count: int) -> list[Finding]:
    """The complaint, then ``count`` random exact observations of gates and roots at random epochs."""
    targets = [g.id for g in model.gates] + list(model.hypotheses)
    findings = [Finding(model.top, 1, 0)]
    for _ in range(count):
        findings.append(Finding(rng.choice(targets), rng.randint(0, 1), rng.randint(0, len(repairs))))
    return findings


@pytest.mark.parametrize("seed", range(40))
def test_dropping_follows_the_rule_pair_by_pair(seed):
    model = random_model(seed, n_events=6, n_gates=5)
    rng = random.Random(seed)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], rng.randint(0, 3)))
    findings = exact_findings(model, rng, repairs, 12)
    findings += [Finding(c.id, rng.randrange(len(c.outcomes)), rng.randint(0, len(repairs))) for c in model.checks]
    rng.shuffle(findings)
    engine = Engine(model, kind="join tree")
    if engine._coherent:
        assert engine.implied_dropped(findings) == implied_by_pairs(findings, model.check_by_id)
    else:
        assert engine.implied_dropped(findings) == findings  # a NOT gate: nothing is implied


@pytest.mark.parametrize("kind", ["join tree", "decision diagram"])
@pytest.mark.parametrize("seed", range(25))
def test_posterior_with_many_exact_findings_equals_enumeration(seed, kind):
    # Reference: exact enumeration of every root state (tests/bruteforce.py), to 1e-9.
    model = random_model(seed + 100, n_events=6, n_gates=5)
    rng = random.Random(seed)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], rng.randint(0, 2)))
    findings = exact_findings(model, rng, repairs, 6)
    exact = bruteforce.posterior(model, findings, repairs)
    engine = Engine(model, kind=kind)
    if exact["joint"] is None:
        with pytest.raises(ImpossibleFindings):
            engine.propagate(findings, repairs)
        return
    post = engine.propagate(findings, repairs)
    assert post.log_p == pytest.approx(exact["log_p"], abs=1e-9)
    for root in model.hypotheses:
        assert post.p_failed(root) == pytest.approx(exact["marginals"][root], abs=1e-9)


def many_gates_model(gates: int) -> Model:
    """A top OR over ``gates`` OR gates of two parts each, every gate with an unlisted cause (illustrative)."""
    events, ors = [], []
    for i in range(gates):
        pair = [BasicEvent(f"part{i}_{k}", f"part {i}.{k}", 0.01 + 0.001 * k, repair=Repair("replace", 10 + k))
                for k in range(2)]
        events += pair
        ors.append(Gate(f"unit{i}", f"unit {i} fails", "or", tuple(e.id for e in pair), unlisted=0.002))
    top = Gate("top", "the plant fails", "or", tuple(g.id for g in ors))
    return Model("many-gates", "top", tuple(ors + [top]), tuple(events), escalation=Escalation("swap the plant", 500.0))


def test_cause_outside_the_model_over_many_gates_equals_its_closed_form():
    # Reference: the gates are independent given the top event's OR, so
    # P(no unlisted cause | top) = P(top, none) / P(top) with
    # P(top) = 1 - prod_i P(gate i ok) and P(top, none) = prod_i P(unlisted_i ok) * (1 - prod_i P(parts of i ok))
    # (probability of independent events; the product rule).
    n = 300
    model = many_gates_model(n)
    engine = Engine(model, kind="join tree")
    post = engine.propagate([Finding("top", 1, 0)])
    parts_ok = math.prod((1 - 0.01) * (1 - 0.011) for _ in range(n))
    unlisted_ok = (1 - 0.002) ** n
    p_top = 1 - parts_ok * unlisted_ok
    p_top_and_none = unlisted_ok * (1 - parts_ok)
    figure = outside_model(engine, post)
    assert figure.p == pytest.approx(1 - p_top_and_none / p_top, abs=1e-12)
    assert len(figure.by_gate) == n
