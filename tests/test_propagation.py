"""The level-by-level join-tree propagation against plain variable elimination.

Reference: sum-product variable elimination (Zhang & Poole 1994; Koller &
Friedman 2009, algorithm 9.1) written here over the network's conditional
tables, one query at a time, with a greedy min-degree order. Check findings
enter as noisy-OR likelihoods computed here from the model's checks (Pearl
1988: P(abnormal | c) = 1 - (1 - leak) * prod over present causes of
(1 - detection)). Shapes: deep chains (a deep join tree, many levels), wide
ORs (a parent with many children, several rounds per level), many repeated
events, and the seeded synthetic trees of the benchmark. Tolerance 1e-12:
both are exact and differ only by rounding.
"""

from __future__ import annotations

import math
import random

import numpy as np
import pytest

from troubleshoot.advice.ranking import entropy_bits, rank
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.engine.jointree import JoinTree
from troubleshoot.engine.network import build_network
from troubleshoot.errors import ImpossibleFindings
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model
from troubleshoot.study.synthetic import synthetic_model

TOL = 1e-12


# -- the reference ----------------------------------------------------------


def _multiply(factors):
    """Product of factors (variables, table), as one factor over the union of their variables."""
    names = list(dict.fromkeys(v for vs, _ in factors for v in vs))
    number = {v: i for i, v in enumerate(names)}
    operands = []
    for vs, table in factors:
        operands += [table, [number[v] for v in vs]]
    return tuple(names), np.einsum(*operands, list(range(len(names))))


def _sum_out(factor, v):
    vs, table = factor
    axis = vs.index(v)
    return vs[:axis] + vs[axis + 1:], table.sum(axis=axis)


def _min_degree_order(factors):
    nbrs: dict[str, set[str]] = {}
    for vs, _ in factors:
        for v in vs:
            nbrs.setdefault(v, set()).update(x for x in vs if x != v)
    order = []
    while nbrs:
        v = min(nbrs, key=lambda x: (len(nbrs[x]), x))
        order.append(v)
        around = nbrs.pop(v)
        for a in around:
            nbrs[a].discard(v)
            nbrs[a].update(around - {a})
    return order


def _eliminate(factors, order, query):
    """Unnormalised joint over ``query`` (axes in that order) by variable elimination."""
    holding: dict[str, list[int]] = {}
    store = dict(enumerate(factors))
    for i, (vs, _) in store.items():
        for v in vs:
            holding.setdefault(v, []).append(i)
    next_id = len(store)
    for v in order:
        if v in query:
            continue
        ids = [i for i in holding.pop(v, []) if i in store]
        if not ids:
            continue
        new = _sum_out(_multiply([store.pop(i) for i in ids]), v)
        store[next_id] = new
        for x in new[0]:
            holding.setdefault(x, []).append(next_id)
        next_id += 1
    vs, table = _multiply(list(store.values()) + [((), np.ones(()))])
    return np.transpose(table, [vs.index(q) for q in query]) if query else table


def _noisy_or(check: Check, node_of) -> tuple[tuple[str, ...], np.ndarray]:
    """P(abnormal | causes) over the check's distinct cause nodes (Pearl 1988, with a leak)."""
    nodes = tuple(dict.fromkeys(node_of(c.target) for c in check.causes))
    states = np.indices((2,) * len(nodes)).reshape(len(nodes), -1)
    p_normal = np.full(states.shape[1], 1.0 - check.false_alarm)
    for cause in check.causes:
        p_normal = p_normal * np.where(states[nodes.index(node_of(cause.target))] == 1, 1.0 - cause.detection, 1.0)
    return nodes, (1.0 - p_normal).reshape((2,) * len(nodes))


class Reference:
    """Marginals, joints and P(findings) of a network with findings, by variable elimination."""

    def __init__(self, model: Model, findings: list[Finding], repairs=()):
        net = build_network(model, tuple(repairs), with_checks=False)
        self.factors = []
        for v, data in net.graph.nodes(data=True):
            self.factors.append(((*data["parents"], v), np.asarray(data["table"], dtype=float)))
        for f in findings:
            if f.target in model.check_by_id:
                assert f.epoch == 0, "check findings are read at epoch 0 here"
                nodes, p_abnormal = _noisy_or(model.check_by_id[f.target], lambda t: t)
                self.factors.append((nodes, p_abnormal if f.outcome == 1 else 1.0 - p_abnormal))
            else:
                node = net.node_for(f.target, f.epoch)
                self.factors.append(((node,), np.array([1.0 - f.outcome, float(f.outcome)])))
        self.order = _min_degree_order(self.factors)
        self.p_findings = float(_eliminate(self.factors, self.order, ()))

    def joint(self, variables: tuple[str, ...]) -> np.ndarray:
        return _eliminate(self.factors, self.order, variables) / self.p_findings

    def marginal(self, v: str) -> float:
        return float(self.joint((v,))[1])


