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
from randommodels import random_findings, random_model

from troubleshoot.advice.ranking import rank
from troubleshoot.engine.compiled import ENGINE_NAME
from troubleshoot.engine.inference import JOIN_TREE, Engine, Finding
from troubleshoot.engine.network import build_network
from troubleshoot.engine.observation import outcome_probabilities, sample_outcome
from troubleshoot.errors import ImpossibleFindings, SessionError
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model

TOL = 1e-9  # exact paths (DESIGN.md, Numbers)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10**6), n_events=st.integers(2, 8), n_gates=st.integers(1, 5),
       n_repairs=st.integers(0, 2))
def test_k_outcome_posteriors_log_p_and_bits_equal_brute_force(seed, n_events, n_gates, n_repairs):
    # Reference: tests/bruteforce.py, which enumerates what every cause and the
    # false alarm produce (faulttrees/FORMAT.md), never the cumulative form.
    model = random_model(seed, n_events=n_events, n_gates=n_gates, n_checks=4, max_outcomes=4)
    rng = random.Random(seed)
    repairs = tuple(rng.sample([e.id for e in model.basic_events], min(n_repairs, n_events)))
    findings = random_findings(model, rng, repairs)
    ref = bf.posterior(model, findings, repairs)
    for kind in (JOIN_TREE, ENGINE_NAME):  # the join tree and the compiled decision diagrams
        engine = Engine(model, kind=kind)
        if ref["log_p"] == -math.inf:
            with pytest.raises(ImpossibleFindings):
                engine.propagate(findings, repairs)
            continue
        post = engine.propagate(findings, repairs)
        assert post.log_p == pytest.approx(ref["log_p"], abs=TOL), kind
        for node, p in ref["marginals"].items():
            assert post.marginals[node] == pytest.approx(p, abs=TOL), (kind, node)
        for row in rank(post, [c.id for c in model.checks]).rows:
            want = bf.check_information_bits(model, findings, repairs, row.check)
            assert row.bits == pytest.approx(max(want, 0.0), abs=TOL), (kind, row.check)
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


def test_worked_example_of_format_md_gives_its_figures():
    # faulttrees/FORMAT.md, "the dominance rule": the figures worked out there by hand.
    leak, valves = BasicEvent("leak", "refrigerant leak", 0.1), BasicEvent("valves", "worn valves", 0.1)
    top = Gate("top", "no cooling", "or", ("leak", "valves"))
    check = Check("suction_pressure", "suction", 10.0, ("within the band", "low", "high"),
                  (Cause("leak", shows=(("low", 0.85),)), Cause("valves", shows=(("high", 0.7), ("low", 0.05)))),
                  leak=(("low", 0.02), ("high", 0.02)))
    model = Model(name="fmt", top="top", gates=(top,), basic_events=(leak, valves), checks=(check,))
    table = build_network(model, with_checks=False).families[("suction_pressure", 0)].likelihood()
    np.testing.assert_allclose(table[1, 1], (0.036, 0.258, 0.706), atol=1e-12)
    np.testing.assert_allclose(table[1, 0], (0.144, 0.836, 0.02), atol=1e-12)


# -- format 1.1 against format 1.0 --------------------------------------------

_HEAD = """<?xml version="1.0" encoding="UTF-8"?>
<troubleshooting-model format-version="{version}">
  <metadata><name>pump</name></metadata>
  <top-event ref="top"/>
  <fault-tree>
    <or-gate id="top" unlisted-causes="0.01"><label>no flow</label>
      <input ref="motor"/><input ref="valve"/><input ref="sensor"/></or-gate>
    <basic-event id="motor"><label>motor</label><probability>0.05</probability></basic-event>
    <basic-event id="valve"><label>valve</label><probability>0.02</probability></basic-event>
    <basic-event id="sensor"><label>sensor</label><probability>0.1</probability></basic-event>
  </fault-tree>
  <checks>
{checks}
  </checks>
</troubleshooting-model>
"""

