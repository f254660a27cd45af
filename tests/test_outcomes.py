"""Checks with more than two outcomes (noisy-MAX): the engine against enumeration,
the textbook formula, pyAgrum, and the two-outcome form of format 1.0."""

from __future__ import annotations

import math
import random

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import bruteforce as bf
from randommodels import random_model
from troubleshoot.advice.ranking import rank
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.engine.network import build_network
from troubleshoot.engine.observation import outcome_probabilities, sample_outcome
from troubleshoot.errors import ImpossibleFindings, SessionError
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model

TOL = 1e-9  # exact paths (DESIGN.md, Numbers)


def _findings(model: Model, rng: random.Random, repairs: tuple[str, ...]) -> list[Finding]:
    findings = [Finding(model.top, 1, 0)]
    for epoch in range(len(repairs) + 1):
        for check in rng.sample(list(model.checks), min(2, len(model.checks))):
            findings.append(Finding(check.id, rng.randrange(len(check.outcomes)), epoch))
        if epoch:
            findings.append(Finding(model.top, rng.randint(0, 1), epoch))
    return findings


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10**6), n_events=st.integers(2, 8), n_gates=st.integers(1, 5),
       n_repairs=st.integers(0, 2))
def test_k_outcome_posteriors_log_p_and_bits_equal_brute_force(seed, n_events, n_gates, n_repairs):
    # Reference: tests/bruteforce.py, which enumerates what every cause and the
    # false alarm produce (faulttrees/FORMAT.md), never the cumulative form.
    model = random_model(seed, n_events=n_events, n_gates=n_gates, n_checks=4, max_outcomes=4)
    rng = random.Random(seed)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], min(n_repairs, n_events)))
    findings = _findings(model, rng, repairs)
    ref = bf.posterior(model, findings, repairs)
    engine = Engine(model)
    if ref["log_p"] == -math.inf:
        with pytest.raises(ImpossibleFindings):
            engine.propagate(findings, repairs)
        return
    post = engine.propagate(findings, repairs)
    assert post.log_p == pytest.approx(ref["log_p"], abs=TOL)
    for node, p in ref["marginals"].items():
        assert post.marginals[node] == pytest.approx(p, abs=TOL), node
    for row in rank(post, [c.id for c in model.checks]).rows:
        assert row.bits == pytest.approx(bf.check_information_bits(model, findings, repairs, row.check), abs=TOL)
        assert len(row.p_outcomes) == len(model.check_by_id[row.check].outcomes)
        assert sum(row.p_outcomes) == pytest.approx(1.0, abs=TOL)


def _two_cause_model(p1: dict, p2: dict, leak: dict) -> Model:
    a, b = BasicEvent("a", "a", 0.3), BasicEvent("b", "b", 0.2)
    top = Gate("top", "top", "or", ("a", "b"))
    check = Check("t", "reading", 1.0, ("normal", "low", "high"),
                  (Cause("a", shows=tuple(p1.items())), Cause("b", shows=tuple(p2.items()))),
                  leak=tuple(leak.items()))
    return Model(name="two", top="top", gates=(top,), basic_events=(a, b), checks=(check,))


def test_noisy_max_table_of_two_causes_and_three_outcomes_is_the_textbook_formula():
    # Díez 1993, cumulative form, written out by hand: with levels normal < low < high,
    # P(Y <= y | causes) = prod over present causes of P(cause alone gives <= y) * the leak's.
    p1 = {"low": 0.6, "high": 0.3}   # cause a: low 0.6, high 0.3, unseen 0.1
    p2 = {"low": 0.2, "high": 0.7}   # cause b: low 0.2, high 0.7, unseen 0.1
    leak = {"low": 0.05, "high": 0.01}
    model = _two_cause_model(p1, p2, leak)
    table = build_network(model, with_checks=False).families[("t", 0)].likelihood()
    cum = {  # P(source alone gives <= normal), P(<= low)
        "a": (1 - 0.6 - 0.3, 1 - 0.3), "b": (1 - 0.2 - 0.7, 1 - 0.7), "leak": (1 - 0.05 - 0.01, 1 - 0.01)}
    for ca in (0, 1):
        for cb in (0, 1):
            le_normal = cum["leak"][0] * (cum["a"][0] if ca else 1.0) * (cum["b"][0] if cb else 1.0)
            le_low = cum["leak"][1] * (cum["a"][1] if ca else 1.0) * (cum["b"][1] if cb else 1.0)
            expected = (le_normal, le_low - le_normal, 1.0 - le_low)  # normal, low, high
            np.testing.assert_allclose(table[ca, cb], expected, atol=1e-15)
    # The same, as the simulator and the exact optimal policy ask for it.
    both = outcome_probabilities(model.checks[0], [True, True])
    np.testing.assert_allclose(both, table[1, 1], atol=1e-15)


def test_sample_outcome_walks_the_abnormal_outcomes_first():
    p = np.array([0.5, 0.2, 0.3])  # normal, low, high
    assert [sample_outcome(p, u) for u in (0.0, 0.19, 0.2, 0.49, 0.5, 0.99)] == [1, 1, 2, 2, 0, 0]
    # Two outcomes: abnormal exactly when u < P(abnormal), as before.
    assert sample_outcome(np.array([0.7, 0.3]), 0.29) == 1 and sample_outcome(np.array([0.7, 0.3]), 0.3) == 0


def test_wide_k_outcome_check_exports_as_a_chain_that_pyagrum_agrees_with(tmp_path):
    # Reference: pyAgrum LazyPropagation on the XMLBIF export, where a check with
    # more causes than the fan-in is a chain of max nodes; the engine holds it whole.
    gum = pytest.importorskip("pyagrum")
    from troubleshoot.engine.xmlbif import network_to_xmlbif

    events = tuple(BasicEvent(f"e{i}", f"e{i}", 0.1 + 0.05 * i) for i in range(7))
    top = Gate("top", "top", "or", tuple(e.id for e in events))
    rng = random.Random(3)
    causes = tuple(Cause(e.id, shows=(("low", rng.uniform(0, 0.5)), ("high", rng.uniform(0, 0.5))))
                   for e in events)
    wide = Check("wide", "wide reading", 1.0, ("normal", "low", "high", "absent"), causes,
                 leak=(("low", 0.02), ("absent", 0.01)))
    model = Model(name="wide", top="top", gates=(top,), basic_events=events, checks=(wide,))
    net = build_network(model)
    assert max(len(net.graph.nodes[n]["parents"]) for n in net.graph) <= 3
    path = tmp_path / "wide.bifxml"
    path.write_bytes(network_to_xmlbif(net))
    bn = gum.loadBN(str(path))
    engine = Engine(model)
    for outcome in range(4):
        findings = [Finding("top", 1), Finding("wide", outcome)]
        post = engine.propagate(findings)
        ie = gum.LazyPropagation(bn)
        ie.setEvidence({"top": "failed", "wide": wide.outcomes[outcome]})
        ie.makeInference()
        for node, p in post.marginals.items():
            assert ie.posterior(node)[1] == pytest.approx(p, abs=TOL), node
        assert math.log(ie.evidenceProbability()) == pytest.approx(post.log_p, abs=1e-9)


def test_finding_with_an_outcome_the_check_lacks_is_refused():
    model = _two_cause_model({"low": 0.5}, {"high": 0.5}, {})
    engine = Engine(model)
    with pytest.raises(SessionError, match=r"must be 0\.\.2, not 3; its outcomes are 0 'normal', 1 'low', 2 'high'"):
        engine.propagate([Finding("t", 3)])
