"""Model files and MEF files that used to crash: each reproducer of issue 17 (items 2, 5, 6).

Deep and wide trees are built under a recursion limit only ~150 frames above
the test's own depth, so any tree walk that recursed once per gate, per
input or per diagram level would fail here: depth is limited by memory, not
by Python's recursion limit.
"""

from __future__ import annotations

import inspect
import itertools
import math
import random
import sys
from contextlib import contextmanager

import numpy as np
import pytest
from lxml import etree

from troubleshoot.analysis.bdd import FaultTreeBdd
from troubleshoot.analysis.cutsets import minimal_cut_sets
from troubleshoot.cli import main
from troubleshoot.engine.inference import Engine
from troubleshoot.engine.network import build_network
from troubleshoot.errors import ModelError, SessionError
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model
from troubleshoot.model.demos import demo_path
from troubleshoot.model.gates import bottom_up, gate_values
from troubleshoot.model.mef import read_mef
from troubleshoot.model.validate import errors_only, is_valid_id, validate_model
from troubleshoot.model.xmlfile import load_model, model_schema, save_model
from troubleshoot.session import Session


@contextmanager
def shallow_stack(extra: int = 150):
    """Allow only ``extra`` Python frames above the caller's depth."""
    previous = sys.getrecursionlimit()
    sys.setrecursionlimit(len(inspect.stack(0)) + extra)
    try:
        yield
    finally:
        sys.setrecursionlimit(previous)


def run_cli(capsys, *arguments):
    status = main([str(a) for a in arguments])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


# ---------------------------------------------------------------- deep and wide trees

def chain_model(depth: int, gate_first: bool = True) -> Model:
    """g0 = OR(g1, e0), g1 = OR(g2, e1), ...: a chain written top-down (parents first)."""
    gates = []
    for i in range(depth):
        below = f"g{i + 1}" if i + 1 < depth else "last"
        inputs = (below, f"e{i}") if gate_first else (f"e{i}", below)
        gates.append(Gate(f"g{i}", f"gate {i}", "or", inputs))
    events = [BasicEvent(f"e{i}", f"event {i}", 0.001) for i in range(depth)]
    events.append(BasicEvent("last", "last", 0.01))
    check = Check("look", "look", 1.0, ("ok", "bad"), (Cause("last", 0.9),))
    return Model(name="chain", top="g0", gates=tuple(gates), basic_events=tuple(events), checks=(check,))


def test_1200_gate_chain_written_top_down(tmp_path, capsys):
    model = chain_model(1200)
    path = tmp_path / "chain.xml"
    save_model(model, path)
    status, out, err = run_cli(capsys, "check", path)
    assert status == 0 and "model is valid" in out, err
    loaded = load_model(path)
    with shallow_stack():
        order = bottom_up(loaded)
        net = build_network(loaded, repairs=("e5",))
        post = Engine(loaded).propagate()
        values = gate_values(loaded, {r: np.array([r == "last"]) for r in loaded.hypotheses})
    # Children before parents: g1199 first, the top last.
    assert order[0] == "g1199" and order[-1] == "g0"
    assert ("g0", 1) in net.gate_node
    assert bool(values["g0"][0])
    # An OR chain is an OR of every event (NUREG-0492, OR gate: 1 - prod(1 - p)).
    expected = 1.0 - (1 - 0.001) ** 1200 * (1 - 0.01)
    assert post.p_failed("g0") == pytest.approx(expected, rel=1e-9)


def test_deep_chain_decision_diagrams_and_cut_sets():
    # Event-first chain: the BDD stays linear (depth-first order), 1,200 levels deep.
    model = chain_model(1200, gate_first=False)
    # Gate-first chain: each OR reaches the bottom of the diagram, 300 levels of apply.
    deep_apply = chain_model(300, gate_first=True)
    with shallow_stack():
        bdd = FaultTreeBdd.from_model(model)
        cuts = minimal_cut_sets(model, bdd=bdd)
        bdd2 = FaultTreeBdd.from_model(deep_apply)
        monotone = bdd2.diagram.is_monotone(bdd2.root)
        cuts2 = minimal_cut_sets(deep_apply, bdd=bdd2)
    assert bdd.probability() == pytest.approx(1.0 - (1 - 0.001) ** 1200 * (1 - 0.01), rel=1e-9)
    # An OR of n events has n minimal cut sets of order one (NUREG-0492, chapter VII).
    assert cuts.count_by_order == {1: 1201}
    assert monotone and cuts2.count_by_order == {1: 301}