_CHECKS_10 = """
    <check id="amps" cost="5" false-alarm="0.03"><label>amps</label>
      <outcomes normal="normal" abnormal="abnormal"/>
      <cause ref="motor" detection="0.9"/><cause ref="valve" detection="0.35"/></check>
    <check id="look" cost="2" false-alarm="0.1"><label>look</label>
      <outcomes normal="ok" abnormal="bad"/>
      <cause ref="sensor" detection="0.6"/><cause ref="top" detection="0.2"/></check>"""

_CHECKS_11 = """
    <check id="amps" cost="5"><label>amps</label>
      <outcomes normal="normal"><abnormal name="abnormal"/></outcomes>
      <false-alarm outcome="abnormal" probability="0.03"/>
      <cause ref="motor"><shows outcome="abnormal" probability="0.9"/></cause>
      <cause ref="valve"><shows outcome="abnormal" probability="0.35"/></cause></check>
    <check id="look" cost="2"><label>look</label>
      <outcomes normal="ok"><abnormal name="bad"/></outcomes>
      <false-alarm outcome="bad" probability="0.1"/>
      <cause ref="sensor"><shows outcome="bad" probability="0.6"/></cause>
      <cause ref="top"><shows outcome="bad" probability="0.2"/></cause></check>"""


def test_two_outcome_check_in_the_1_1_form_gives_the_figures_of_the_1_0_form(tmp_path):
    from troubleshoot.model.xmlfile import load_model

    old, new = tmp_path / "old.xml", tmp_path / "new.xml"
    old.write_text(_HEAD.format(version="1.0", checks=_CHECKS_10), encoding="utf-8")
    new.write_text(_HEAD.format(version="1.1", checks=_CHECKS_11), encoding="utf-8")
    models = [load_model(old), load_model(new)]
    for findings in ([Finding("top", 1)], [Finding("top", 1), Finding("amps", 1)],
                     [Finding("top", 1), Finding("amps", 0), Finding("look", 1)]):
        posts = [Engine(m).propagate(findings) for m in models]
        assert posts[1].log_p == pytest.approx(posts[0].log_p, abs=1e-12)
        for node, p in posts[0].marginals.items():
            assert posts[1].marginals[node] == pytest.approx(p, abs=1e-12), node
        rows = [{r.check: r for r in rank(p, ["amps", "look"]).rows} for p in posts]
        for check_id, row in rows[0].items():
            assert rows[1][check_id].bits == pytest.approx(row.bits, abs=1e-12)
            np.testing.assert_allclose(rows[1][check_id].p_outcomes, row.p_outcomes, atol=1e-12)


def test_a_1_0_file_using_elements_of_1_1_is_refused_with_the_fix(tmp_path, capsys):
    from troubleshoot.cli import main

    path = tmp_path / "mixed.xml"
    path.write_text(_HEAD.format(version="1.0", checks=_CHECKS_11), encoding="utf-8")
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert f"{path}:15:" in err and 'write format-version="1.1"' in err and "Traceback" not in err


# -- pyAgrum on the demos, with three-outcome findings --------------------------

