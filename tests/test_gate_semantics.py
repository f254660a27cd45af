"""Gate semantics: one truth table per gate kind, checked on every path that computes gates.

The tables below are written by hand from faulttrees/FORMAT.md, section
"Gates", column "occurs when" (and, for the imported kinds, from the Open-PSA
MEF 2.0d definitions of its Boolean connectives). Each row is
(operand values..., gate value). Every path that computes a gate must agree
with them: the brute-force reference (tests/bruteforce.py), the whole-state
evaluator (model/gates.py), the Bayesian network (join tree and compiled
decision diagram engines) and the fault-tree BDD.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

import bruteforce as bf
from troubleshoot.analysis.bdd import FALSE, TRUE, FaultTreeBdd
from troubleshoot.engine.inference import COMPILED, JOIN_TREE, Engine, Finding
from troubleshoot.model import BasicEvent, Gate, Model, unlisted_id
from troubleshoot.model.gates import gate_values
from troubleshoot.model.mef import read_mef
from troubleshoot.model.validate import errors_only, validate_model

# FORMAT.md: "<and-gate> occurs when all inputs occur".
AND_TABLE = [(0, 0, 0), (0, 1, 0), (1, 0, 0), (1, 1, 1)]
# FORMAT.md: "<or-gate> occurs when any input occurs"; operands a, b, then the
# unlisted-cause root ("occurs through causes outside the model").
OR_UNLISTED_TABLE = [
    (0, 0, 0, 0), (1, 0, 0, 1), (0, 1, 0, 1), (1, 1, 0, 1),
    (0, 0, 1, 1), (1, 0, 1, 1), (0, 1, 1, 1), (1, 1, 1, 1),
]
# FORMAT.md: "<atleast-gate k="2"> occurs when at least k of the inputs occur".
ATLEAST_2_OF_3_TABLE = [
    (0, 0, 0, 0), (1, 0, 0, 0), (0, 1, 0, 0), (0, 0, 1, 0),
    (1, 1, 0, 1), (1, 0, 1, 1), (0, 1, 1, 1), (1, 1, 1, 1),
]
# FORMAT.md: "<not-gate> occurs when the input does not occur".
NOT_TABLE = [(0, 1), (1, 0)]
# FORMAT.md: "<inhibit-gate> occurs when the input occurs while the condition event holds";
# operands: the input, then the condition.
INHIBIT_TABLE = [(0, 0, 0), (1, 0, 0), (0, 1, 0), (1, 1, 1)]


def _event(name: str) -> BasicEvent:
    return BasicEvent(name, name, 0.3)


def one_gate_model(kind: str) -> tuple[Model, tuple[str, ...], list[tuple[int, ...]]]:
    """A model whose top is one gate of ``kind`` over basic events, its operands and its table."""
    if kind == "and":
        gate, operands, table = Gate("g", "g", "and", ("a", "b")), ("a", "b"), AND_TABLE
    elif kind == "or":
        gate, operands, table = Gate("g", "g", "or", ("a", "b"), unlisted=0.2), ("a", "b", unlisted_id("g")), \
            OR_UNLISTED_TABLE
    elif kind == "atleast":
        gate, operands, table = Gate("g", "g", "atleast", ("a", "b", "c"), k=2), ("a", "b", "c"), \
            ATLEAST_2_OF_3_TABLE
    elif kind == "not":
        gate, operands, table = Gate("g", "g", "not", ("a",)), ("a",), NOT_TABLE
    else:
        gate, operands, table = Gate("g", "g", "inhibit", ("a",), condition="b"), ("a", "b"), INHIBIT_TABLE
    events = tuple(_event(x) for x in ("a", "b", "c") if x in operands)
    model = Model(name=kind, top="g", gates=(gate,), basic_events=events)
    assert not errors_only(validate_model(model))
    return model, operands, table


KINDS = ["and", "or", "atleast", "not", "inhibit"]


@pytest.mark.parametrize("kind", KINDS)
def test_brute_force_reference_reads_format_md(kind):
    model, operands, table = one_gate_model(kind)
    assert bf.gate_operands(model.gates[0]) == operands
    assert [int(v) for v in bf.truth_table(model.gates[0])] == [
        row[-1] for row in sorted(table, key=lambda r: sum(v << i for i, v in enumerate(r[:-1])))
    ]


@pytest.mark.parametrize("kind", KINDS)
def test_whole_state_evaluator_matches_the_table(kind):
    model, operands, table = one_gate_model(kind)
    roots = {r: np.array([bool(row[operands.index(r)]) if r in operands else False for row in table])
             for r in model.hypotheses}
    values = gate_values(model, roots)
    assert values["g"].tolist() == [bool(row[-1]) for row in table]


@pytest.mark.parametrize("engine_kind", [JOIN_TREE, COMPILED])
@pytest.mark.parametrize("kind", KINDS)
def test_network_matches_the_table(kind, engine_kind):
    model, operands, table = one_gate_model(kind)
    engine = Engine(model, kind=engine_kind)
    for row in table:
        findings = [Finding(r, row[operands.index(r)]) for r in operands]
        post = engine.propagate(findings)
        # Every root observed: the gate is certain, 0 or 1 (exact paths, 1e-9).
        assert post.p_failed("g") == pytest.approx(row[-1], abs=1e-9), (kind, row)


def _bdd_value(bdd: FaultTreeBdd, assignment: dict[str, int]) -> int:
    """Follow the diagram from the top, the test's own walk (failed -> high branch)."""
    d = bdd.diagram
    node = bdd.root
    while node not in (FALSE, TRUE):
        node = d.high[node] if assignment[bdd.order[d.var[node]]] else d.low[node]
    return int(node == TRUE)


