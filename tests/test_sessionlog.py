"""Session logs: append-only JSON Lines, replay to 1e-9, resume after SIGKILL,
torn last lines, one file per session.

The numbers a replay confirms are recomputed from the model file; the model
file's identity is its SHA-256 (FIPS 180-4).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from test_session import pump_model
from troubleshoot.cli import main
from troubleshoot.errors import LogError
from troubleshoot.model.xmlfile import save_model
from troubleshoot.session.logfile import (
    file_sha256,
    new_session,
    read_log,
    replay_log,
    resume_session,
)

ACTIONS = [
    {"action": "finding", "check": "flow", "outcome": "flow normal"},
    {"action": "skip", "check": "sensor_cal", "reason": "no calibrator on the van"},
    {"action": "note", "text": "pump room flooded last week"},
    {"action": "finding", "check": "lamp", "outcome": "on"},
    {"action": "undo"},
    {"action": "finding", "check": "lamp", "outcome": "off"},
    {"action": "finding", "check": "valve_look", "outcome": "closed"},
    {"action": "repair", "event": "valve"},
    {"action": "verify", "outcome": "flows"},
]


@pytest.fixture
def model_file(tmp_path) -> Path:
    path = tmp_path / "pump.xml"
    save_model(pump_model(), path)
    return path


def lines_of(path: Path) -> list[dict]:
    return [json.loads(x) for x in path.read_text(encoding="utf-8").splitlines()]


def test_log_has_header_and_one_line_per_action_and_replays(model_file, tmp_path):
    log = tmp_path / "s.jsonl"
    s = new_session(str(model_file), log)
    for action in ACTIONS:
        s.apply(action)
    s.close()
    records = lines_of(log)
    header = records[0]
    assert header["kind"] == "header" and header["model_sha256"] == file_sha256(model_file)
    assert header["settings"]["isolation_threshold"] == 0.95 and "tool_version" in header
    assert [r["action"] for r in records[1:]] == ACTIONS
    for r in records[1:]:
        assert r["time"].endswith("Z") and len(r["ranking"]) <= 10 and len(r["suspects"]) <= 10
        assert {"id", "bits", "cost", "score"} <= set(r["ranking"][0]) if r["ranking"] else True
    assert records[-1]["status"] == "confirmed"
    report = replay_log(log)
    assert report.confirmed, report.messages
    assert report.actions == len(ACTIONS)
    assert main(["replay", str(log)]) == 0


def test_replay_says_where_a_number_differs(model_file, tmp_path, capsys):
    log = tmp_path / "s.jsonl"
    s = new_session(str(model_file), log)
    for action in ACTIONS[:3]:
        s.apply(action)
    s.close()
    records = lines_of(log)
    records[2]["suspects"][0]["p"] += 1e-6
    log.write_text("".join(json.dumps(r) + "\n" for r in records), encoding="utf-8")
    report = replay_log(log)
    assert not report.confirmed
    assert f"{log}:3 (skip sensor_cal): suspects row 1" in report.messages[0]
    assert main(["replay", str(log)]) == 1
    assert "suspects row 1" in capsys.readouterr().err


def test_replay_reports_a_changed_model_file(model_file, tmp_path, capsys):
    log = tmp_path / "s.jsonl"
    s = new_session(str(model_file), log)
    s.apply(ACTIONS[0])
    s.close()
    with open(model_file, "a", encoding="utf-8") as fh:
        fh.write("<!-- edited -->\n")
    assert main(["replay", str(log)]) == 1
    assert "the model file changed (SHA-256 differs)" in capsys.readouterr().err


def test_replay_of_unreadable_input_exits_2(tmp_path, capsys):
    bad = tmp_path / "bad.jsonl"
    bad.write_text("this is not a log\n", encoding="utf-8")
    assert main(["replay", str(bad)]) == 2
    assert main(["replay", str(tmp_path / "missing.jsonl")]) == 2
    err = capsys.readouterr().err
    assert "not a troubleshoot session log" in err and "cannot read" in err


def test_torn_last_line_is_skipped_and_resume_truncates_it(model_file, tmp_path):
    log = tmp_path / "s.jsonl"
    s = new_session(str(model_file), log)
    for action in ACTIONS[:4]:
        s.apply(action)
    s.close()
    good = log.read_bytes()
    with open(log, "ab") as fh:
        fh.write(b'{"kind": "action", "seq": 5, "time": "2024-')  # killed mid-write
    contents = read_log(log)
    assert len(contents.actions) == 4 and "cut off" in contents.warnings[0]
    resumed = resume_session(log)
    assert any("skipped" in w for w in resumed.resume_warnings)
    # The torn tail is gone, nothing before it lost; the resume itself is logged after it.
    assert log.read_bytes().startswith(good)
    assert lines_of(log)[-1]["action"]["action"] == "resume" and lines_of(log)[-1]["seq"] == 5
    assert "torn" in lines_of(log)[-1]["action"]["reason"]
    resumed.apply(ACTIONS[4])
    resumed.close()
    assert lines_of(log)[-1]["seq"] == 6
    assert replay_log(log).confirmed


def test_damaged_middle_line_is_an_error(model_file, tmp_path):
    log = tmp_path / "s.jsonl"
    s = new_session(str(model_file), log)
    for action in ACTIONS[:3]:
        s.apply(action)
    s.close()
    text = log.read_text(encoding="utf-8").splitlines()
    text[1] = text[1][:20]
    log.write_text("\n".join(text) + "\n", encoding="utf-8")
    with pytest.raises(LogError, match=r":2: .*damaged"):
        read_log(log)


SCRIPT = """
import json, sys
from troubleshoot.session.logfile import new_session
session = new_session(sys.argv[1], sys.argv[2])
print("ready", flush=True)
for line in sys.stdin:
    session.apply(json.loads(line))
    print("done", flush=True)
