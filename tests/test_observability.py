"""``troubleshoot check`` warns the model's author: one purpose-built bad model per kind of warning.

Each model below is small enough to read by hand; the line the warning must
name carries an ``<!-- expected warning -->`` comment. A sound model of the
same shape gives no warning at all, so a warning is never noise.
"""

from __future__ import annotations

import json

import pytest

from troubleshoot.analysis.observability import observability_warnings, support
from troubleshoot.cli import main
from troubleshoot.model.xmlfile import load_model

MARK = "expected warning"

HEAD = """<?xml version="1.0" encoding="UTF-8"?>
<troubleshooting-model format-version="1.0">
  <metadata><name>Warnings test</name><cost-unit>min</cost-unit></metadata>
  <top-event ref="top"/>
  <fault-tree>
"""


def event(eid: str, p: float = 0.1, repair: str = "", mark: bool = False) -> str:
    comment = f" <!-- {MARK} -->" if mark else ""
    return (f'    <basic-event id="{eid}">{comment}\n      <label>Part {eid}</label>\n'
            f"      <probability>{p}</probability>\n{repair}    </basic-event>\n")


def check(cid: str, causes: list[tuple[str, float]], false_alarm: float = 0.01, mark: bool = False) -> str:
    comment = f" <!-- {MARK} -->" if mark else ""
    body = "".join(f'      <cause ref="{ref}" detection="{d}"/>\n' for ref, d in causes)
    return (f'    <check id="{cid}" cost="5" false-alarm="{false_alarm}">{comment}\n'
            f"      <label>Check {cid}</label>\n"
            f'      <outcomes normal="fine" abnormal="bad"/>\n{body}    </check>\n')


def model_text(top_inputs, events, checks, top_mark=False) -> str:
    comment = f" <!-- {MARK} -->" if top_mark else ""
    inputs = "".join(f'      <input ref="{i}"/>\n' for i in top_inputs)
    text = HEAD + f'    <or-gate id="top">{comment}\n      <label>Unit fails</label>\n{inputs}    </or-gate>\n'
    text += "".join(events) + "  </fault-tree>\n"
    if checks:
        text += "  <checks>\n" + "".join(checks) + "  </checks>\n"
    return text + "</troubleshooting-model>\n"


SOUND = model_text(["a", "b"], [event("a"), event("b")],
                   [check("ca", [("a", 0.9)]), check("cb", [("b", 0.8)])])

BAD = {
    "no checks": (model_text(["a", "b"], [event("a"), event("b")], [], top_mark=True),
                  "the model has no checks"),
    "nothing responds": (model_text(["a", "b"], [event("a"), event("b", mark=True)], [check("ca", [("a", 0.9)])]),
                         "basic event 'b' (Part b): no check or symptom responds to it"),
    "never told apart": (model_text(["g"], [
        '    <or-gate id="g">\n      <label>Either</label>\n      <input ref="a"/>\n      <input ref="b"/>\n'
        "    </or-gate>\n", event("a", mark=True), event("b")], [check("cg", [("g", 0.9)])]),
        "basic events 'a', 'b': every check and symptom responds to them the same way"),
    "false alarm 0": (model_text(["a", "b"], [event("a"), event("b")],
                                 [check("both", [("a", 0.9), ("b", 0.7)], false_alarm=0.0, mark=True),
                                  check("cb", [("b", 0.8)])]),
                      "check 'both' (Check both) has 2 causes and a false alarm of 0"),
    "verification blind": (model_text(["a", "b"], [
        event("a", repair='      <repair cost="10" verify="cb"><label>Replace a</label></repair>\n', mark=True),
        event("b")], [check("ca", [("a", 0.9)]), check("cb", [("b", 0.8)])]),
        "the repair of 'a' is verified by check 'cb' (Check cb), which does not respond to 'a'"),
}


def marked_line(text: str) -> int:
    return next(n for n, line in enumerate(text.splitlines(), 1) if MARK in line)


def test_a_sound_model_gets_no_warning(tmp_path):
    path = tmp_path / "sound.xml"
    path.write_text(SOUND, encoding="utf-8")
    assert observability_warnings(load_model(path)) == []


@pytest.mark.parametrize("kind", sorted(BAD))
def test_each_kind_of_warning_names_file_and_line(kind, tmp_path, capsys):
    text, words = BAD[kind]
    path = tmp_path / "bad.xml"
    path.write_text(text, encoding="utf-8")
    assert main(["check", str(path)]) == 0  # warnings never stop the model from loading
    out = capsys.readouterr().out
    expected = f"{path}:{marked_line(text)}: warning: "
    assert any(line.strip().startswith(expected) and words in line for line in out.splitlines()), out
    assert main(["check", str(path), "--json"]) == 0
    facts = json.loads(capsys.readouterr().out)
    assert any(w.startswith(expected) and words in w for w in facts["warnings"]), facts["warnings"]
    # One warning of this kind, and no other kind raised by the same defect.
    assert len(observability_warnings(load_model(path))) == 1


def test_support_follows_gates_by_hand():
    # top = OR(g, c); g = AND(a, b): read off the tree by hand.
    text = model_text(["g", "c"], [
        '    <and-gate id="g">\n      <label>Both</label>\n      <input ref="a"/>\n      <input ref="b"/>\n'
        "    </and-gate>\n", event("a"), event("b"), event("c")], [check("cc", [("c", 0.9)])])
    import tempfile
    from pathlib import Path

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "m.xml"
        path.write_text(text, encoding="utf-8")
        below = support(load_model(path))
    assert below["g"] == {"a", "b"} and below["top"] == {"a", "b", "c"} and below["c"] == {"c"}