@pytest.mark.parametrize("k", [1, 2000])
def test_k_of_n_with_k_1_and_k_n_over_2000_inputs(k):
    p = 0.9999 if k == 2000 else 0.0001
    events = tuple(BasicEvent(f"x{i}", f"x{i}", p) for i in range(2000))
    gate = Gate("vote", "vote", "atleast", tuple(e.id for e in events), k=k)
    model = Model(name="vote", top="vote", gates=(gate,), basic_events=events)
    assert not errors_only(validate_model(model))
    with shallow_stack():
        post = Engine(model).propagate()
        bdd = FaultTreeBdd.from_model(model)
    # 1-of-n is an OR, n-of-n an AND of independent events (NUREG-0492, chapter VI).
    expected = 1.0 - (1.0 - p) ** 2000 if k == 1 else p ** 2000
    assert post.p_failed("vote") == pytest.approx(expected, rel=1e-9)
    assert bdd.probability() == pytest.approx(expected, rel=1e-9)


# ---------------------------------------------------------------- MEF

def mef_text(event_expression: str, extra: str = "") -> str:
    return f"""<?xml version="1.0"?>
<opsa-mef>
  <define-fault-tree name="t">
    <define-gate name="top"><or><basic-event name="a"/><basic-event name="b"/></or></define-gate>
  </define-fault-tree>
  <model-data>
    <define-basic-event name="a">{event_expression}</define-basic-event>
    <define-basic-event name="b"><float value="0.01"/></define-basic-event>
{extra}  </model-data>
</opsa-mef>
"""


def test_mef_parameter_chain_of_1600(tmp_path, capsys):
    n = 1600
    chain = "".join(f'    <define-parameter name="p{i}"><parameter name="p{i + 1}"/></define-parameter>\n'
                    for i in range(n))
    chain += f'    <define-parameter name="p{n}"><float value="0.002"/></define-parameter>\n'
    path = tmp_path / "chain.xml"
    path.write_text(mef_text('<parameter name="p0"/>', chain), encoding="utf-8")
    with shallow_stack():
        model, _notes = read_mef(path)
    assert model.event_by_id["a"].probability == 0.002
    status, _out, err = run_cli(capsys, "import-mef", path, "-o", tmp_path / "out.xml")
    assert status == 0, err


def test_mef_parameter_cycle_is_refused_with_its_path(tmp_path):
    extra = ('    <define-parameter name="p"><parameter name="q"/></define-parameter>\n'
             '    <define-parameter name="q"><parameter name="p"/></define-parameter>\n')
    path = tmp_path / "cycle.xml"
    path.write_text(mef_text('<exponential><parameter name="p"/><float value="1"/></exponential>', extra),
                    encoding="utf-8")
    with pytest.raises(ModelError) as caught:
        read_mef(path)
    assert any("cycle (p -> q -> p)" in p.message for p in caught.value.problems)


# Each expression outside its domain, the words of the refusal; the expression sits on line 7.
DOMAIN_ERRORS = [
    ('<Weibull><float value="0"/><float value="2"/><float value="0"/><float value="10"/></Weibull>',
     "<Weibull> is outside its domain: its scale alpha is 0"),
    ('<Weibull><float value="-3"/><float value="2"/><float value="0"/><float value="10"/></Weibull>',
     "<Weibull> is outside its domain: its scale alpha is -3"),
    ('<Weibull><float value="3"/><float value="0"/><float value="0"/><float value="10"/></Weibull>',
     "its shape beta is 0"),
    ('<lognormal-deviate><float value="800"/><float value="1"/></lognormal-deviate>',
     "<lognormal-deviate> is outside its domain: its mean exp(mu + sigma^2/2) = exp(800.5) overflows"),
    ('<beta-deviate><float value="0"/><float value="0"/></beta-deviate>',
     "<beta-deviate> is outside its domain: its shapes alpha 0 and beta 0 must be above 0"),
    ('<beta-deviate><float value="2"/><float value="-2"/></beta-deviate>', "must be above 0"),
    ('<sub><float value="inf"/><float value="inf"/></sub>', "<float> value 'inf' is not a finite number"),
    ('<sub><mul><float value="1e308"/><float value="10"/></mul><float value="1"/></sub>',
     "<mul> of 1e+308, 10 is not a finite number (it overflows)"),
    ('<mul><float value="1e200"/><float value="1e200"/></mul>', "is not a finite number (it overflows)"),
    ('<add><exponential><float value="-1000"/><float value="1"/></exponential></add>',
     "<exponential> is outside its domain: rate -1000 and time 1 must not be negative"),
    ('<div><float value="1"/><float value="0"/></div>', "<div> is outside its domain: it divides by zero"),
    ('<float value="１"/>', "<float> value '１' is not a finite number in ASCII digits"),
    ('<float value="0.0_5"/>', "<float> value '0.0_5' is not a finite number in ASCII digits"),
    ('<float value="٠.٥"/>', "<float> value '٠.٥' is not a finite number in ASCII digits"),
    ('<float value="NaN"/>', "is not a finite number"),
]


