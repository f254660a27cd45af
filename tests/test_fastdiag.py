"""The decision-diagram path's shortcuts against brute force and against the straightforward product.

Shortcuts checked here: exact observations of root events answered by
weighting the roots on the other findings' diagram (no product of diagrams),
and a check's outcome answered from the current findings' passes (the
differential approach) instead of a new evidence diagram. The references are
tests/bruteforce.py (enumeration of every root state, written from the
model format's semantics) and the same engine's product path.
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
from troubleshoot.advice.diagnosis import most_probable_explanation
from troubleshoot.advice.ranking import outcome_information
from troubleshoot.engine.compiled import ENGINE_NAME, OneMore, Passes
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.errors import ImpossibleFindings

TOL = 1e-9


def _with_root_observations(model, rng: random.Random, repairs: tuple[str, ...]) -> list[Finding]:
    findings = [Finding(model.top, 1, 0)]
    for check in rng.sample(list(model.checks), min(2, len(model.checks))):
        findings.append(Finding(check.id, rng.randrange(len(check.outcomes)), len(repairs)))
    roots = list(model.hypotheses)
    for root in rng.sample(roots, min(len(roots), rng.randint(1, 3))):
        findings.append(Finding(root, rng.randint(0, 1), rng.randint(0, len(repairs))))
    if rng.random() < 0.3:  # the same root seen twice (agreeing or not)
        f = findings[-1]
        findings.append(Finding(f.target, rng.randint(0, 1), f.epoch))
    return findings


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10**6), n_events=st.integers(2, 8), n_gates=st.integers(1, 5),
       n_repairs=st.integers(0, 2))
def test_root_observations_by_weight_equal_brute_force(seed, n_events, n_gates, n_repairs):
    # Reference: enumeration of every root state (tests/bruteforce.py).
    model = random_model(seed, n_events=n_events, n_gates=n_gates, n_checks=4, max_outcomes=3)
    rng = random.Random(seed)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], min(n_repairs, n_events)))
    findings = _with_root_observations(model, rng, repairs)
    ref = bf.posterior(model, findings, repairs)
    engine = Engine(model, kind=ENGINE_NAME)
    if ref["log_p"] == -math.inf:
        with pytest.raises(ImpossibleFindings):
            engine.propagate(findings, repairs)
        return
    post = engine.propagate(findings, repairs)
    assert post.log_p == pytest.approx(ref["log_p"], abs=TOL)
    for node, p in ref["marginals"].items():
        assert post.marginals[node] == pytest.approx(p, abs=TOL), node
    # Check families go through the product diagram: bits by enumeration.
    info = outcome_information(post, [c.id for c in model.checks])
    for check in model.checks:
        want = bf.check_information_bits(model, findings, repairs, check.id)
        assert info[check.id][0] == pytest.approx(max(want, 0.0), abs=TOL), check.id
    joint = ref["joint"]
    explanation = most_probable_explanation(engine, post)
    assert explanation.p == pytest.approx(float(joint.max()), abs=TOL)


def test_root_observations_reuse_the_diagram_of_the_other_findings():
    # The weighted passes share the structure of the passes without the
    # root observations, and equal the passes over the product diagram.
    model = random_model(7, n_events=8, n_gates=5, n_checks=4, max_outcomes=2)
    engine = Engine(model, kind=ENGINE_NAME)
    base = [Finding(model.top, 1, 0)]
    first = engine.propagate(base)
    roots = [r for r in model.hypotheses][:3]
    extra = tuple(Finding(r, 0, 0) for r in roots)
    post = engine.propagate(tuple(base) + extra)
    assert post.passes.weighted and post.passes.ids is first.passes.ids
    cm = engine.diagram
    product = Passes(cm, cm.evidence(tuple(base) + extra, ()))
    assert post.log_p == pytest.approx(math.log(product.p_evidence), abs=TOL)
    np.testing.assert_allclose(post.passes.root_marginals, product.root_marginals, atol=TOL)


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10**6), n_events=st.integers(2, 8), n_gates=st.integers(1, 5),
       n_repairs=st.integers(0, 2))
def test_one_more_check_finding_equals_brute_force_and_the_product(seed, n_events, n_gates, n_repairs):
    # Reference: enumeration of every root state (tests/bruteforce.py), and the
    # passes over the product evidence diagram (the straightforward way).
    model = random_model(seed, n_events=n_events, n_gates=n_gates, n_checks=4, max_outcomes=4)
    rng = random.Random(seed)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], min(n_repairs, n_events)))
    prefix = [Finding(model.top, 1, 0)]
    if rng.random() < 0.5:
        check = rng.choice(model.checks)
        prefix.append(Finding(check.id, rng.randrange(len(check.outcomes)), rng.randint(0, len(repairs))))
    engine = Engine(model, kind=ENGINE_NAME)
    try:
        engine.propagate(prefix, repairs)
    except ImpossibleFindings:
        return
    check = rng.choice(model.checks)
    findings = prefix + [Finding(check.id, rng.randrange(len(check.outcomes)), rng.randint(0, len(repairs)))]
    ref = bf.posterior(model, findings, repairs)
    if ref["log_p"] == -math.inf:
        with pytest.raises(ImpossibleFindings):
            engine.propagate(findings, repairs)
        return
    post = engine.propagate(findings, repairs)
    assert isinstance(post.passes, OneMore)  # the shortcut was taken
    assert post.log_p == pytest.approx(ref["log_p"], abs=TOL)
    for node, p in ref["marginals"].items():
        assert post.marginals[node] == pytest.approx(p, abs=TOL), node
    cm = engine.diagram
    product = Passes(cm, cm.evidence(tuple(findings), repairs))
    np.testing.assert_allclose(post.passes.root_marginals, product.root_marginals, atol=TOL)
    info = outcome_information(post, [c.id for c in model.checks])
    for c in model.checks:
        want = bf.check_information_bits(model, findings, repairs, c.id)
        assert info[c.id][0] == pytest.approx(max(want, 0.0), abs=TOL), c.id
    explanation = most_probable_explanation(engine, post)
    assert explanation.p == pytest.approx(float(ref["joint"].max()), abs=TOL)


@pytest.mark.parametrize("seed", [1, 2])
def test_one_more_on_a_generated_hard_tree_equals_the_product(seed):
    # A wide tree (shared supports): every check's outcomes after the
    # complaint, against the passes over the product evidence diagram.
    from troubleshoot.study.hardtrees import hard_model

    model = hard_model(200, seed=seed)
    engine = Engine(model, kind=ENGINE_NAME)
    base = (Finding(model.top, 1, 0),)
    engine.propagate(base)
    cm = engine.diagram
    for check in model.checks[:40]:
        for outcome in range(len(check.outcomes)):
            findings = base + (Finding(check.id, outcome, 0),)
            post = engine.propagate(findings)
            assert isinstance(post.passes, OneMore)
            product = Passes(cm, cm.evidence(findings, ()))
            assert post.log_p == pytest.approx(math.log(product.p_evidence), abs=TOL)
            np.testing.assert_allclose(post.passes.root_marginals, product.root_marginals, atol=TOL)
