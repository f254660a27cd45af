"""``troubleshoot check``: a summary and exit 0, or every problem with file:line and exit 2."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from troubleshoot.cli import main
from troubleshoot.model.demos import demo_path
from troubleshoot.model.xmlfile import load_model

BAD = Path(__file__).parent / "bad_models"
MARK = "expected problem"


def marked_line(path: Path) -> int:
    """The 1-based line the bad file marks with an 'expected problem' comment."""
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        if MARK in line:
            return number
    raise AssertionError(f"{path} has no '{MARK}' marker")


def run_check(capsys, *arguments):
    status = main(["check", *map(str, arguments)])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


@pytest.mark.parametrize(
    "name, words",
    [
        ("unknown_reference.xml", "input 'bb' is not defined"),
        ("duplicate_id.xml", "id 'a' of this basic event is already used"),
        ("cycle.xml", "gates form a cycle (top -> loop -> top)"),
        ("probability_out_of_range.xml", "probability 1.5 is outside [0, 1]"),
        ("detection_out_of_range.xml", "detection probability -0.1"),
        ("rate_without_exposure.xml", "failure rate but no exposure time; add exposure-hours"),
        ("k_out_of_range.xml", "k=3 with 2 inputs; k must be between 1 and 2"),
        ("gate_without_inputs.xml", "gate 'empty' has no inputs"),
        ("check_without_cause.xml", "check 'idle' has no cause"),
        ("schema_unknown_element.xml", "<inptu> is not expected here; expected <input>"),
        ("schema_bad_number.xml", "holds '0,2', which is not a number"),
        ("tilde_id.xml", "id=\"b~x\" is not an id"),
        ("wrong_version.xml", "format version '2.0' is not supported"),
    ],
)
def test_each_error_names_file_line_and_fix(capsys, name, words):
    path = BAD / name
    status, _out, err = run_check(capsys, path)
    assert status == 2
    expected = f"troubleshoot: {path}:{marked_line(path)}: error: "
    matching = [line for line in err.splitlines() if line.startswith(expected)]
    assert any(words in line for line in matching), err
    assert "Traceback" not in err


@pytest.mark.parametrize(
    "name, line, words",
    [
        ("not_xml.xml", 1, "not an XML file"),
        ("empty.xml", None, "file is empty"),
        ("truncated.xml", 20, "ends before <basic-event> (opened at line 18) is closed"),
        ("truncated_tag.xml", 20, "cut short"),
        ("no_top_event.xml", 2, "no top event; add <top-event"),
        ("external_entity.xml", 2, "declares entities"),
        ("billion_laughs.xml", 2, "declares entities"),
        ("wrong_root.xml", 2, "root element is <fault-tree-model>"),
    ],
)
def test_unreadable_files_exit_2_with_file_and_line(capsys, name, line, words):
    path = BAD / name
    status, _out, err = run_check(capsys, path)
    assert status == 2
    where = f"{path}:{line}" if line else f"{path}"
    assert f"troubleshoot: {where}: error: " in err and words in err, err


def test_all_problems_reported_in_one_pass(capsys):
    path = BAD / "several_problems.xml"
    status, _out, err = run_check(capsys, path)
    assert status == 2
    text = path.read_text(encoding="utf-8").splitlines()
    for marker in ("problem 1", "problem 2", "problem 3"):
        line = next(n for n, t in enumerate(text, start=1) if marker in t)
        assert f"{path}:{line}: error:" in err, (marker, err)


def test_unreachable_event_is_a_warning_and_exit_0(capsys):
    path = BAD / "unreachable_event.xml"
    status, out, err = run_check(capsys, path)
    assert status == 0
    assert f"{path}:{marked_line(path)}: warning: basic event 'orphan' is not under the top event" in out
    assert err == ""


def test_missing_file(capsys, tmp_path):
    status, _out, err = run_check(capsys, tmp_path / "none.xml")
    assert status == 2 and "file not found" in err


@pytest.mark.parametrize("demo", ["rooftop", "booster"])
def test_summary_of_a_demo(capsys, demo):
    model = load_model(demo_path(demo))
    status, out, err = run_check(capsys, demo)
    assert status == 0 and err == ""
    assert model.name in out
    assert f"{model.top}: {model.top_label}" in out
    assert f"basic events     {len(model.basic_events)}" in out
    assert f"gates            {len(model.gates)}" in out
    assert f"checks           {len(model.checks)}" in out
    assert f"symptoms         {len(model.symptoms)}" in out
    # What the demos' structure gives away, read by hand from the XML: in the rooftop unit
    # both condenser-fan events reach the checks only through the OR gate
    # 'condenser_airflow_lost'. The booster has no warning: every repair is verified by the
    # unit itself or by a check that has the repaired part among its causes.
    expected = {
        "rooftop": ["basic events 'condenser_fan_motor_failed', 'condenser_fan_capacitor_failed': every check"],
        "booster": [],
    }[demo]
    assert f"warnings         {len(expected) or 'none'}" in out
    for text in expected:
        assert text in out


def test_json_summary_keys_and_values(capsys):
    status, out, _err = run_check(capsys, "rooftop", "--json")
    assert status == 0
    facts = json.loads(out)
    model = load_model(demo_path("rooftop"))
    # Repeated events counted by hand from faulttrees/rooftop_ac.xml: refrigerant_leak
    # and txv_restricted each feed low_pressure_trip and low_capacity.
    assert {k: facts[k] for k in ("model", "top", "gates", "basic_events", "repeated_events", "checks", "symptoms")} == {
        "model": model.name,
        "top": "no_cooling",
        "gates": len(model.gates),
        "basic_events": len(model.basic_events),
        "repeated_events": 2,
        "checks": len(model.checks),
        "symptoms": len(model.symptoms),
    }


def test_a_file_named_like_a_demo_wins(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "rooftop").write_text("not xml", encoding="utf-8")
    status, _out, err = run_check(capsys, "rooftop")
    assert status == 2 and "rooftop:1: error: not an XML file" in err


def _subprocess_check(path) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "troubleshoot", "check", str(path)],
        capture_output=True,
        text=True,
        check=False,
        cwd=Path(__file__).resolve().parents[1],
    )


def test_real_process_prints_problems_without_traceback():
    path = BAD / "several_problems.xml"
    result = _subprocess_check(path)
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    assert result.stdout == ""
    assert result.stderr.count(f"troubleshoot: {path}:") >= 3


def test_real_process_on_hostile_file():
    result = _subprocess_check(BAD / "billion_laughs.xml")
    assert result.returncode == 2
    assert "Traceback" not in result.stderr and "declares entities" in result.stderr