@pytest.mark.parametrize("expression, words", DOMAIN_ERRORS, ids=range(len(DOMAIN_ERRORS)))
def test_mef_expression_domain_errors_are_reported_with_their_line(tmp_path, capsys, expression, words):
    path = tmp_path / "bad.xml"
    path.write_text(mef_text(expression), encoding="utf-8")
    with pytest.raises(ModelError) as caught:
        read_mef(path)
    problem = next(p for p in caught.value.problems if words in p.message)
    assert problem.line == 7 and problem.path == str(path)
    status, _out, err = run_cli(capsys, "import-mef", path, "-o", tmp_path / "out.xml")
    assert status == 2 and f"{path}:7: error:" in err and "Traceback" not in err


def test_weibull_whose_power_overflows_is_a_certain_failure(tmp_path):
    # ((t - t0) / alpha)^beta = (1e10)^100 overflows a double; 1 - exp(-that) is 1.
    path = tmp_path / "w.xml"
    path.write_text(mef_text('<Weibull><float value="1"/><float value="100"/><float value="0"/>'
                             '<float value="1e10"/></Weibull>'), encoding="utf-8")
    model, _notes = read_mef(path)
    assert model.event_by_id["a"].probability == 1.0


@pytest.mark.parametrize("text", ["２", "1_0", "٣"])
def test_mef_integers_are_ascii(tmp_path, text):
    path = tmp_path / "k.xml"
    path.write_text(mef_text('<float value="0.1"/>').replace(
        '<or><basic-event name="a"/><basic-event name="b"/></or>',
        f'<atleast min="{text}"><basic-event name="a"/><basic-event name="b"/></atleast>'), encoding="utf-8")
    with pytest.raises(ModelError, match="integer min=.*in ASCII digits"):
        read_mef(path)


def test_importer_never_emits_a_gate_with_repeated_inputs(tmp_path):
    formula = ('<or><and><basic-event name="a"/><basic-event name="b"/></and>'
               '<and><basic-event name="a"/><basic-event name="b"/></and><basic-event name="a"/>'
               '<atleast min="2"><basic-event name="b"/><basic-event name="b"/><basic-event name="a"/></atleast>'
               '</or>')
    path = tmp_path / "dup.xml"
    path.write_text(mef_text('<float value="0.1"/>').replace(
        '<or><basic-event name="a"/><basic-event name="b"/></or>', formula), encoding="utf-8")
    model, _notes = read_mef(path)
    assert not errors_only(validate_model(model))
    for gate in model.gates:
        assert len(set(gate.operands)) == len(gate.operands), gate


# ---------------------------------------------------------------- values before arithmetic

def test_negative_failure_rate_is_refused_with_its_line(tmp_path, capsys):
    path = tmp_path / "neg.xml"
    path.write_text("""<?xml version="1.0" encoding="UTF-8"?>
<troubleshooting-model format-version="1.0">
  <metadata><name>negative rate</name></metadata>
  <top-event ref="top"/>
  <fault-tree>
    <or-gate id="top"><label>top</label><input ref="a"/></or-gate>
    <basic-event id="a"><label>a</label><failure-rate per-hour="-1000" exposure-hours="1"/></basic-event>
  </fault-tree>
</troubleshooting-model>
""", encoding="utf-8")
    status, _out, err = run_cli(capsys, "check", path)
    assert status == 2 and "Traceback" not in err
    assert f"{path}:7: error: basic event 'a' failure rate -1000.0 per hour is not a finite number >= 0" in err


# ---------------------------------------------------------------- XML