"""


def test_session_killed_with_sigkill_resumes_and_replays(model_file, tmp_path):
    log = tmp_path / "killed.jsonl"
    proc = subprocess.Popen([sys.executable, "-c", SCRIPT, str(model_file), str(log)],
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        for action in ACTIONS[:5]:
            proc.stdin.write(json.dumps(action) + "\n")
            proc.stdin.flush()
            assert proc.stdout.readline().strip() == "done"
        os.kill(proc.pid, signal.SIGKILL)  # mid-session, with the log open
    finally:
        proc.wait(timeout=60)
    assert proc.returncode == -signal.SIGKILL
    resumed = resume_session(log)
    assert resumed.actions == ACTIONS[:5] + [{"action": "resume"}]  # the resume is logged
    for action in ACTIONS[5:]:
        resumed.apply(action)
    assert resumed.status == "confirmed"
    resumed.close()
    report = replay_log(log)
    assert report.confirmed and report.actions == len(ACTIONS)


def test_two_sessions_never_write_the_same_file(model_file, tmp_path, monkeypatch):
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    sessions = [new_session(str(model_file)) for _ in range(12)]
    paths = {s.log.path for s in sessions}
    assert len(paths) == 12
    assert all(p.parent == tmp_path / "data" / "troubleshoot" / "sessions" for p in paths)
    taken = sessions[0].log.path
    with pytest.raises(LogError, match="already exists"):
        new_session(str(model_file), taken)
    with pytest.raises(LogError, match="in use by another session"):
        resume_session(taken)  # sessions[0] still holds it
    for s in sessions:
        s.close()
    resume_session(taken).close()


def test_session_from_a_model_object_needs_the_model_to_replay(tmp_path):
    log = tmp_path / "s.jsonl"
    s = new_session(pump_model(), log)
    s.apply(ACTIONS[0])
    s.close()
    with pytest.raises(LogError, match="--model"):
        replay_log(log)
    assert replay_log(log, model=pump_model()).confirmed