@pytest.mark.parametrize("demo", ["rooftop", "booster"])
def test_pyagrum_agrees_on_the_demos_with_three_outcome_findings(demo, tmp_path):
    # Reference: pyAgrum LazyPropagation on our XMLBIF export (K-state check nodes).
    gum = pytest.importorskip("pyagrum")
    from troubleshoot.engine.xmlbif import network_to_xmlbif
    from troubleshoot.model.demos import demo_path
    from troubleshoot.model.xmlfile import load_model

    model = load_model(demo_path(demo))
    path = tmp_path / f"{demo}.bifxml"
    path.write_bytes(network_to_xmlbif(build_network(model)))
    bn = gum.loadBN(str(path))
    engine = Engine(model)
    graded = [c for c in model.checks if len(c.outcomes) == 3]
    rng = random.Random(12)
    tried = 0
    for _ in range(40):
        findings = [Finding(model.top, 1)] + [Finding(c.id, rng.randrange(3)) for c in rng.sample(graded, 2)]
        try:
            post = engine.propagate(findings)
        except ImpossibleFindings:
            continue
        ie = gum.LazyPropagation(bn)
        ie.setEvidence({f.target: (model.check_by_id[f.target].outcomes[f.outcome] if f.target in model.check_by_id
                                   else ("ok", "failed")[f.outcome]) for f in findings})
        ie.makeInference()
        for node, p in post.marginals.items():
            assert ie.posterior(node)[1] == pytest.approx(p, abs=TOL), node
        assert math.log(ie.evidenceProbability()) == pytest.approx(post.log_p, abs=1e-9)
        tried += 1
        if tried == 4:
            break
    assert tried == 4


# -- bad input ---------------------------------------------------------------

_BAD = {
    "outcome named twice": ("""
    <check id="amps" cost="5"><label>amps</label>
      <outcomes normal="normal"><abnormal name="low"/><abnormal name="low"/></outcomes>
      <cause ref="motor"><shows outcome="low" probability="0.9"/></cause></check>""",
                            "check 'amps' names the outcome 'low' twice", 15),
    "sum over one": ("""
    <check id="amps" cost="5"><label>amps</label>
      <outcomes normal="normal"><abnormal name="low"/><abnormal name="high"/></outcomes>
      <cause ref="motor"><shows outcome="low" probability="0.7"/><shows outcome="high" probability="0.5"/></cause>
    </check>""", "cause 'motor' probabilities add up to 1.2, more than 1", 16),
    "unknown outcome": ("""
    <check id="amps" cost="5"><label>amps</label>
      <outcomes normal="normal"><abnormal name="low"/><abnormal name="high"/></outcomes>
      <cause ref="motor"><shows outcome="very low" probability="0.7"/></cause>
    </check>""", "gives outcome 'very low', which the check does not have; use one of 'low', 'high'", 16),
    "leak over one": ("""
    <check id="amps" cost="5"><label>amps</label>
      <outcomes normal="normal"><abnormal name="low"/><abnormal name="high"/></outcomes>
      <false-alarm outcome="low" probability="0.6"/><false-alarm outcome="high" probability="0.6"/>
      <cause ref="motor"><shows outcome="low" probability="0.7"/></cause>
    </check>""", "false alarm probabilities add up to 1.2, more than 1", 14),
    "one number for three outcomes": ("""
    <check id="amps" cost="5"><label>amps</label>
      <outcomes normal="normal"><abnormal name="low"/><abnormal name="high"/></outcomes>
      <cause ref="motor" detection="0.9"/>
    </check>""", "give <shows outcome=", 16),
}


@pytest.mark.parametrize("case", sorted(_BAD))
def test_bad_distributions_exit_2_naming_file_line_check_and_fix(case, tmp_path, capsys):
    from troubleshoot.cli import main

    checks, words, line = _BAD[case]
    path = tmp_path / "bad.xml"
    path.write_text(_HEAD.format(version="1.1", checks=checks), encoding="utf-8")
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert words in err and f"{path}:{line}:" in err and "Traceback" not in err


def test_finding_with_an_outcome_the_check_lacks_exits_2_and_changes_nothing(capsys):
    from troubleshoot.cli import main
    from troubleshoot.model.demos import demo_path
    from troubleshoot.model.xmlfile import load_model
    from troubleshoot.session import Session

    assert main(["suggest", "rooftop", "--finding", "suction_pressure=very low"]) == 2
    err = capsys.readouterr().err
    assert ("check 'suction_pressure' has the outcomes 1 'within the band', 2 'low', 3 'high', not 'very low'"
            in err and "Traceback" not in err)
    assert main(["suggest", "rooftop", "--finding", "suction_pressure=4"]) == 2
    capsys.readouterr()
    session = Session(load_model(demo_path("rooftop")))
    before = session.state
    with pytest.raises(SessionError, match="not 'very low'"):
        session.record_finding("suction_pressure", "very low")
    assert session.state == before