MINIMAL = """<?xml version="1.0" encoding="{encoding}"?>
<troubleshooting-model format-version="1.0">
  <metadata><name>Small</name></metadata>
  <top-event ref="top"/>
  <fault-tree>
    <or-gate id="top"><label>top</label><input ref="{event}"/></or-gate>
    <basic-event id="{event}"><label>a part</label><probability>0.1</probability></basic-event>
  </fault-tree>
</troubleshooting-model>
"""


def test_external_dtd_entity_is_never_expanded(tmp_path, capsys):
    (tmp_path / "x.dtd").write_text('<!ENTITY secret "TOP-SECRET-VALUE">\n', encoding="utf-8")
    path = tmp_path / "m.xml"
    text = MINIMAL.format(encoding="UTF-8", event="a").replace(
        "<troubleshooting-model format-version", '<!DOCTYPE troubleshooting-model SYSTEM "x.dtd">\n'
        "<troubleshooting-model format-version").replace("<name>Small</name>", '<name>&secret;</name>')
    path.write_text(text, encoding="utf-8")
    status, out, err = run_cli(capsys, "check", path)
    assert status == 2 and "TOP-SECRET" not in out + err
    assert f"{path}:2: error: the DOCTYPE names an external DTD ('x.dtd', in another file)" in err


@pytest.mark.parametrize("doctype, words", [
    ('<!DOCTYPE troubleshooting-model PUBLIC "-//X//DTD Y//EN" "http://example.invalid/y.dtd">', "on the network"),
    ("<!DOCTYPE troubleshooting-model SYSTEM 'file:///etc/passwd'>", "on the network"),
    ('<!DOCTYPE troubleshooting-model SYSTEM "/dev/zero">', "in another file"),
])
def test_any_external_identifier_is_refused_accurately(tmp_path, capsys, doctype, words):
    path = tmp_path / "m.xml"
    path.write_text(MINIMAL.format(encoding="UTF-8", event="a").replace(
        "<troubleshooting-model format-version", doctype + "\n<troubleshooting-model format-version"),
        encoding="utf-8")
    status, _out, err = run_cli(capsys, "check", path)
    assert status == 2 and f"{path}:2: error: the DOCTYPE names an external DTD" in err and words in err
    assert "never read or fetched" in err


@pytest.mark.parametrize("codec, bom", [
    ("utf-16-le", b""), ("utf-16-be", b""), ("utf-16-le", b"\xff\xfe"), ("utf-16-be", b"\xfe\xff"),
    ("utf-32-le", b""), ("utf-32-be", b""), ("utf-32-le", b"\xff\xfe\x00\x00"), ("utf-32-be", b"\x00\x00\xfe\xff"),
])
def test_utf16_and_utf32_with_or_without_byte_order_mark(tmp_path, codec, bom):
    path = tmp_path / "m.xml"
    declared = "UTF-16" if "16" in codec else "UTF-32"
    path.write_bytes(bom + MINIMAL.format(encoding=declared, event="pièce").encode(codec))
    model = load_model(path)
    assert model.name == "Small" and "pièce" in model.event_by_id


def test_utf16_without_declaration_and_without_bom(tmp_path):
    path = tmp_path / "m.xml"
    text = MINIMAL.format(encoding="UTF-16", event="a").replace(' encoding="UTF-16"', "")
    path.write_bytes(text.encode("utf-16-le"))
    assert load_model(path).name == "Small"


def test_utf16_declared_as_something_else_is_refused_in_words(tmp_path, capsys):
    path = tmp_path / "m.xml"
    path.write_bytes(MINIMAL.format(encoding="ISO-8859-1", event="a").encode("utf-16-le"))
    status, _out, err = run_cli(capsys, "check", path)
    assert status == 2
    assert f"{path}:1: error: the file is written in UTF-16 but its declaration says encoding=\"ISO-8859-1\"" in err


def test_cut_short_utf16_is_refused_in_words(tmp_path, capsys):
    path = tmp_path / "m.xml"
    path.write_bytes(b"\xff\xfe" + MINIMAL.format(encoding="UTF-16", event="a").encode("utf-16-le")[:-1])
    status, _out, err = run_cli(capsys, "check", path)
    assert status == 2 and "is not valid UTF-16" in err and "binary" not in err


