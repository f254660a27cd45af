"""The escalation of format 1.1: read, written, validated and declared in the schema alike.

What the file may hold is taken from faulttrees/FORMAT.md (section
``<escalation>``): one ``<escalation cost="...">`` inside ``<top-event>``,
after ``<label>`` and ``<verification>``, with a ``<label>`` in words and an
optional ``<instructions>``; the cost finite and not negative, in the
model's cost unit. A file of format 1.0 has no escalation.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lxml import etree

from troubleshoot.cli import main
from troubleshoot.errors import ModelError
from troubleshoot.model import BasicEvent, Escalation, Gate, Model
from troubleshoot.model.mef.read import read_mef
from troubleshoot.model.mef.write import write_mef
from troubleshoot.model.validate import validate_model
from troubleshoot.model.xmlfile import load_model, model_schema, save_model

BAD = Path(__file__).parent / "bad_models"
SCHEMA_DIR = Path(__file__).resolve().parents[1] / "troubleshoot" / "model" / "schema"

#: A small model of format 1.1; {top} is replaced by the children of <top-event>,
#: {root} by extra elements at the end of the root, {meta} inside <metadata>.
TEMPLATE = """<?xml version="1.0" encoding="UTF-8"?>
<troubleshooting-model format-version="{version}">
  <metadata>
    <name>Escalation test</name>
    <cost-unit>EUR</cost-unit>{meta}
  </metadata>
  <top-event ref="top">
    <label>Unit fails</label>
    <verification cost="10">
      <label>Run it</label>
    </verification>{top}
  </top-event>
  <fault-tree>
    <or-gate id="top" unlisted-causes="0.05">
      <label>Unit fails</label>
      <input ref="a"/>
      <input ref="b"/>
    </or-gate>
    <basic-event id="a">
      <label>Part A failed</label>
      <probability>0.1</probability>
      <repair cost="40"><label>Replace A</label></repair>
    </basic-event>
    <basic-event id="b">
      <label>Part B failed</label>
      <probability>0.2</probability>
      <repair cost="60"><label>Replace B</label></repair>
    </basic-event>
  </fault-tree>{root}