# -- the shapes -------------------------------------------------------------


def _events(n: int, rng: random.Random) -> list[BasicEvent]:
    return [BasicEvent(f"e{i}", f"event {i}", rng.choice([0.01, 0.05, 0.1, 0.2, 0.3])) for i in range(n)]


def _checks_on(targets: list[list[str]], rng: random.Random) -> tuple[Check, ...]:
    return tuple(
        Check(f"t{i}", f"check {i}", float(rng.randint(1, 20)), ("normal", "abnormal"),
              tuple(Cause(t, rng.choice([0.6, 0.9, 0.99])) for t in group), false_alarm=rng.choice([0.0, 0.02]))
        for i, group in enumerate(targets)
    )


def chain_model(n: int, seed: int) -> Model:
    """g_i = OR/AND(e_i, g_(i-1)) alternating: a chain as deep as the tree, a check on every third gate."""
    rng = random.Random(seed)
    events = _events(n, rng)
    gates = [Gate("g0", "gate 0", "or", ("e0", "e1"))]
    for i in range(2, n):
        gates.append(Gate(f"g{i - 1}", f"gate {i - 1}", "or" if i % 3 else "and", (f"e{i}", f"g{i - 2}")))
    groups = [[g.id] for g in gates[::3]] + [[f"e{i}", gates[min(i, len(gates) - 1)].id] for i in range(0, n, 7)]
    return Model(name=f"chain{n}", top=gates[-1].id, gates=tuple(gates), basic_events=tuple(events),
                 checks=_checks_on(groups, rng))