def test_combining_mark_id_agrees_with_the_schema(tmp_path, capsys):
    path = tmp_path / "m.xml"
    path.write_text(MINIMAL.format(encoding="UTF-8", event="cafe\u0301"), encoding="utf-8")
    status, out, err = run_cli(capsys, "check", path)
    assert status == 0, err
    path.write_text(MINIMAL.format(encoding="UTF-8", event="\u0301cafe"), encoding="utf-8")
    status, out, err = run_cli(capsys, "check", path)
    assert status == 2 and "Traceback" not in err


def _schema_accepts(identifier: str) -> bool:
    """Whether the model schema itself accepts ``identifier`` as an event id."""
    document = MINIMAL.format(encoding="UTF-8", event="E").replace('"E"', '"{}"')
    root = etree.fromstring(document.format(identifier, identifier).encode("utf-8"))
    return bool(model_schema().validate(root))


def test_id_rule_and_schema_agree_on_every_character():
    # Characters across Latin, Greek, Cyrillic, combining marks, CJK and symbols; each as
    # the first character and after a letter. The schema (libxml2) is the reference.
    rng = random.Random(17)
    points = list(range(0x20, 0x250)) + list(range(0x300, 0x370)) + list(range(0x2000, 0x2070))
    points += rng.sample(range(0x250, 0x30000), 400)
    disagree = []
    for point in points:
        if 0xD800 <= point <= 0xDFFF or chr(point) in "<&\"" or not chr(point).isprintable():
            continue
        for identifier in (chr(point) + "a", "a" + chr(point)):
            if identifier.strip() != identifier:
                continue
            if _schema_accepts(identifier) != is_valid_id(identifier):
                disagree.append(identifier)
    assert not disagree, disagree[:10]


# ---------------------------------------------------------------- ties and repairs

def symmetric_model(order: list[int]) -> Model:
    """Six interchangeable events under one OR, listed in ``order``; two identical checks."""
    events = tuple(BasicEvent(f"e{i}", f"event {i}", 0.1) for i in order)
    gate = Gate("top", "top", "or", tuple(e.id for e in events))
    checks = tuple(Check(f"c{j}", f"check {j}", 2.0, ("ok", "bad"), (Cause(f"e{j}", 0.8),)) for j in order if j < 4)
    return Model(name="ties", top="top", gates=(gate,), basic_events=events, checks=checks)


def test_exactly_tied_posteriors_come_out_in_the_same_order_whatever_the_input_order():
    orders = [list(p) for p in itertools.islice(itertools.permutations(range(6)), 0, 720, 37)]
    seen_suspects, seen_ranking = set(), set()
    for order in orders:
        session = Session(symmetric_model(order))
        state = session.state
        seen_suspects.add(tuple(s.id for s in state.suspects))
        seen_ranking.add(tuple(r.check for r in state.ranking))
    assert seen_suspects == {("e0", "e1", "e2", "e3", "e4", "e5")}
    assert len(seen_ranking) == 1
    # Ties among the same checks: the ranking is by id.
    ranking = seen_ranking.pop()
    assert list(ranking) == sorted(ranking)


def test_tie_ranks_are_independent_of_input_order():
    from troubleshoot.advice.ties import tie_ranks

    values = [0.1, 0.1 + 1e-17, 0.3, 0.2, 0.1 - 1e-17, math.inf, math.inf, 0.0]
    for permutation in itertools.islice(itertools.permutations(range(len(values))), 0, 5000, 97):
        permuted = [values[i] for i in permutation]
        ranks = tie_ranks(permuted)
        assert {(permuted[i] if not math.isinf(permuted[i]) else "inf", int(ranks[i]))
                for i in range(len(values))} >= {("inf", 0)}
        by_value = {}
        for i, v in enumerate(permuted):
            by_value.setdefault(round(v, 12) if math.isfinite(v) else v, set()).add(int(ranks[i]))
        assert all(len(r) == 1 for r in by_value.values())
        assert sorted(set(ranks.tolist())) == [0, 1, 2, 3, 4]


def test_unlisted_cause_cannot_be_repaired(capsys):
    model = load_model(demo_path("rooftop"))
    unlisted = next(r for r in model.hypotheses if r not in model.event_by_id)
    session = Session(model)
    with pytest.raises(SessionError, match="causes outside the model"):
        session.record_repair(unlisted)
    assert session.repairs == ()
    status, out, err = run_cli(capsys, "suggest", "rooftop", "--repaired", unlisted, "--json")
    assert status == 2 and out == ""
    assert f"cannot repair '{unlisted}': it stands for causes outside the model" in err
    assert "Traceback" not in err