</troubleshooting-model>
"""


def model_text(top: str = "", root: str = "", meta: str = "", version: str = "1.1") -> str:
    return TEMPLATE.format(top=top, root=root, meta=meta, version=version)


def escalation_element(cost: str = "250", label: str = "Call the specialist", instructions: str | None = None) -> str:
    inner = f"<label>{label}</label>" if label is not None else ""
    if instructions is not None:
        inner += f"<instructions>{instructions}</instructions>"
    return f'\n    <escalation cost="{cost}">{inner}</escalation>'


def write(tmp_path: Path, text: str, name: str = "m.xml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def line_of(text: str, needle: str, occurrence: int = 1) -> int:
    """1-based line of the n-th line holding ``needle``."""
    found = [n for n, line in enumerate(text.splitlines(), start=1) if needle in line]
    return found[occurrence - 1]


# -- reading and writing -----------------------------------------------------


def test_escalation_is_read_with_its_label_cost_and_instructions(tmp_path):
    text = model_text(top=escalation_element("250.5", "Call the manufacturer&apos;s field engineer",
                                             "Leave it locked out.\n      Hand over the findings."))
    model = load_model(write(tmp_path, text))
    assert model.escalation == Escalation("Call the manufacturer's field engineer", 250.5,
                                          "Leave it locked out.\nHand over the findings.")


def test_escalation_without_instructions_has_empty_instructions(tmp_path):
    model = load_model(write(tmp_path, model_text(top=escalation_element("0"))))
    assert model.escalation == Escalation("Call the specialist", 0.0, "")


def test_round_trip_keeps_the_escalation(tmp_path):
    text = model_text(top=escalation_element("1e3", "Swap the whole unit &amp; &lt;not&gt; a tag", "Step one.\nStep two."))
    original = load_model(write(tmp_path, text))
    assert original.escalation.label == "Swap the whole unit & <not> a tag"
    save_model(original, tmp_path / "copy.xml")
    again = load_model(tmp_path / "copy.xml")
    assert again == original and again.escalation == original.escalation
    # The writer puts it where FORMAT.md says: the last child of <top-event>.
    top = etree.parse(str(tmp_path / "copy.xml")).getroot().find("top-event")
    assert [c.tag for c in top][-1] == "escalation"


@settings(max_examples=40, deadline=None)
@given(label=st.text(st.characters(categories=("L", "N", "P", "S", "Zs")), min_size=1, max_size=30)
       .map(str.strip).filter(bool),
       cost=st.floats(min_value=0.0, max_value=1e12))
def test_any_valid_escalation_round_trips(tmp_path_factory, label, cost):
    model = Model(name="m", top="g", gates=(Gate("g", "Top", "or", ("e",), unlisted=0.1),),
                  basic_events=(BasicEvent("e", "Part failed", 0.1),), escalation=Escalation(label, cost))
    path = tmp_path_factory.mktemp("esc") / "m.xml"
    save_model(model, path)
    assert load_model(path).escalation == Escalation(label, cost)


def test_a_format_1_0_file_loads_without_escalation():
    path = BAD / "minimal_valid.xml"
    assert 'format-version="1.0"' in path.read_text(encoding="utf-8")
    assert load_model(path).escalation is None


def test_a_format_1_1_file_without_escalation_has_none(tmp_path):
    assert load_model(write(tmp_path, model_text())).escalation is None


def test_a_format_1_0_file_with_an_escalation_is_refused_with_its_line(tmp_path):
    text = model_text(top=escalation_element(), version="1.0")
    with pytest.raises(ModelError) as caught:
        load_model(write(tmp_path, text))
    (problem,) = caught.value.problems
    assert problem.line == line_of(text, "<escalation")
    assert "format version 1.1" in problem.message and 'format-version="1.1"' in problem.message


def test_mef_export_leaves_the_escalation_out_and_the_import_has_none(tmp_path):
    model = load_model(write(tmp_path, model_text(top=escalation_element())))
    assert model.escalation is not None
    write_mef(model, tmp_path / "mef.xml")
    text = (tmp_path / "mef.xml").read_text(encoding="utf-8")
    assert "Call the specialist" not in text and "the escalation" in text  # said in the header comment
    imported, _problems = read_mef(tmp_path / "mef.xml")
    assert imported.escalation is None
    assert imported.gates == model.gates


# -- bad escalations: exit 2, file:line and the fix ----------------------------


BAD_CASES = {
    # name: (children of <top-event>, extra at the root, in <metadata>, text on the reported line, words)
    "negative cost": (escalation_element("-5"), "", "", "<escalation", "is below 0"),
    "infinite cost": (escalation_element("INF"), "", "", "<escalation", "not a finite number"),
    "NaN cost": (escalation_element("NaN"), "", "", "<escalation", "not a finite number"),
    "cost not a number": (escalation_element("lots"), "", "", "<escalation", "not a number"),
    "no cost": ('\n    <escalation><label>Call</label></escalation>', "", "", "<escalation", "needs the attribute cost"),
    "empty label": (escalation_element(label=""), "", "", "<escalation", "<label> is blank"),
    "blank label": (escalation_element(label="  \u00a0 "), "", "", "<escalation", "<label> is blank"),
    "no label": (escalation_element(label=None), "", "", "<escalation", "add <label>"),
    "two escalations": (escalation_element() + escalation_element("300", "Swap the unit"), "", "",
                        "Swap the unit", "second <escalation> (the first is at line"),
    "under the root": ("", escalation_element(), "", "<escalation", "belongs inside <top-event>"),
    "in the metadata": ("", "", escalation_element(), "<escalation", "belongs inside <top-event>"),
    "before the verification": (None, "", "", "<escalation", "comes before <verification>"),
}


def _bad_text(case: str) -> str:
    top, root, meta, _needle, _words = BAD_CASES[case]
    if top is None:  # placed before <verification>
        return model_text().replace("    <verification", escalation_element().lstrip("\n") + "\n    <verification")
    return model_text(top=top, root=root, meta=meta)


@pytest.mark.parametrize("case", sorted(BAD_CASES))
def test_bad_escalation_exits_2_with_file_line_and_fix(tmp_path, capsys, case):
    text = _bad_text(case)
    path = write(tmp_path, text)
    status = main(["check", str(path)])
    err = capsys.readouterr().err
    assert status == 2
    assert "Traceback" not in err
    _top, _root, _meta, needle, words = BAD_CASES[case]
    line = line_of(text, needle)
    expected = f"troubleshoot: {path}:{line}: error: "
    assert any(row.startswith(expected) and words in row for row in err.splitlines()), err


@pytest.mark.parametrize("escalation, words", [
    (Escalation("Call", -1.0), "escalation cost -1.0 min is not a finite number >= 0"),
    (Escalation("Call", math.inf), "escalation cost inf min is not a finite number >= 0"),
    (Escalation("Call", math.nan), "escalation cost nan min is not a finite number >= 0"),
    (Escalation(" ", 5.0), "the escalation has no label"),
])
def test_a_model_built_by_code_with_a_bad_escalation_is_reported(escalation, words):
    model = Model(name="m", top="e", gates=(), basic_events=(BasicEvent("e", "Part failed", 0.1),),
                  escalation=escalation)
    messages = [p.message for p in validate_model(model)]
    assert any(words in m for m in messages), messages


# -- the schema accepts exactly what the loader accepts ---------------------------


def _loader_accepts(path: Path) -> bool:
    try:
        load_model(path)
    except ModelError:
        return False
    return True


def _schema_accepts(text: str, schema: etree.XMLSchema) -> bool:
    return bool(schema.validate(etree.fromstring(text.encode("utf-8"))))


COSTS = ["0", "-0", "250", " 250 ", "1e3", "2.5E-1", ".5", "+7", "-5", "-1e-300", "INF", "-INF", "NaN", "1e400",
         "lots", "1,5", ""]
LABELS = ["Call the specialist", "  padded  ", "", " ", "\u00a0", "\u3000", "\u2003x", "a\nb", "\n\t "]


@pytest.mark.parametrize("cost", COSTS)
@pytest.mark.parametrize("label", LABELS)
def test_schema_and_loader_agree_on_every_escalation(tmp_path, cost, label):
    text = model_text(top=escalation_element(cost, label, "Some words."))
    assert _schema_accepts(text, model_schema()) == _loader_accepts(write(tmp_path, text))


@pytest.mark.parametrize("case", sorted(BAD_CASES))
def test_schema_refuses_every_bad_escalation(case):
    assert not _schema_accepts(_bad_text(case), model_schema())


def test_schema_accepts_the_documented_forms(tmp_path):
    for top in ("", escalation_element(), escalation_element("0", "Swap the unit", "Steps.")):
        text = model_text(top=top)
        assert _schema_accepts(text, model_schema()) and _loader_accepts(write(tmp_path, text))


def test_the_1_0_schema_has_no_escalation_and_neither_has_the_loader(tmp_path):
    schema_1_0 = etree.XMLSchema(etree.parse(str(SCHEMA_DIR / "model-1.0.xsd")))
    plain = model_text(version="1.0")
    with_escalation = model_text(top=escalation_element(), version="1.0")
    assert _schema_accepts(plain, schema_1_0) and _loader_accepts(write(tmp_path, plain))
    assert not _schema_accepts(with_escalation, schema_1_0)
    assert not _loader_accepts(write(tmp_path, with_escalation))


# -- the check command ------------------------------------------------------------------


def test_check_prints_the_escalation_with_its_unit(tmp_path, capsys):
    path = write(tmp_path, model_text(top=escalation_element("250")))
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "  escalation       Call the specialist (250 EUR)" in out.splitlines()


def test_check_without_escalation_states_the_default(tmp_path, capsys):
    path = write(tmp_path, model_text(meta="\n    <isolation-threshold>0.9</isolation-threshold>"))
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    line = next(row for row in out.splitlines() if row.startswith("  escalation"))
    assert "none" in line and "0.9" in line


def test_check_json_adds_the_escalation_and_keeps_the_other_keys(tmp_path, capsys):
    path = write(tmp_path, model_text(top=escalation_element("250", "Call the specialist", "Steps.")))
    assert main(["check", "--json", str(path)]) == 0
    facts = json.loads(capsys.readouterr().out)
    assert facts["escalation"] == {"label": "Call the specialist", "cost": 250.0, "instructions": "Steps."}
    for key in ("model", "top", "gates", "basic_events", "repeated_events", "checks", "symptoms", "cost_unit"):
        assert key in facts
    assert main(["check", "--json", str(write(tmp_path, model_text(), "plain.xml"))]) == 0
    assert json.loads(capsys.readouterr().out)["escalation"] is None