def test_outcomes_by_name_or_number_on_the_command_line(capsys):
    import json

    from troubleshoot.cli import main

    docs = []
    for value in ("high", "3", "HIGH"):
        assert main(["suggest", "rooftop", "--finding", f"suction_pressure={value}", "--json"]) == 0
        docs.append(json.loads(capsys.readouterr().out))
    assert docs[0]["suspects"] == docs[1]["suspects"] == docs[2]["suspects"]
    assert docs[0]["suspects"][0]["id"] == "compressor_valves_worn"


def test_resume_plain_takes_outcomes_by_number_and_logs_their_names(tmp_path, monkeypatch, capsys):
    import io
    import json

    from troubleshoot.cli import main
    from troubleshoot.session.logfile import new_session
    from troubleshoot.session.summary import summary_markdown

    log = tmp_path / "s.jsonl"
    new_session("rooftop", log_path=log).close()
    monkeypatch.setattr("sys.stdin", io.StringIO("suction_pressure=3\ncompressor_current=low\nquit\n"))
    assert main(["resume", str(log), "--plain"]) == 0
    out = capsys.readouterr().out
    # The next check lists its outcomes with the numbers a technician types.
    assert "1 " in out and "next check:" in out
    actions = [json.loads(line)["action"] for line in log.read_text(encoding="utf-8").splitlines()
               if '"kind": "action"' in line]
    findings = [(a["check"], a["outcome"]) for a in actions if a.get("action") == "finding"]
    assert findings[-2:] == [("suction_pressure", "high"), ("compressor_current", "low")]
    from troubleshoot.session.logfile import resume_session

    resumed = resume_session(log)
    text = summary_markdown(resumed.model, resumed.state)
    resumed.close()
    assert "| high |" in text and "Suction pressure" in text


def test_export_carries_every_outcome(tmp_path, capsys):
    from lxml import etree

    from troubleshoot.cli import main

    assert main(["export", "rooftop", "--format", "dot"]) == 0
    assert "within the band | low | high" in capsys.readouterr().out
    out = tmp_path / "r.bifxml"
    assert main(["export", "rooftop", "--format", "xmlbif", "-o", str(out)]) == 0
    var = [v for v in etree.parse(str(out)).iter("VARIABLE") if v.findtext("NAME") == "compressor_current"][0]
    assert [o.text for o in var.iter("OUTCOME")] == ["near rated", "low", "high"]


def test_synthetic_three_outcome_variant_keeps_the_tree_and_every_total():
    from troubleshoot.study.synthetic import synthetic_model

    two = synthetic_model(300, seed=4)
    three = synthetic_model(300, seed=4, three_outcome_share=1 / 3)
    assert (two.gates, two.basic_events) == (three.gates, three.basic_events)
    assert [c.id for c in two.checks] == [c.id for c in three.checks]
    graded = [c for c in three.checks if len(c.outcomes) == 3]
    assert 0.2 < len(graded) / len(three.checks) < 0.45
    for old, new in zip(two.checks, three.checks):
        assert new.false_alarm == pytest.approx(old.false_alarm, abs=1e-15)
        for a, b in zip(old.causes, new.causes):
            assert (a.target, b.detection) == (b.target, pytest.approx(a.detection, abs=1e-15))


def test_bench_prints_the_three_outcome_step_beside_the_two_outcome_one(capsys):
    from troubleshoot.cli import main

    assert main(["bench", "--sizes", "100", "--no-references", "--three-outcomes", "0.33"]) == 0
    assert "33% of the checks with three outcomes: step" in capsys.readouterr().out
    assert main(["bench", "--three-outcomes", "1.5"]) == 2
    assert "give a number from 0 to 1" in capsys.readouterr().err
