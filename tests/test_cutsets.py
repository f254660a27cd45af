"""Minimal cut sets and top-event figures, checked against sources outside the code.

Sources: the formulas of NUREG-0492 (Fault Tree Handbook, U.S. NRC, 1981,
chapters VI and VII) on small trees written here; brute-force enumeration of
every root state on random small trees; the published counts and
probabilities of the Aralia benchmark trees (Rauzy et al. 2003, as tabled in
openpra-org/generic-openpsa-models) in ../shared/benchmarks/aralia.
"""

from __future__ import annotations

import itertools
import math

import bruteforce
import numpy as np
import pytest
from conftest import aralia_path
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from troubleshoot.analysis.cutsets import TooManyCutSets, minimal_cut_sets
from troubleshoot.analysis.bdd import FaultTreeBdd, variable_order
from troubleshoot.model import BasicEvent, Gate, Model, unlisted_id
from troubleshoot.model.mef import read_mef

# --------------------------------------------------------------------------- helpers


def tree(top: str, gates: list[Gate], priors: dict[str, float]) -> Model:
    """A model of bare gates and basic events (no checks)."""
    events = tuple(BasicEvent(e, f"event {e}", p) for e, p in priors.items())
    return Model(name="test tree", top=top, gates=tuple(gates), basic_events=events)


def gate_values(model: Model, states: np.ndarray) -> np.ndarray:
    """Top event for each row of ``states`` (columns = model.hypotheses), evaluated
    straight from the gate definitions: the brute-force reference (tests/bruteforce.py)."""
    return bruteforce.evaluate(model, states, list(model.hypotheses), set())[model.top]


def all_states(model: Model) -> tuple[np.ndarray, np.ndarray]:
    """Every joint root state (rows) and its prior weight."""
    _, states, weight = bruteforce.root_states(model)
    return states, weight


def brute_force_minimal_sets(model: Model) -> set[frozenset[str]]:
    """Minimal sets S of failed roots with the top failed when exactly S is failed."""
    roots = list(model.hypotheses)
    states, _ = all_states(model)
    top = gate_values(model, states)
    failing = [frozenset(r for r, on in zip(roots, row) if on) for row in states[top]]
    return {s for s in failing if not any(t < s for t in failing)}


@st.composite
def fault_trees(draw, max_events: int = 6, max_gates: int = 5, allow_not: bool = True) -> Model:
    """Small random fault trees: every gate kind, repeated events, unlisted causes."""
    n_events = draw(st.integers(1, max_events))
    prob = st.one_of(st.sampled_from([0.0, 1e-3, 0.1, 0.5, 0.9, 1.0]), st.floats(0.01, 0.99))
    priors = {f"e{i}": draw(prob) for i in range(n_events)}
    kinds = ["and", "or", "atleast", "inhibit"] + (["not"] if allow_not else [])
    gates: list[Gate] = []
    n_gates = draw(st.integers(1, max_gates))
    for j in range(n_gates):
        pool = list(priors) + [g.id for g in gates]
        # The last gate reads at least the previous one, so the tree hangs together.
        kind = draw(st.sampled_from(kinds))
        if kind == "not":
            gates.append(Gate(f"g{j}", "", "not", (draw(st.sampled_from(pool)),)))
            continue
        if kind == "inhibit" and len(pool) >= 2:
            a, b = draw(st.permutations(pool))[:2]
            gates.append(Gate(f"g{j}", "", "inhibit", (a,), condition=b))
            continue
        if kind == "inhibit":
            kind = "or"
        width = draw(st.integers(1, min(4, len(pool))))
        inputs = tuple(draw(st.permutations(pool))[:width])
        # A repeated event: sometimes read an input a second time through another gate.
        k = draw(st.integers(1, width)) if kind == "atleast" else None
        unlisted = draw(st.sampled_from([None, None, 0.05, 0.3])) if kind == "or" else None
        gates.append(Gate(f"g{j}", "", kind, inputs, k=k, unlisted=unlisted))
    return tree(gates[-1].id, gates, priors)


def as_sets(analysis) -> set[frozenset[str]]:
    return {frozenset(c.events) for c in analysis.cut_sets}


# --------------------------------------------------------------------------- NUREG-0492 trees

P_A, P_B, P_C = 0.1, 0.2, 0.3


