"""``troubleshoot export --format dot``: labels with real line breaks, and a file Graphviz renders.

DOT language (graphviz.org/doc/info/lang.html): in a double-quoted string
only ``\\"`` is an escape of the language itself; in a label, ``\\n`` is a
centred line break (escString, graphviz.org/docs/attr-types/escString/).
So a label written ``"Pump 1\\nOR"`` draws two lines, and one written
``"Pump 1\\\\nOR"`` draws the characters backslash and n. The rendering test
runs Graphviz's own ``dot`` when it is installed and reads the SVG it draws:
each line of a label is one ``<text>`` element.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import xml.etree.ElementTree as ET

import pytest

from troubleshoot.cli import main
from troubleshoot.model.demos import demo_path
from troubleshoot.model.xmlfile import load_model

LABEL = re.compile(r'^\s*"(?P<id>(?:[^"\\]|\\.)*)" \[label="(?P<label>(?:[^"\\]|\\.)*)"')


def dot_text(capsys, demo: str) -> str:
    assert main(["export", demo, "--format", "dot"]) == 0
    return capsys.readouterr().out


def drawn_lines(label: str) -> list[str]:
    """A DOT label as Graphviz draws it: ``\\n`` (and ``\\l``, ``\\r``) end a line; ``\\x`` is x."""
    lines, current, i = [], "", 0
    while i < len(label):
        if label[i] == "\\" and i + 1 < len(label):
            nxt = label[i + 1]
            if nxt in "nlr":
                lines.append(current)
                current = ""
            else:
                current += nxt
            i += 2
            continue
        current += label[i]
        i += 1
    return lines + [current]


@pytest.mark.parametrize("demo", ["rooftop", "booster"])
def test_labels_break_lines_and_never_show_a_backslash(capsys, demo):
    model = load_model(demo_path(demo))
    labels = {m["id"]: m["label"] for m in map(LABEL.match, dot_text(capsys, demo).splitlines()) if m}
    for event in model.basic_events:
        lines = drawn_lines(labels[event.id])
        assert lines[0] == event.label and lines[1] == f"p = {event.probability:.3g}"
    for gate in model.gates:
        assert drawn_lines(labels[gate.id]) == [gate.label, gate.kind.upper()]
    for check in model.checks + model.symptoms:
        assert drawn_lines(labels[check.id]) == [check.label, " | ".join(check.outcomes)]
    assert not any("\\" in line for label in labels.values() for line in drawn_lines(label))


@pytest.mark.skipif(shutil.which("dot") is None, reason="Graphviz 'dot' is not installed (apt-get install graphviz)")
@pytest.mark.parametrize("demo", ["rooftop", "booster"])
def test_graphviz_renders_the_export(capsys, demo):
    model = load_model(demo_path(demo))
    done = subprocess.run(["dot", "-Tsvg"], input=dot_text(capsys, demo), capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    svg = ET.fromstring(done.stdout)
    texts = [t.text or "" for t in svg.iter("{http://www.w3.org/2000/svg}text")]
    assert not any("\\n" in t for t in texts)
    for gate in model.gates:
        assert gate.kind.upper() in texts  # the kind is drawn on its own line under the label
    event = model.basic_events[0]
    assert f"p = {event.probability:.3g}" in texts