@pytest.mark.parametrize("kind", KINDS)
def test_bdd_matches_the_table(kind):
    model, operands, table = one_gate_model(kind)
    bdd = FaultTreeBdd.from_model(model)
    for row in table:
        assert _bdd_value(bdd, dict(zip(operands, row[:-1]))) == row[-1], (kind, row)


# ---------------------------------------------------------------- MEF connectives
# Open-PSA MEF 2.0d, section 5 (Boolean formulae): and, or, not, nand = not and,
# nor = not or, xor = exclusive or (two arguments), iff = equivalence, imply
# (a implies b), atleast (min), cardinality (min, max): between min and max of
# the arguments hold. Rows: (a, b, c) -> value.
MEF_TABLES = {
    "<and><basic-event name='a'/><basic-event name='b'/><basic-event name='c'/></and>":
        lambda a, b, c: a and b and c,
    "<or><basic-event name='a'/><basic-event name='b'/><basic-event name='c'/></or>":
        lambda a, b, c: a or b or c,
    "<nand><basic-event name='a'/><basic-event name='b'/></nand>": lambda a, b, c: not (a and b),
    "<nor><basic-event name='a'/><basic-event name='b'/></nor>": lambda a, b, c: not (a or b),
    "<xor><basic-event name='a'/><basic-event name='b'/></xor>": lambda a, b, c: a != b,
    "<iff><basic-event name='a'/><basic-event name='b'/></iff>": lambda a, b, c: a == b,
    "<imply><basic-event name='a'/><basic-event name='b'/></imply>": lambda a, b, c: (not a) or b,
    "<not><basic-event name='a'/></not>": lambda a, b, c: not a,
    "<atleast min='2'><basic-event name='a'/><basic-event name='b'/><basic-event name='c'/></atleast>":
        lambda a, b, c: a + b + c >= 2,
    "<cardinality min='1' max='2'><basic-event name='a'/><basic-event name='b'/>"
    "<basic-event name='c'/></cardinality>": lambda a, b, c: 1 <= a + b + c <= 2,
    # A repeated argument counts once per listing in a vote (MEF: atleast over the
    # listed arguments): at least 2 of (a, a, b) is a.
    "<atleast min='2'><basic-event name='a'/><basic-event name='a'/><basic-event name='b'/></atleast>":
        lambda a, b, c: a + a + b >= 2,
    "<and><basic-event name='a'/><basic-event name='a'/><or><basic-event name='b'/>"
    "<basic-event name='c'/></or><or><basic-event name='b'/><basic-event name='c'/></or></and>":
        lambda a, b, c: a and (b or c),
}


def _mef_file(tmp_path, formula: str):
    text = f"""<?xml version="1.0"?>
<opsa-mef>
  <define-fault-tree name="t">
    <define-gate name="top">{formula}</define-gate>
  </define-fault-tree>
  <model-data>
    <define-basic-event name="a"><float value="0.1"/></define-basic-event>
    <define-basic-event name="b"><float value="0.2"/></define-basic-event>
    <define-basic-event name="c"><float value="0.3"/></define-basic-event>
  </model-data>
</opsa-mef>
"""
    path = tmp_path / "t.xml"
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize("formula", list(MEF_TABLES), ids=range(len(MEF_TABLES)))
def test_imported_mef_connectives_match_their_tables(tmp_path, formula):
    model, _notes = read_mef(_mef_file(tmp_path, formula))
    # The importer never writes a gate its own validator refuses.
    assert not errors_only(validate_model(model))
    roots = list(model.hypotheses)
    states = np.array(list(itertools.product([False, True], repeat=len(roots))), dtype=bool).reshape(-1, len(roots))
    values = bf.evaluate(model, states, roots, set())
    rule = MEF_TABLES[formula]
    for row, state in enumerate(states):
        named = {r: bool(v) for r, v in zip(roots, state)}
        expected = bool(rule(named.get("a", False), named.get("b", False), named.get("c", False)))
        assert bool(values[model.top][row]) == expected, (formula, named)