def wide_or_model(n: int, seed: int) -> Model:
    """One OR over many events and small AND gates, checks over three inputs each."""
    rng = random.Random(seed)
    events = _events(n, rng)
    ands = [Gate(f"a{j}", f"pair {j}", "and", (f"e{2 * j}", f"e{2 * j + 1}")) for j in range(n // 6)]
    inputs = tuple(g.id for g in ands) + tuple(f"e{i}" for i in range(2 * len(ands), n))
    top = Gate("top", "all lost", "or", inputs, unlisted=0.01)
    groups = [list(rng.sample(inputs, 3)) for _ in range(n // 3)]
    return Model(name=f"wide{n}", top="top", gates=(*ands, top), basic_events=tuple(events),
                 checks=_checks_on(groups, rng))


SHAPES = [
    ("deep chain", lambda: chain_model(40, 1)),
    ("deep chain, other seed", lambda: chain_model(25, 7)),
    ("wide OR", lambda: wide_or_model(36, 2)),
    ("many repeated events", lambda: synthetic_model(40, seed=3, repeated_rate=0.6)),
    ("synthetic", lambda: synthetic_model(60, seed=5)),
    ("synthetic, voting", lambda: synthetic_model(50, seed=11, voting_rate=0.4)),
]


def _findings(model: Model, engine: Engine, seed: int, count: int = 5) -> list[Finding]:
    rng = random.Random(seed)
    findings = [Finding(model.top, 1)]
    for check in rng.sample(list(model.checks), min(count, len(model.checks))):
        trial = findings + [Finding(check.id, rng.randint(0, 1))]
        try:
            engine.propagate(trial)
        except ImpossibleFindings:
            continue
        findings = trial
    return findings


@pytest.mark.parametrize("name,make", SHAPES, ids=[s[0] for s in SHAPES])
def test_marginals_and_log_p_equal_variable_elimination(name, make):
    model = make()
    engine = Engine(model)
    findings = _findings(model, engine, seed=len(name))
    post = engine.propagate(findings)
    ref = Reference(model, findings)
    # Source: variable elimination above, over the same network.
    assert post.log_p == pytest.approx(math.log(ref.p_findings), abs=TOL)
    for node, p in post.node_marginals().items():
        assert p == pytest.approx(ref.marginal(node), abs=TOL), node


@pytest.mark.parametrize("name,make", SHAPES, ids=[s[0] for s in SHAPES])
def test_batched_cause_joints_equal_variable_elimination(name, make):
    model = make()
    engine = Engine(model)
    findings = _findings(model, engine, seed=len(name) + 1)
    post = engine.propagate(findings)
    ref = Reference(model, findings)
    checks = [c.id for c in model.checks]
    seen = set()
    for batch in post.family_batches(checks):
        for check_id, joint, likelihood in zip(batch.checks, batch.joint, batch.likelihood):
            seen.add(check_id)
            nodes, p_abnormal = _noisy_or(model.check_by_id[check_id], lambda t: t)
            fam_nodes = post.family(check_id).nodes
            # The engine's cause order may differ: read the reference in the engine's order.
            expected = ref.joint(fam_nodes).reshape(-1)
            assert joint == pytest.approx(expected, abs=TOL), check_id
            order = [nodes.index(x) for x in fam_nodes]
            assert likelihood[:, 1] == pytest.approx(np.transpose(p_abnormal, order).reshape(-1), abs=TOL)
            assert likelihood.sum(axis=1) == pytest.approx(np.ones(likelihood.shape[0]), abs=TOL)
    assert seen == set(checks)


def test_ranking_bits_equal_variable_elimination():
    # I(F; T) = H(T) - sum_c P(c) H(T | c) (Cover & Thomas 2006, eq. 2.45), with P(c)
    # from variable elimination and H written here.
    model = wide_or_model(30, 4)
    engine = Engine(model)
    findings = _findings(model, engine, seed=4)
    post = engine.propagate(findings)
    ref = Reference(model, findings)
    done = {f.target for f in findings}
    ranking = rank(post, [c for c in model.checks if c.id not in done])
    assert len(ranking) == len(model.checks) - len(done & set(model.check_by_id))
    for row in ranking.rows:
        nodes, p_abnormal = _noisy_or(model.check_by_id[row.check], lambda t: t)
        pc = ref.joint(nodes).reshape(-1)
        pa = p_abnormal.reshape(-1)
        p_t = float(pc @ pa)

        def h(p):
            return 0.0 if p <= 0.0 or p >= 1.0 else -(p * math.log2(p) + (1 - p) * math.log2(1 - p))

        bits = h(p_t) - sum(w * h(q) for w, q in zip(pc, pa))
        assert row.bits == pytest.approx(max(bits, 0.0) if bits > 1e-12 else 0.0, abs=1e-10), row.check
        assert row.p_outcomes[1] == pytest.approx(p_t, abs=TOL)
        assert sum(row.p_outcomes) == pytest.approx(1.0, abs=TOL)


def test_entropy_over_an_outcome_axis_of_any_length():
    # H of a uniform distribution over K outcomes is log2 K bits (Cover & Thomas 2006, eq. 2.1).
    for k in (1, 2, 3, 5):
        assert entropy_bits(np.full((4, k), 1.0 / k)) == pytest.approx(np.full(4, math.log2(k)), abs=TOL)
    assert entropy_bits(np.array([[1.0, 0.0, 0.0]]))[0] == 0.0


def test_after_a_repair_marginals_equal_variable_elimination():
    model = synthetic_model(30, seed=8)
    engine = Engine(model)
    repaired = model.basic_events[0].id
    findings = [Finding(model.top, 1, 0), Finding(model.top, 1, 1)]
    post = engine.propagate(findings, (repaired,))
    ref = Reference(model, findings, (repaired,))
    assert post.log_p == pytest.approx(math.log(ref.p_findings), abs=TOL)
    for node, p in post.node_marginals().items():
        assert p == pytest.approx(ref.marginal(node), abs=TOL), node


def test_the_shapes_exercise_deep_levels_and_several_rounds():
    # The plans under test: a chain gives many levels, a wide OR a parent with many children.
    chain = JoinTree(build_network(chain_model(40, 1), with_checks=False))
    wide = JoinTree(build_network(wide_or_model(36, 2), with_checks=False), merge_entries=8)
    assert chain.depth >= 5
    assert max(len(level.rounds) for level in wide._levels) >= 3


@pytest.mark.parametrize("merge_entries", [4, 16, 64, 256, 1024])
def test_any_merge_threshold_gives_the_same_marginals(merge_entries):
    model = synthetic_model(40, seed=2, repeated_rate=0.3)
    net = build_network(model, with_checks=False)
    tree = JoinTree(net, merge_entries=merge_entries)
    engine = Engine(model)
    findings = _findings(model, engine, seed=2)
    ref = Reference(model, findings)
    evidence = [engine._evidence(net, tree, f) for f in findings]
    calibrated = tree.propagate([e for e in evidence if hasattr(e, "clique")])
    for v, p in zip(tree.variables, calibrated.marginals()):
        assert p == pytest.approx(ref.marginal(v), abs=TOL), v
