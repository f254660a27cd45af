"""The compiled decision-diagram path against brute force, the join tree and the published figures."""

from __future__ import annotations

import math
import random

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import bruteforce as bf
from randommodels import random_findings, random_model
from troubleshoot.advice.diagnosis import entropy_bits, most_probable_explanation
from troubleshoot.advice.ranking import outcome_information
from troubleshoot.engine.compiled import ENGINE_NAME
from troubleshoot.engine.inference import JOIN_TREE, Engine, Finding
from troubleshoot.errors import ImpossibleFindings, NetworkTooLarge
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model

TOL = 1e-9



@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10**6), n_events=st.integers(2, 9), n_gates=st.integers(1, 6),
       n_repairs=st.integers(0, 2))
def test_both_paths_equal_brute_force(seed, n_events, n_gates, n_repairs):
    # Reference: enumeration of every root state (tests/bruteforce.py), written
    # from the model format's semantics, not from either engine.
    # Checks of two to four outcomes (noisy-MAX), repeated events, repairs.
    model = random_model(seed, n_events=n_events, n_gates=n_gates, n_checks=4, max_outcomes=4)
    rng = random.Random(seed)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], min(n_repairs, n_events)))
    findings = random_findings(model, rng, repairs)
    ref = bf.posterior(model, findings, repairs)
    for kind in (JOIN_TREE, ENGINE_NAME):
        engine = Engine(model, kind=kind)
        assert engine.name == kind
        if ref["log_p"] == -math.inf:
            with pytest.raises(ImpossibleFindings):
                engine.propagate(findings, repairs)
            continue
        post = engine.propagate(findings, repairs)
        assert post.engine == kind
        assert post.log_p == pytest.approx(ref["log_p"], abs=TOL)
        got = post.marginals
        for node, p in ref["marginals"].items():
            assert got[node] == pytest.approx(p, abs=TOL), (kind, node)
        # Bits of every check done now, by enumeration of the joint.
        info = outcome_information(post, [c.id for c in model.checks])
        for check in model.checks:
            want = bf.check_information_bits(model, findings, repairs, check.id)
            assert info[check.id][0] == pytest.approx(max(want, 0.0), abs=TOL), (kind, check.id)
        # Entropy of the posterior joint over the roots.
        assert entropy_bits(post) == pytest.approx(bf.entropy_bits(ref["joint"]), abs=TOL)
        # Most probable explanation: the largest entry of the enumerated joint.
        joint = ref["joint"]
        explanation = most_probable_explanation(engine, post)
        assert explanation.exact
        assert explanation.p == pytest.approx(float(joint.max()), abs=TOL)
        state = np.zeros(len(ref["roots"]), bool)
        state[[ref["roots"].index(r) for r in explanation.failed]] = True
        row = int(np.flatnonzero((ref["states"] == state).all(axis=1))[0])
        assert joint[row] == pytest.approx(float(joint.max()), abs=TOL)


def test_wide_check_is_answered_by_the_compiled_path():
    # Every check reads all 30 causes: a 2^30 clique, so the join tree is
    # refused and the automatic choice compiles the diagram instead.
    # Reference: closed form. With top = OR of all and only the complaint, the
    # posterior of e_i is p / P(top), P(top) = 1 - (1 - p)^30 (NUREG-0492 ch. VI).
    n, p, d = 30, 0.1, 0.9
    events = tuple(BasicEvent(f"e{i}", f"e{i}", p) for i in range(n))
    gates = (Gate("top", "top", "or", tuple(e.id for e in events)),)
    checks = (Check("all", "all", 1.0, ("n", "a"), tuple(Cause(e.id, d) for e in events)),)
    model = Model(name="huge", top="top", gates=gates, basic_events=events, checks=checks)
    engine = Engine(model, memory_budget=64 * 1024**2)
    assert engine.name == ENGINE_NAME
    post = engine.propagate([Finding("top", 1)])
    p_top = 1.0 - (1.0 - p) ** n
    assert post.log_p == pytest.approx(math.log(p_top), abs=TOL)
    assert post.root_marginals() == pytest.approx(np.full(n, p / p_top), abs=TOL)
    # P(all normal | top) = sum_k P(k failed | top) (1 - d)^k, k >= 1 (binomial).
    want = sum(math.comb(n, k) * p**k * (1 - p) ** (n - k) * (1 - d) ** k for k in range(1, n + 1)) / p_top
    _, p_outcomes = outcome_information(post, ["all"])["all"]
    assert p_outcomes[0] == pytest.approx(want, abs=TOL)


