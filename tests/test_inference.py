"""The exact engine against brute-force enumeration, handbook formulas,
reference libraries and the published Aralia figures."""

from __future__ import annotations

import math
import random
import warnings
from math import comb

import numpy as np
import pytest
from conftest import aralia_path
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bruteforce import posterior as brute_posterior
from randommodels import random_findings, random_model
from troubleshoot.errors import ImpossibleFindings, NetworkTooLarge, SessionError
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model
from troubleshoot.engine.network import build_network

TOL = 1e-9



@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10**6), n_events=st.integers(2, 9), n_gates=st.integers(1, 6),
       n_repairs=st.integers(0, 2))
def test_marginals_and_log_p_equal_brute_force(seed, n_events, n_gates, n_repairs):
    # Reference: brute-force enumeration over every root state (tests/bruteforce.py).
    model = random_model(seed, n_events=n_events, n_gates=n_gates, n_checks=4)
    rng = random.Random(seed)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], min(n_repairs, n_events)))
    findings = random_findings(model, rng, repairs)
    ref = brute_posterior(model, findings, repairs)
    engine = Engine(model)
    if ref["log_p"] == -math.inf:
        with pytest.raises(ImpossibleFindings):
            engine.propagate(findings, repairs)
        return
    post = engine.propagate(findings, repairs)
    assert post.log_p == pytest.approx(ref["log_p"], abs=TOL)
    got = post.marginals
    for node, p in ref["marginals"].items():
        assert got[node] == pytest.approx(p, abs=TOL), node


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10**6), n_repairs=st.integers(0, 2))
def test_check_family_joint_equals_brute_force(seed, n_repairs):
    # P(c | findings) over each check's causes, by enumeration (tests/bruteforce.py).
    model = random_model(seed, n_events=7, n_gates=5, n_checks=5)
    rng = random.Random(seed)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], n_repairs))
    findings = [Finding(model.top, 1, 0)]
    ref = brute_posterior(model, findings, repairs)
    if ref["log_p"] == -math.inf:
        return
    post = Engine(model).propagate(findings, repairs)
    values = ref["values"][len(repairs)]
    for check in model.checks:
        fam = post.family(check.id)
        joint, p_abn = post.check_family(check.id)
        # Enumerate the family's joint directly from the root states; a derived
        # node "g~r1..." carries gate g as it is after the repairs.
        states = np.zeros(len(ref["joint"]), dtype=np.int64)
        for node in fam.nodes:
            states = states * 2 + values[node.split("~")[0]].astype(np.int64)
        expected = np.bincount(states, weights=ref["joint"], minlength=2 ** len(fam.nodes))
        np.testing.assert_allclose(joint, expected, atol=TOL)
        assert p_abn.shape == joint.shape


def test_repair_then_still_fails_counts_under_multiple_faults():
    # Two parallel faults under an OR: replacing one, the unit still failing
    # means the other has failed. Hand computation: P(b | a or b, (not b) is false) = 1.
    a = BasicEvent("a", "a", 0.1)
    b = BasicEvent("b", "b", 0.1)
    top = Gate("top", "unit fails", "or", ("a", "b"))
    model = Model(name="two", top="top", gates=(top,), basic_events=(a, b))
    post = Engine(model).propagate([Finding("top", 1, 0), Finding("top", 1, 1)], repairs=("a",))
    assert post.p_failed("b") == pytest.approx(1.0, abs=TOL)
    # b must have failed; a's own state says nothing more, so it keeps its prior
    # (hand computation). Now, after the repair, a is working.
    assert post.p_failed("a", epoch=0) == pytest.approx(0.1, abs=TOL)
    assert post.p_failed("a") == 0.0
    before = Engine(model).propagate([Finding("top", 1, 0)])
    # P(a | top) before any repair: 0.1 / (1 - 0.9**2) by Bayes' rule.
    assert before.p_failed("a") == pytest.approx(0.1 / 0.19, abs=TOL)
    fixed = Engine(model).propagate([Finding("top", 1, 0), Finding("top", 0, 1)], repairs=("a",))
    assert fixed.p_failed("a", epoch=0) == pytest.approx(1.0, abs=TOL)
    assert fixed.p_failed("b") == pytest.approx(0.0, abs=TOL)


