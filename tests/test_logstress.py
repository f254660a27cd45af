"""Acknowledged actions survive SIGKILL and concurrent resumes of one session log.

An action is acknowledged when the writing process said "done" after
``Session.apply`` returned (the line is written and fsync'd). Rounds on one
log: a process resumes it, applies actions, and is killed with SIGKILL at a
random moment (sometimes with an action in flight); or two processes resume
it at the same moment and both try to write. After every round the log is
resumed again and must hold every acknowledged action, in order.

CI runs ``TROUBLESHOOT_STRESS_KILLS`` kill rounds (default 6) and
``TROUBLESHOOT_STRESS_RESUMES`` concurrent rounds (default 3); the figures
for the note are printed (``pytest -s``), e.g. with 100 and 20.
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time

from test_session import pump_model
from troubleshoot.model.xmlfile import save_model
from troubleshoot.session.logfile import new_session, read_log
from troubleshoot.session.replay import replay_log

KILLS = int(os.environ.get("TROUBLESHOOT_STRESS_KILLS", "6"))
RESUMES = int(os.environ.get("TROUBLESHOOT_STRESS_RESUMES", "3"))

WORKER = """
import sys
from troubleshoot.errors import LogError
from troubleshoot.session.actions import AddNote
from troubleshoot.session.logfile import resume_session
try:
    session = resume_session(sys.argv[1])
except LogError as exc:
    print("refused", exc, flush=True)
    sys.exit(2)
print("ready", flush=True)
for line in sys.stdin:
    session.apply(AddNote(line.strip()))
    print("done", line.strip(), flush=True)
session.close()
"""


def start(log) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-c", WORKER, str(log)], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def logged_notes(log) -> list[str]:
    return [line.action.text for line in read_log(log).actions if line.action.kind == "note"]


def test_no_acknowledged_action_is_lost_to_sigkill_or_concurrent_resumes(tmp_path, capsys):
    rng = random.Random(5)
    model = tmp_path / "pump.xml"
    save_model(pump_model(), model)
    log = tmp_path / "s.jsonl"
    new_session(str(model), log).close()
    acknowledged: list[str] = []
    counter = 0
    kills = in_flight = 0
    for _ in range(KILLS):
        proc = start(log)
        assert proc.stdout.readline().startswith("ready")
        for _ in range(rng.randrange(0, 4)):
            counter += 1
            proc.stdin.write(f"n{counter}\n")
            proc.stdin.flush()
            reply = proc.stdout.readline().split()
            assert reply == ["done", f"n{counter}"]
            acknowledged.append(f"n{counter}")
        if rng.random() < 0.5:  # an action in flight when the kill comes
            counter += 1
            proc.stdin.write(f"n{counter}\n")
            proc.stdin.flush()
            time.sleep(rng.random() * 0.02)
            in_flight += 1
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=60)
        kills += 1
        notes = logged_notes(log)
        assert notes[:len(acknowledged)] == acknowledged
        acknowledged = notes  # an in-flight action that reached the disk counts from now on
    refused = won = 0
    for _ in range(RESUMES):
        a, b = start(log), start(log)
        for proc in (a, b):
            first = proc.stdout.readline()
            if first.startswith("refused"):
                refused += 1
                assert "in use by another session" in first
                proc.wait(timeout=60)
                continue
            assert first.startswith("ready")
            won += 1
            for _ in range(3):
                counter += 1
                proc.stdin.write(f"n{counter}\n")
                proc.stdin.flush()
                assert proc.stdout.readline().split() == ["done", f"n{counter}"]
                acknowledged.append(f"n{counter}")
            proc.stdin.close()
            proc.wait(timeout=60)
        for proc in (a, b):
            if proc.poll() is None:
                proc.stdin.close()
                proc.wait(timeout=60)
    notes = logged_notes(log)
    lost = [n for n in acknowledged if n not in notes]
    report = replay_log(log)
    with capsys.disabled():
        print(f"\nsession-log stress: {kills} SIGKILLs ({in_flight} with an action in flight), "
              f"{RESUMES} concurrent resume pairs ({won} resumes wrote, {refused} refused as in use); "
              f"{len(acknowledged)} acknowledged actions, {len(lost)} lost; replay confirmed: {report.confirmed}")
    assert lost == [] and notes[:len(acknowledged)] == acknowledged
    assert report.confirmed, report.messages
    assert refused + won == 2 * RESUMES and won >= RESUMES
    assert json.loads(log.read_text(encoding="utf-8").splitlines()[-1])["kind"] == "action"