def test_wide_graded_check_is_grouped_by_likelihood_and_equals_enumeration():
    # A three-outcome check over 14 causes (more than MAX_CAUSE_STATES_BITS): the
    # compiled path groups its cause states and builds the finding in product form.
    # Reference: enumeration of all 2^14 root states with the textbook noisy-MAX
    # in cumulative form, P(Y <= l | c) = Q_leak(l) prod_(i present) Q_i(l)
    # (Díez 1993), written here.
    rng = random.Random(7)
    n = 14
    priors = np.array([rng.uniform(0.05, 0.3) for _ in range(n)])
    events = tuple(BasicEvent(f"e{i}", f"e{i}", float(priors[i])) for i in range(n))
    gates = (Gate("top", "top", "or", tuple(e.id for e in events[:10])),
             Gate("g", "g", "and", ("e10", "e11")))
    highs = [rng.choice([0.4, 0.5]) for _ in range(13)]
    causes = tuple(Cause(f"e{i}", 0.0, shows=(("low", 0.3), ("high", highs[i]))) for i in range(13)) \
        + (Cause("g", 0.0, shows=(("high", 0.9),)),)
    check = Check("wide", "wide", 1.0, ("normal", "low", "high"), causes, false_alarm=0.0, leak=(("low", 0.01),))
    model = Model(name="wide", top="top", gates=gates, basic_events=events, checks=(check,))
    states = ((np.arange(2**n)[:, None] >> np.arange(n)) & 1).astype(bool)
    weight = np.prod(np.where(states, priors, 1 - priors), axis=1) * states[:, :10].any(axis=1)  # top failed
    present = np.column_stack([states[:, :13], states[:, 10] & states[:, 11]])
    q0 = np.array([1 - 0.3 - h for h in highs] + [0.1])  # P(level <= normal) of each cause alone
    q1 = np.array([1 - h for h in highs] + [0.1])  # P(level <= low)
    cdf0 = 0.99 * np.prod(np.where(present, q0, 1.0), axis=1)
    cdf1 = 1.00 * np.prod(np.where(present, q1, 1.0), axis=1)
    lik = np.column_stack([cdf0, cdf1 - cdf0, 1 - cdf1])  # normal, low, high
    p_e = weight.sum()
    engine = Engine(model, kind=ENGINE_NAME)
    findings = [Finding("top", 1)]
    post = engine.propagate(findings)
    assert post.log_p == pytest.approx(math.log(p_e), abs=TOL)
    joint = weight / p_e
    p_t = joint @ lik

    def h(p):
        p = p[p > 0]
        return float(-(p * np.log2(p)).sum())

    want_bits = h(p_t) - sum(joint[i] * h(lik[i]) for i in np.flatnonzero(joint))
    bits, p_outcomes = outcome_information(post, ["wide"])["wide"]
    assert bits == pytest.approx(want_bits, abs=TOL)
    assert np.abs(p_outcomes - p_t).max() <= TOL
    for outcome in range(3):
        after = engine.propagate(findings + [Finding("wide", outcome)])
        w = weight * lik[:, outcome]
        assert after.log_p == pytest.approx(math.log(w.sum()), abs=TOL)
        assert np.abs(after.root_marginals() - (w @ states) / w.sum()).max() <= TOL


def test_budget_too_small_for_both_paths_is_refused():
    events = tuple(BasicEvent(f"e{i}", f"e{i}", 0.1) for i in range(30))
    gates = (Gate("top", "top", "or", tuple(e.id for e in events)),)
    checks = (Check("all", "all", 1.0, ("n", "a"), tuple(Cause(e.id, 0.9) for e in events)),)
    model = Model(name="huge", top="top", gates=gates, basic_events=events, checks=checks)
    with pytest.raises(NetworkTooLarge) as err:
        Engine(model, memory_budget=4 * 1024)
    assert "decision diagram" in str(err.value)


def _agree(model: Model, findings: list[Finding]) -> None:
    """Both paths: log P(findings), every root posterior, every check's bits and the MPE, to 1e-9."""
    tree, diagram = Engine(model, kind=JOIN_TREE), Engine(model, kind=ENGINE_NAME)
    a, b = tree.propagate(findings), diagram.propagate(findings)
    assert a.log_p == pytest.approx(b.log_p, abs=TOL)
    assert np.abs(a.root_marginals() - b.root_marginals()).max() <= TOL
    checks = [c.id for c in model.checks]
    ia, ib = outcome_information(a, checks), outcome_information(b, checks)
    for c in checks:
        assert ia[c][0] == pytest.approx(ib[c][0], abs=TOL)
        assert np.abs(ia[c][1] - ib[c][1]).max() <= TOL
    assert most_probable_explanation(tree, a).p == pytest.approx(most_probable_explanation(diagram, b).p, abs=TOL)


# Published by Rauzy et al., RESS 79(1), 2003, as tabled in openpra-org/generic-openpsa-models
# (copied in ../shared/benchmarks/aralia/README.md).
ARALIA_TOP = {"chinese": 1.17058e-03, "baobab2": 7.13018e-04, "das9201": 1.34237e-02}


@pytest.mark.parametrize("name", sorted(ARALIA_TOP))
def test_aralia_trees_both_paths_agree_and_match_the_published_top(name):
    from test_cutsets import read_benchmark

    model = read_benchmark(name)
    diagram = Engine(model, kind=ENGINE_NAME)
    # Published to 6 significant figures.
    assert diagram.propagate([]).p_failed(model.top) == pytest.approx(ARALIA_TOP[name], rel=5e-6)
    _agree(model, [Finding(model.top, 1)])


@pytest.mark.parametrize("seed", [1, 2])
def test_generated_hard_trees_both_paths_agree(seed):
    from troubleshoot.study.hardtrees import hard_model

    model = hard_model(200, seed=seed)
    rng = random.Random(seed)
    findings = [Finding(model.top, 1)]
    for check in rng.sample(list(model.checks), 5):
        findings.append(Finding(check.id, rng.randint(0, 1)))
    try:
        _agree(model, findings)
    except ImpossibleFindings:
        findings = findings[:1]
        _agree(model, findings)


def test_generated_hard_tree_goes_over_to_the_compiled_path():
    from troubleshoot.study.hardtrees import hard_model

    model = hard_model(1000, seed=1)
    engine = Engine(model)
    assert engine.name == ENGINE_NAME and engine.tree is None
    with pytest.raises(NetworkTooLarge) as err:
        Engine(model, kind=JOIN_TREE)
    assert "width" in str(err.value)
    # The complaint alone: P(top) equals the BDD of the analysis (an independent construction).
    from troubleshoot.analysis.bdd import FaultTreeBdd

    post = engine.propagate([Finding(model.top, 1)])
    assert post.log_p == pytest.approx(math.log(FaultTreeBdd.from_model(model).probability()), abs=TOL)