# -- textbook cases (NRC Fault Tree Handbook, NUREG-0492, ch. VI) ----------

def _single_gate_model(kind, probs, k=None):
    events = tuple(BasicEvent(f"x{i}", f"x{i}", p) for i, p in enumerate(probs))
    gate = Gate("top", "top", kind, tuple(e.id for e in events), k=k)
    return Model(name=kind, top="top", gates=(gate,), basic_events=events)


def test_and_gate_is_the_product():
    probs = [0.1, 0.2, 0.3, 0.05, 0.5]
    p = Engine(_single_gate_model("and", probs)).propagate().p_failed("top")
    assert p == pytest.approx(np.prod(probs), rel=1e-12)


def test_or_gate_is_one_minus_product_of_complements():
    probs = [1e-3, 2e-3, 5e-4, 0.01, 0.02, 1e-5, 0.3]
    p = Engine(_single_gate_model("or", probs)).propagate().p_failed("top")
    assert p == pytest.approx(1 - np.prod(1 - np.array(probs)), rel=1e-12)


@pytest.mark.parametrize("k,n", [(2, 3), (3, 5), (1, 4), (4, 4), (5, 9)])
def test_voting_gate_is_the_binomial_sum(k, n):
    p = 0.07
    got = Engine(_single_gate_model("atleast", [p] * n, k)).propagate().p_failed("top")
    expected = sum(comb(n, j) * p**j * (1 - p) ** (n - j) for j in range(k, n + 1))
    assert got == pytest.approx(expected, rel=1e-12)


def test_wide_gates_have_bounded_tables():
    # A 40-input OR and a 10-of-20 voting gate: no table grows as 2^width
    # (a counter's tables grow with log2(k) only).
    or_model = _single_gate_model("or", [0.01] * 40)
    vote_model = _single_gate_model("atleast", [0.1] * 20, k=10)
    for model, largest in ((or_model, 16), (vote_model, 64)):
        net = build_network(model)
        assert max(d["table"].size for _, d in net.graph.nodes(data=True)) <= largest
        assert Engine(model).tree.width <= 10
    # Binomial sum (NUREG-0492, ch. VI).
    p = Engine(vote_model).propagate().p_failed("top")
    assert p == pytest.approx(sum(comb(20, j) * 0.1**j * 0.9 ** (20 - j) for j in range(10, 21)), rel=1e-10)


@pytest.mark.parametrize("k", [4, 5])
def test_counter_voting_gate_with_findings_and_repair_equals_brute_force(k):
    # Unequal probabilities, a check on an input and a repair: brute force (tests/bruteforce.py).
    probs = [0.3, 0.1, 0.5, 0.2, 0.4, 0.25, 0.35, 0.15, 0.45]
    events = tuple(BasicEvent(f"x{i}", f"x{i}", p) for i, p in enumerate(probs))
    gate = Gate("top", "top", "atleast", tuple(e.id for e in events), k=k)
    checks = (Check("c", "c", 1.0, ("n", "a"), (Cause("x2", 0.8), Cause("top", 0.5)), false_alarm=0.05),)
    model = Model(name="vote", top="top", gates=(gate,), basic_events=events, checks=checks)
    findings = [Finding("top", 1, 0), Finding("c", 1, 0), Finding("c", 0, 1)]
    ref = brute_posterior(model, findings, ("x2",))
    post = Engine(model).propagate(findings, ("x2",))
    assert post.log_p == pytest.approx(ref["log_p"], abs=TOL)
    for node, p in ref["marginals"].items():
        assert post.marginals[node] == pytest.approx(p, abs=TOL), node


# -- numerics ----------------------------------------------------------------