def test_or_gate_union_formula():
    # NUREG-0492 ch. VI: P(A + B) = P(A) + P(B) - P(A)P(B); ch. VII: the cut sets of an
    # OR gate are its inputs.
    model = tree("t", [Gate("t", "", "or", ("A", "B"))], {"A": P_A, "B": P_B})
    a = minimal_cut_sets(model)
    assert as_sets(a) == {frozenset({"A"}), frozenset({"B"})}
    assert FaultTreeBdd.from_model(model).probability() == pytest.approx(P_A + P_B - P_A * P_B, abs=1e-15)
    assert a.rare_event == pytest.approx(P_A + P_B, abs=1e-15)  # NUREG-0492 ch. VII rare-event
    assert a.mcub == pytest.approx(1 - (1 - P_A) * (1 - P_B), abs=1e-15)  # ch. VII upper bound


def test_and_gate_product_formula():
    # NUREG-0492 ch. VI: P(A.B) = P(A)P(B) for independent events; one cut set {A, B}.
    model = tree("t", [Gate("t", "", "and", ("A", "B", "C"))], {"A": P_A, "B": P_B, "C": P_C})
    a = minimal_cut_sets(model)
    assert as_sets(a) == {frozenset({"A", "B", "C"})}
    assert a.cut_sets[0].order == 3
    assert a.cut_sets[0].probability == pytest.approx(P_A * P_B * P_C, abs=1e-15)
    assert FaultTreeBdd.from_model(model).probability() == pytest.approx(P_A * P_B * P_C, abs=1e-15)


def test_two_out_of_three_voting_gate():
    # NUREG-0492 ch. VII (k-out-of-n gate): 2-of-3 has cut sets AB, AC, BC; for equal
    # probabilities p, P = 3p^2 - 2p^3 (binomial sum; common practice).
    p = 0.1
    model = tree("t", [Gate("t", "", "atleast", ("A", "B", "C"), k=2)], {"A": p, "B": p, "C": p})
    a = minimal_cut_sets(model)
    assert as_sets(a) == {frozenset(s) for s in ({"A", "B"}, {"A", "C"}, {"B", "C"})}
    assert FaultTreeBdd.from_model(model).probability() == pytest.approx(3 * p**2 - 2 * p**3, abs=1e-15)
    assert a.rare_event == pytest.approx(3 * p**2, abs=1e-15)
    assert a.mcub == pytest.approx(1 - (1 - p**2) ** 3, abs=1e-15)


def test_repeated_event_is_reduced_by_absorption():
    # NUREG-0492 ch. VII, Boolean reduction: (A + B)(A + C) = A + BC, so the minimal cut
    # sets are {A} and {B, C} and P = P(A) + P(B)P(C) - P(A)P(B)P(C).
    gates = [Gate("g1", "", "or", ("A", "B")), Gate("g2", "", "or", ("A", "C")), Gate("t", "", "and", ("g1", "g2"))]
    model = tree("t", gates, {"A": P_A, "B": P_B, "C": P_C})
    a = minimal_cut_sets(model)
    assert as_sets(a) == {frozenset({"A"}), frozenset({"B", "C"})}
    exact = P_A + P_B * P_C - P_A * P_B * P_C
    assert FaultTreeBdd.from_model(model).probability() == pytest.approx(exact, abs=1e-15)
    assert a.rare_event == pytest.approx(P_A + P_B * P_C, abs=1e-15)
    # NUREG-0492 ch. VII: exact <= MCUB <= rare-event approximation for a coherent tree.
    assert exact <= a.mcub + 1e-15 and a.mcub <= a.rare_event + 1e-15


def test_inhibit_gate_and_unlisted_cause():
    # NUREG-0492 ch. IV: an INHIBIT gate is its input AND the condition. The unlisted
    # causes of an OR gate are one more root event under it (our model's leak).
    gates = [Gate("g1", "", "inhibit", ("A",), condition="C"), Gate("t", "", "or", ("g1", "B"), unlisted=0.01)]
    model = tree("t", gates, {"A": P_A, "B": P_B, "C": P_C})
    a = minimal_cut_sets(model)
    assert as_sets(a) == {frozenset({"A", "C"}), frozenset({"B"}), frozenset({unlisted_id("t")})}
    exact = 1 - (1 - P_A * P_C) * (1 - P_B) * (1 - 0.01)
    assert FaultTreeBdd.from_model(model).probability() == pytest.approx(exact, abs=1e-15)


def test_not_gate_drops_negated_events_and_keeps_exact_probability():
    # A.(not B): the prime implicant A.B' loses its negated literal (coherent approximation).
    gates = [Gate("nb", "", "not", ("B",)), Gate("t", "", "and", ("A", "nb"))]
    model = tree("t", gates, {"A": P_A, "B": P_B})
    a = minimal_cut_sets(model)
    assert not a.coherent
    assert as_sets(a) == {frozenset({"A"})}
    assert FaultTreeBdd.from_model(model).probability() == pytest.approx(P_A * (1 - P_B), abs=1e-15)


