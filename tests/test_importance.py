"""Importance measures against their definitions, evaluated by brute force.

Definitions (NUREG/CR-4550 Vol. 1, 1990; Birnbaum 1969; Fussell 1975; common
practice): with P = P(top), P1 = P(top | x failed), P0 = P(top | x works),
Birnbaum = P1 - P0, criticality = Birnbaum * p / P, Fussell-Vesely (exact form)
= (P - P0) / P, RAW = P1 / P, RRW = P / P0, diagnostic = p * P1 / P.
P, P1 and P0 are computed here by enumerating every root state, independently
of the BDD; the join-tree engine is a second, independent exact computation.
"""

from __future__ import annotations


import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from test_cutsets import P_A, P_B, P_C, fault_trees, gate_values, read_benchmark, tree

from troubleshoot.analysis.bdd import FaultTreeBdd
from troubleshoot.analysis.importance import importance_measures
from troubleshoot.model import Gate


def brute_force_top(model, pinned: dict[str, float] | None = None) -> float:
    """P(top) by enumeration, with some roots' priors replaced (1.0 = failed, 0.0 = works)."""
    roots = list(model.hypotheses)
    n = len(roots)
    codes = np.arange(2**n)
    states = ((codes[:, None] >> np.arange(n)) & 1).astype(bool)
    priors = np.array([(pinned or {}).get(r, model.prior_of(r)) for r in roots])
    weight = np.prod(np.where(states, priors, 1.0 - priors), axis=1)
    return float(weight[gate_values(model, states)].sum())


def close(actual: float, expected: float, tol: float = 1e-12) -> bool:
    if math.isnan(expected):
        return math.isnan(actual)
    if math.isinf(expected):
        return actual == expected
    return abs(actual - expected) <= tol * max(1.0, abs(expected))


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(fault_trees())
def test_measures_match_their_definitions_by_brute_force(model):
    measures = importance_measures(model)
    assert list(measures) == list(model.hypotheses)  # every root, unlisted causes included
    p_top = brute_force_top(model)
    for x, m in measures.items():
        p = model.prior_of(x)
        p1 = brute_force_top(model, {x: 1.0})
        p0 = brute_force_top(model, {x: 0.0})
        assert close(m.top_if_failed, p1) and close(m.top_if_working, p0)
        assert close(m.birnbaum, p1 - p0)
        if p_top > 1e-9:  # ratios of tiny brute-force sums are not compared at 1e-12
            assert close(m.criticality, (p1 - p0) * p / p_top, 1e-9)
            assert close(m.fussell_vesely, (p_top - p0) / p_top, 1e-9)
            assert close(m.raw, p1 / p_top, 1e-9)
            assert close(m.diagnostic, p * p1 / p_top, 1e-9)
            if p0 > 1e-9:
                assert close(m.rrw, p_top / p0, 1e-9)
        elif p_top == 0.0:
            assert math.isnan(m.raw) and math.isnan(m.fussell_vesely)


def test_series_system_birnbaum():
    # Birnbaum 1969 (common practice): in a series system (OR gate) the Birnbaum
    # importance of one component is the product of the others' reliabilities.
    model = tree("t", [Gate("t", "", "or", ("A", "B", "C"))], {"A": P_A, "B": P_B, "C": P_C})
    m = importance_measures(model)
    assert m["A"].birnbaum == pytest.approx((1 - P_B) * (1 - P_C), abs=1e-15)
    # RAW of a single-event cut set: P(top | A failed) = 1, so RAW = 1 / P(top).
    p_top = 1 - (1 - P_A) * (1 - P_B) * (1 - P_C)
    assert m["A"].raw == pytest.approx(1 / p_top, rel=1e-12)
    # diagnostic importance = P(A | top) = P(A) / P(top) here (A implies the top).
    assert m["A"].diagnostic == pytest.approx(P_A / p_top, rel=1e-12)


def test_parallel_system_rrw_is_infinite():
    # Parallel system (AND gate): Birnbaum of A is P(B); with A working the top cannot
    # occur, so RRW = P(top) / 0 is infinite and Fussell-Vesely is 1 (common practice).
    model = tree("t", [Gate("t", "", "and", ("A", "B"))], {"A": P_A, "B": P_B})
    m = importance_measures(model)["A"]
    assert m.birnbaum == pytest.approx(P_B, abs=1e-15)
    assert m.rrw == math.inf
    assert m.fussell_vesely == pytest.approx(1.0, abs=1e-15)
    # criticality equals Fussell-Vesely when the top is linear in p (exact form)
    assert m.criticality == pytest.approx(m.fussell_vesely, abs=1e-15)


def test_event_outside_the_tree_is_unimportant():
    model = tree("t", [Gate("t", "", "or", ("A", "B"))], {"A": P_A, "B": P_B, "D": 0.5})
    m = importance_measures(model)["D"]
    assert (m.birnbaum, m.fussell_vesely, m.raw, m.rrw) == (0.0, 0.0, 1.0, 1.0)


def test_unlisted_cause_is_a_root_with_its_own_measures():
    model = tree("t", [Gate("t", "", "or", ("A",), unlisted=0.05)], {"A": P_A})
    m = importance_measures(model)
    leak = "t~unlisted"
    assert leak in m
    assert m[leak].birnbaum == pytest.approx(1 - P_A, abs=1e-15)  # series system, as above


# --------------------------------------------------------------------------- the engine


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(fault_trees())
def test_bdd_and_join_tree_engine_agree(model):
    from troubleshoot.engine import inference
    engine = inference.Engine(model)
    bdd = FaultTreeBdd.from_model(model)
    assert abs(engine.propagate([]).p_failed(model.top) - bdd.probability()) <= 1e-12
    failed, working = bdd.conditional_probabilities()
    for x in model.hypotheses:
        p = model.prior_of(x)
        if p > 0.0:
            post = engine.propagate([inference.Finding(x, 1)])
            assert abs(post.p_failed(model.top) - failed[x]) <= 1e-12
        if p < 1.0:
            post = engine.propagate([inference.Finding(x, 0)])
            assert abs(post.p_failed(model.top) - working[x]) <= 1e-12


@pytest.mark.parametrize("name", ["chinese", "baobab2", "das9201"])
def test_bdd_and_engine_agree_on_the_aralia_trees(name):
    # Two independent exact computations (Shannon decomposition, join tree) of the
    # published P(top) (Rauzy et al. 2003, via openpra-org/generic-openpsa-models).
    model = read_benchmark(name)
    from troubleshoot.engine import inference
    engine = inference.Engine(model)
    bdd = FaultTreeBdd.from_model(model)
    assert abs(engine.propagate([]).p_failed(model.top) - bdd.probability()) <= 1e-12
    # one importance figure through the engine too: RAW of the first root
    x = model.hypotheses[0]
    raw_engine = engine.propagate([inference.Finding(x, 1)]).p_failed(model.top) / bdd.probability()
    assert abs(importance_measures(model, bdd=bdd)[x].raw - raw_engine) <= 1e-9