def test_tiny_and_many_findings_stay_finite():
    # 40 findings of probability about 1e-6 each, and one of about 1e-12.
    events = tuple(BasicEvent(f"e{i}", f"e{i}", 0.5) for i in range(40))
    gates = (Gate("top", "top", "or", tuple(e.id for e in events)),)
    checks = tuple(Check(f"c{i}", f"c{i}", 1.0, ("normal", "abnormal"), (Cause(f"e{i}", 1e-6),), false_alarm=0.0)
                   for i in range(40))
    checks += (Check("rare", "rare", 1.0, ("normal", "abnormal"), (Cause("e0", 1e-12),)),)
    model = Model(name="tiny", top="top", gates=gates, basic_events=events, checks=checks)
    engine = Engine(model)
    findings = [Finding(f"c{i}", 1) for i in range(40)] + [Finding("rare", 1)]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        post = engine.propagate(findings)
    # P = prod_i (0.5 * 1e-6) * 1e-12 given e0 failed (already forced), by hand.
    expected = 40 * math.log(0.5 * 1e-6) + math.log(1e-12)
    assert post.log_p == pytest.approx(expected, rel=1e-9)
    marg = post.root_marginals()
    assert np.all(np.isfinite(marg)) and np.allclose(marg, 1.0)


def test_impossible_findings_name_the_conflict():
    a = BasicEvent("a", "a", 0.2)
    b = BasicEvent("b", "b", 0.2)
    gates = (Gate("top", "top", "and", ("a", "b")),)
    checks = (Check("ca", "look at a", 1.0, ("fine", "bad"), (Cause("a", 1.0),)),
              Check("cb", "look at b", 1.0, ("fine", "bad"), (Cause("b", 0.5),), false_alarm=0.1))
    model = Model(name="conflict", top="top", gates=gates, basic_events=(a, b), checks=checks)
    engine = Engine(model)
    before = engine.propagate([Finding("top", 1)])
    with pytest.raises(ImpossibleFindings) as err:
        engine.propagate([Finding("top", 1), Finding("cb", 1), Finding("ca", 0)])
    assert err.value.conflict == ["top=failed", "ca=fine"]
    assert "top=failed" in str(err.value) and "ca=fine" in str(err.value)
    after = engine.propagate([Finding("top", 1)])
    assert after.log_p == before.log_p
    with pytest.raises(SessionError):
        engine.propagate([Finding("nope", 1)])


def test_findings_do_not_recompile():
    model = random_model(5)
    engine = Engine(model)
    tree = engine.tree
    for check in model.checks:
        engine.propagate([Finding(model.top, 1), Finding(check.id, 1)])
    assert engine.compiled(())[1] is tree


def test_too_large_is_refused_before_allocation():
    # Every check reads all 30 causes: one clique of 2^30 entries.
    events = tuple(BasicEvent(f"e{i}", f"e{i}", 0.1) for i in range(30))
    gates = (Gate("top", "top", "or", tuple(e.id for e in events)),)
    checks = (Check("all", "all", 1.0, ("n", "a"), tuple(Cause(e.id, 0.9) for e in events)),)
    model = Model(name="huge", top="top", gates=gates, basic_events=events, checks=checks)
    with pytest.raises(NetworkTooLarge) as err:
        Engine(model, memory_budget=64 * 1024**2, kind="join tree")
    text = str(err.value)
    assert "width 30" in text and "MiB" in text and "e0" in text


# -- reference libraries on exported XMLBIF -----------------------------------

def _demo_models():
    from troubleshoot.model.demos import DEMOS, demo_path

    out = []
    for name in DEMOS:
        path = demo_path(name)
        if path.is_file():
            from troubleshoot.model.xmlfile import load_model

            out.append(load_model(path))
    return out


def _reference_models():
    return _demo_models() + [random_model(s, n_events=8, n_gates=6, n_checks=5) for s in (11, 12)]


def _random_check_findings(model, rng, count):
    checks = list(model.checks + model.symptoms)
    return [Finding(c.id, rng.randrange(len(c.outcomes))) for c in rng.sample(checks, min(count, len(checks)))]


def _consistent_findings(engine, model, rng):
    for _ in range(50):
        findings = [Finding(model.top, 1)] + _random_check_findings(model, rng, 4)
        try:
            return findings, engine.propagate(findings)
        except ImpossibleFindings:
            continue
    raise AssertionError("no consistent findings drawn")


def _evidence_by_name(model, findings):
    ev = {}
    for f in findings:
        if f.target in model.check_by_id:
            ev[f.target] = model.check_by_id[f.target].outcomes[f.outcome]
        else:
            ev[f.target] = ("ok", "failed")[f.outcome]
    return ev