def test_sorted_by_probability_then_order_then_ids():
    gates = [Gate("t", "", "or", ("e10", "e2", "g"))] + [Gate("g", "", "and", ("e3", "e4"))]
    model = tree("t", gates, {"e10": 0.1, "e2": 0.1, "e3": 0.5, "e4": 0.6})
    events = [c.events for c in minimal_cut_sets(model).cut_sets]
    # 0.3 first; then the two 0.1 singletons in natural id order (e2 before e10).
    assert events == [("e3", "e4"), ("e2",), ("e10",)]


def test_variable_order_is_depth_first_from_the_top():
    gates = [Gate("t", "", "or", ("g1", "A")), Gate("g1", "", "and", ("B", "g2")), Gate("g2", "", "or", ("C", "A"))]
    model = tree("t", gates, {"A": 0.1, "B": 0.1, "C": 0.1, "D": 0.1})
    assert variable_order(model) == ("B", "C", "A")  # D is not under the top


# --------------------------------------------------------------------------- brute force


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(fault_trees())
def test_cut_sets_match_brute_force(model):
    # Brute-force enumeration of all 2^n root states (independent of the BDD).
    a = minimal_cut_sets(model)
    reported = as_sets(a)
    assert len(reported) == len(a.cut_sets)  # no duplicates
    assert reported == brute_force_minimal_sets(model)
    roots = list(model.hypotheses)
    states, weight = all_states(model)
    top = gate_values(model, states)
    # every failing state contains a reported set
    for row in states[top]:
        failed = {r for r, on in zip(roots, row) if on}
        assert any(s <= failed for s in reported)
    assert a.total_count == len(reported)
    for c in a.cut_sets:
        assert c.probability == pytest.approx(math.prod(model.prior_of(e) for e in c.events), abs=1e-15)
    assert a.rare_event == pytest.approx(sum(c.probability for c in a.cut_sets), abs=1e-12)
    assert a.mcub == pytest.approx(1 - math.prod(1 - c.probability for c in a.cut_sets), abs=1e-12)
    assert FaultTreeBdd.from_model(model).probability() == pytest.approx(float(weight[top].sum()), abs=1e-12)
    # Coherence by brute force: no state where failing one more root repairs the top.
    monotone = True
    for i in range(len(roots)):
        raised = states.copy()
        raised[:, i] = True
        monotone &= not np.any(top & ~gate_values(model, raised))
    assert a.coherent == monotone
    if a.coherent:
        # NUREG-0492 ch. VII: P(top) <= MCUB for a coherent tree (Esary-Proschan bound).
        assert float(weight[top].sum()) <= a.mcub + 1e-12


@settings(max_examples=80, deadline=None)
@given(fault_trees(allow_not=False), st.integers(1, 3), st.sampled_from([None, 1e-3, 0.01, 0.05]))
def test_truncation_keeps_exactly_the_passing_sets_and_bounds_what_it_drops(model, max_order, floor):
    # Reference: the brute-force minimal sets, filtered by the same rule by hand.
    full = brute_force_minimal_sets(model)
    a = minimal_cut_sets(model, max_order=max_order, min_probability=floor)

    def prob(s):
        return math.prod(model.prior_of(e) for e in s)

    kept = {s for s in full if len(s) <= max_order and (floor is None or prob(s) >= floor)}
    assert as_sets(a) == kept
    assert a.truncated == (kept != full)
    dropped = sum(prob(s) for s in full - kept)
    assert a.dropped_probability_bound == pytest.approx(dropped, abs=1e-12)
    # The bound covers the probability actually lost: P(top) - P(union of kept sets).
    roots = list(model.hypotheses)
    states, weight = all_states(model)
    p_top = float(weight[gate_values(model, states)].sum())
    idx = {r: i for i, r in enumerate(roots)}
    kept_union = np.zeros(len(states), bool)
    for s in kept:
        kept_union |= np.all(states[:, [idx[e] for e in s]], axis=1) if s else True
    assert p_top - float(weight[kept_union].sum()) <= a.dropped_probability_bound + 1e-12
    # the rare-event and MCUB figures still cover every set
    assert a.rare_event == pytest.approx(sum(prob(s) for s in full), abs=1e-12)


