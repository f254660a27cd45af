"""The supervisor's record: a session with a correction, an undo, a crash and a resume, a confirmed repair.

The session is started with the job fields, worked through the Session API,
"crashed" the way a killed process leaves a log (a torn last line, no
summary written), then resumed and finished with ``troubleshoot resume
--plain`` reading commands from standard input, which writes the summary.
The summary must list every action in the order of the log, each with the
time the log gives it, and say the ending in plain words.
"""

from __future__ import annotations

import io
import json
import os

from troubleshoot.cli import main
from troubleshoot.session.logfile import new_session, read_log
from troubleshoot.session.summary import summary_markdown, summary_path

JOB = {"technician": "R. Alvarez", "unit": "RTU-7 SN 4471", "site": "Depot roof B", "work_order": "WO-2291"}


def _clock(stamp: str) -> str:
    return stamp.replace("T", " ")[:19]


def test_summary_lists_correction_undo_crash_resume_and_the_confirmed_repair(tmp_path, monkeypatch, capsys):
    log = tmp_path / "s.jsonl"
    session = new_session("rooftop", log, job=JOB)
    model = session.model
    weak, iced = "weak_airflow", "suction_line_iced"
    session.record_finding(weak, model.check_by_id[weak].outcomes[0])
    session.correct_finding(weak, model.check_by_id[weak].outcomes[1])  # it was weak after all
    session.record_finding(iced, model.check_by_id[iced].outcomes[1])
    session.undo()  # the ice was on another unit
    caution_check = next(c for c in model.checks if c.caution)
    session.acknowledge_caution(caution_check.id)
    session.skip_check("economizer_damper", "no access to the damper today")
    # The crash: the process dies while writing the next line; nothing closes the session.
    os.close(session.log._fd)  # the file is left as the killed process left it
    session.log._fd = None
    with open(log, "ab") as fh:
        fh.write(b'{"kind": "action", "seq": 7, "time": "2026-')
    assert not summary_path(log).exists()

    filters = model.event_by_id["filters_clogged"]
    commands = [f"repair {filters.id}", f"verify {model.verification.outcomes[0]}", "quit"]
    monkeypatch.setattr("sys.stdin", io.StringIO("\n".join(commands) + "\n"))
    assert main(["resume", str(log), "--plain"]) == 0
    assert f"summary: {summary_path(log)}" in capsys.readouterr().err

    text = summary_path(log).read_text(encoding="utf-8")
    records = [line.record for line in read_log(log).actions]
    kinds = [r["action"]["action"] for r in records]
    assert kinds == ["finding", "correct", "finding", "undo", "acknowledge", "skip", "resume", "repair", "verify"]
    # Every action in the order of the log, each with its time.
    table = text.split("## Every action, in order")[1].split("\n## ")[0]
    rows = [line for line in table.splitlines() if line.startswith("| ") and not line.startswith("| #")]
    assert len(rows) == len(records)
    for number, (row, record) in enumerate(zip(rows, records), 1):
        assert row.startswith(f"| {number} | {_clock(record['time'])} |")
    words = [row.split(" | ")[2] for row in rows]
    weak_label = model.check_by_id[weak].label
    assert words[0] == f"Check: {weak_label} → {model.check_by_id[weak].outcomes[0]}"
    assert words[1] == f"Correction: {weak_label} now reads {model.check_by_id[weak].outcomes[1]}"
    assert words[3] == (f"Undo: took back “Check: {model.check_by_id[iced].label} → "
                        f"{model.check_by_id[iced].outcomes[1]}”")
    assert words[4].startswith(f"Caution acknowledged: {caution_check.label}")
    assert words[5] == f"Skipped: {model.check_by_id['economizer_damper'].label} — no access to the damper today"
    assert words[6].startswith("Session resumed from its log")
    assert words[7] == f"Repair: {filters.repair.label} — part: {filters.label}"
    assert rows[7].endswith(f"| {filters.repair.cost:g} min |")
    assert words[8].startswith(f"Verification of the repair of {filters.label}: {model.verification.label}")
    # The ending in plain words; who, which unit, where, which work order; cost and time apart.
    assert "- **Ending:** Confirmed — the unit works after the repair of " + filters.label in text
    for value in JOB.values():
        assert value in text
    assert json.loads(log.read_text(encoding="utf-8").splitlines()[0])["job"] == JOB
    spent = model.check_by_id[weak].cost + filters.repair.cost + model.verification.cost
    assert f"- **Cost of the steps, by the model's figures:** {spent:g} min" in text
    assert "- **Wall-clock time:** " in text


def _state(status, **extra):
    from troubleshoot.session.session import SessionState

    base = dict(status=status, ranking=(), next_check=None, suspects=(), entropy_bits=0.0, log_p_findings=0.0,
                findings=(), repairs=(), skipped=(), notes=(), cost_spent=0.0, cost_unit="min", isolated=None,
                ambiguity_group=None, repair_order=(), verification=None, cautions=(), epoch=0, settings=None)
    base.update(extra)
    return SessionState(**base)


def test_the_ending_is_said_honestly():
    from troubleshoot.advice.diagnosis import Suspect
    from troubleshoot.model.demos import demo_path
    from troubleshoot.model.xmlfile import load_model

    model = load_model(demo_path("rooftop"))
    a = Suspect("filters_clogged", "Return-air filters clogged", 0.5)
    b = Suspect("blower_belt_broken", "Blower belt broken or slipping", 0.4)
    group = summary_markdown(model, _state("ambiguity", ambiguity_group=(a, b), suspects=(a, b)))
    assert "**Ending:** Stopped with an ambiguity group" in group and a.label in group and b.label in group
    assert "Fault repaired" not in group
    open_ = summary_markdown(model, _state("isolated", isolated=a, suspects=(a,)))
    assert "**Ending:** Abandoned" in open_
    # The ending is the session's status (an escalate action that stands), not the last line's kind.
    record = {"time": "2026-12-02T05:00:00Z", "action": {"action": "escalate", "reason": "customer asked",
                                                          "label": model.escalation.label, "cost": 720.0}}
    escalated = summary_markdown(model, _state("escalated", suspects=(a,)), records=[record])
    assert "**Ending:** Escalated" in escalated and model.escalation.label in escalated
    assert "reason: customer asked" in escalated and "| 720 min |" in escalated
    undone = summary_markdown(model, _state("ambiguity", suspects=(a,)),
                              records=[record, {"time": "2026-12-02T05:01:00Z", "action": {"action": "undo"}}])
    assert "**Ending:** Escalated" not in undone and "Undo: took back “Escalated" in undone