def test_pyagrum_lazy_propagation_agrees(tmp_path):
    # Reference: pyAgrum LazyPropagation on our XMLBIF export.
    gum = pytest.importorskip("pyagrum")
    from troubleshoot.engine.xmlbif import network_to_xmlbif

    rng = random.Random(7)
    for model in _reference_models():
        path = tmp_path / f"{model.name}.bifxml"
        path.write_bytes(network_to_xmlbif(build_network(model)))
        bn = gum.loadBN(str(path))
        engine = Engine(model)
        for _ in range(3):
            findings, post = _consistent_findings(engine, model, rng)
            ie = gum.LazyPropagation(bn)
            ie.setEvidence(_evidence_by_name(model, findings))
            ie.makeInference()
            for node, p in post.marginals.items():
                assert ie.posterior(node)[1] == pytest.approx(p, abs=TOL), (model.name, node)
            assert math.log(ie.evidenceProbability()) == pytest.approx(post.log_p, abs=1e-7)


def test_pgmpy_variable_elimination_agrees(tmp_path):
    # Reference: pgmpy VariableElimination on our XMLBIF export.
    pytest.importorskip("pgmpy")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from pgmpy.inference import VariableElimination
        from pgmpy.readwrite import XMLBIFReader
    from troubleshoot.engine.xmlbif import network_to_xmlbif

    rng = random.Random(8)
    for model in _reference_models():
        path = tmp_path / f"{model.name}.xml"
        path.write_bytes(network_to_xmlbif(build_network(model)))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            bn = XMLBIFReader(str(path)).get_model()
        ve = VariableElimination(bn)
        engine = Engine(model)
        findings, post = _consistent_findings(engine, model, rng)
        evidence = _evidence_by_name(model, findings)
        targets = [g for g in list(post.marginals) if g not in evidence][:25]
        for node in targets:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                q = ve.query([node], evidence=evidence, show_progress=False)
            p_failed = float(q.values[q.state_names[node].index("failed")])
            assert p_failed == pytest.approx(post.marginals[node], abs=TOL), (model.name, node)


# -- the public Aralia benchmark trees ----------------------------------------

# Published P(top), Rauzy et al., RESS 79(1), 2003, as tabled in
# openpra-org/generic-openpsa-models (shared/benchmarks/aralia/README.md).
ARALIA_P_TOP = {"chinese.xml": "1.17058E-03", "baobab2.xml": "7.13018E-04", "das9201.xml": "1.34237E-02"}


@pytest.mark.parametrize("file_name", sorted(ARALIA_P_TOP))
def test_aralia_top_event_probability(file_name):
    from troubleshoot.model.mef.read import read_mef

    model, _ = read_mef(str(aralia_path(file_name)))
    p = Engine(model).propagate().p_failed(model.top)
    assert f"{p:.5E}" == ARALIA_P_TOP[file_name]


def test_many_repairs_with_the_unit_still_failing_stay_exact_and_small():
    # Six repairs, the unit still failing after each, then working; checks
    # before and between repairs. Reference: brute force (tests/bruteforce.py).
    model = random_model(21, n_events=9, n_gates=6, n_checks=5)
    model = Model(name=model.name, top=model.top, basic_events=model.basic_events, checks=model.checks,
                  gates=tuple(g if g.kind != "not" else Gate(g.id, g.label, "or", g.inputs) for g in model.gates))
    engine = Engine(model)
    rng = random.Random(3)
    repairs: tuple[str, ...] = ()
    findings = [Finding(model.top, 1, 0)]
    for event in [e.id for e in model.basic_events][:6]:
        findings.append(Finding(rng.choice(model.checks).id, rng.randint(0, 1), len(repairs)))
        trial_repairs = repairs + (event,)
        trial = findings + [Finding(model.top, 1, len(trial_repairs))]
        if brute_posterior(model, trial, trial_repairs)["log_p"] == -math.inf:
            break
        repairs, findings = trial_repairs, trial
    ref = brute_posterior(model, findings, repairs)
    if ref["log_p"] == -math.inf:
        pytest.skip("drawn findings are impossible")  # not expected for this seed
    post = engine.propagate(findings, repairs)
    assert post.log_p == pytest.approx(ref["log_p"], abs=TOL)
    for node, p in ref["marginals"].items():
        assert post.marginals[node] == pytest.approx(p, abs=TOL), node
    assert post.tree.width <= 2 * engine.tree.width + 2