def test_listing_too_many_sets_is_refused_with_advice():
    # 2-of-12 voting has C(12,2) = 66 minimal cut sets (binomial count).
    priors = {f"e{i}": 0.01 for i in range(12)}
    model = tree("t", [Gate("t", "", "atleast", tuple(priors), k=2)], priors)
    assert minimal_cut_sets(model).total_count == math.comb(12, 2)
    with pytest.raises(TooManyCutSets) as info:
        minimal_cut_sets(model, list_limit=50)
    assert "66" in str(info.value) and "--min-probability" in str(info.value)
    # three orders: 1-of-3 (3 sets) OR 2-of-12 (66) -> advice names --max-order 1
    gates = [Gate("t", "", "or", ("v", "w")), Gate("v", "", "atleast", tuple(priors), k=2),
             Gate("w", "", "or", ("a", "b", "c"))]
    model2 = tree("t", gates, {**priors, "a": 0.1, "b": 0.1, "c": 0.1})
    with pytest.raises(TooManyCutSets) as info:
        minimal_cut_sets(model2, list_limit=50)
    assert "--max-order 1" in str(info.value)
    assert len(minimal_cut_sets(model2, max_order=1, list_limit=50).cut_sets) == 3


def test_a_very_wide_voting_gate_is_counted_without_listing():
    # 5-of-60 voting: C(60,5) = 5,461,512 minimal cut sets (binomial count), counted
    # exactly on the cut-set diagram, refused for listing.
    priors = {f"e{i}": 1e-3 for i in range(60)}
    model = tree("t", [Gate("t", "", "atleast", tuple(priors), k=5)], priors)
    with pytest.raises(TooManyCutSets) as info:
        minimal_cut_sets(model)
    assert "5,461,512" in str(info.value)
    # probability truncation below every set keeps none and says so
    a = minimal_cut_sets(model, min_probability=1e-14)
    assert a.cut_sets == () and a.truncated
    assert a.count_by_order == {5: math.comb(60, 5)}
    assert a.rare_event == pytest.approx(math.comb(60, 5) * 1e-15, rel=1e-12)


# --------------------------------------------------------------------------- Aralia benchmarks


def read_benchmark(name: str) -> Model:
    model, _ = read_mef(aralia_path(name))
    return model


# Published by Rauzy et al., RESS 79(1), 2003, as tabled in openpra-org/generic-openpsa-models
# (copied in ../shared/benchmarks/aralia/README.md).
ARALIA = {
    "chinese": ({2: 12, 4: 24, 5: 188, 6: 168}, 392, 1.17058e-03),
    "baobab2": ({2: 6, 3: 121, 4: 268, 5: 630, 6: 3780}, 4805, 7.13018e-04),
    "das9201": (None, 14217, 1.34237e-02),
}


@pytest.mark.parametrize("name", sorted(ARALIA))
def test_aralia_cut_set_counts_and_top_probability(name):
    by_order, count, p_top = ARALIA[name]
    model = read_benchmark(name)
    a = minimal_cut_sets(model)
    assert not a.truncated
    assert a.total_count == count == len(a.cut_sets)
    if by_order is not None:
        assert a.count_by_order == by_order
        assert {o: sum(1 for c in a.cut_sets if c.order == o) for o in by_order} == by_order
    # Published to 6 significant figures.
    assert FaultTreeBdd.from_model(model).probability() == pytest.approx(p_top, rel=5e-6)


def test_das9201_rare_event_and_upper_bound():
    # Rauzy et al. 2003 (as tabled in openpra-org/generic-openpsa-models): rare-event
    # approximation 1.79689E-02, minimal cut set upper bound 1.78089E-02.
    a = minimal_cut_sets(read_benchmark("das9201"))
    assert a.rare_event == pytest.approx(1.79689e-02, rel=5e-6)
    assert a.mcub == pytest.approx(1.78089e-02, rel=5e-6)


def test_das9201_truncation_by_order_matches_the_full_count_by_order():
    model = read_benchmark("das9201")
    full = minimal_cut_sets(model)
    a = minimal_cut_sets(model, max_order=3)
    expected = sum(c for o, c in full.count_by_order.items() if o <= 3)
    assert len(a.cut_sets) == expected and a.truncated
    dropped = math.fsum(c.probability for c in full.cut_sets if c.order > 3)
    assert a.dropped_probability_bound == pytest.approx(dropped, rel=1e-9)
    assert a.mcub == pytest.approx(full.mcub, rel=1e-12)
    assert set(itertools.islice((c.events for c in a.cut_sets), 10)) <= {c.events for c in full.cut_sets}
