"""Escalation as an action a technician takes: the session, the log, replay and resume, the summary,
the line mode and learning.

References: faulttrees/FORMAT.md, "<escalation cost>": escalating means what the
model's label says and costs its price, counted once; afterwards the unit is
taken as put right (so the diagnosis is finished). The README's log format
section: every action line carries the state shown after it, the hash chain
(SHA-256, FIPS 180-4) covers every byte. The expected figures below are read
from the model files and the tests' own model, not from the product.
"""

from __future__ import annotations

import io
import json
import math

import pytest

from test_escalation import unit
from troubleshoot.errors import LogError, SessionError
from troubleshoot.model.xmlfile import load_model, save_model
from troubleshoot.session.actions import ActionError, Escalate, action_from_record, describe, parse_action
from troubleshoot.session.logfile import new_session, read_log, resume_session
from troubleshoot.session.replay import replay_log
from troubleshoot.session.summary import write_summary


def model_file(tmp_path, price: float | None = 300.0):
    """The two-part unit of tests/test_escalation.py, written to a file (price in min)."""
    path = tmp_path / f"unit-{price}.xml"
    save_model(unit(price), path)
    return path


def cleared_session(tmp_path, price: float | None = 300.0, name: str = "s.jsonl"):
    """Both listed parts checked sound: P(the cause is outside the model) is above the threshold."""
    session = new_session(str(model_file(tmp_path, price)), log_path=tmp_path / name)
    session.record_finding("fan_turns", "free")
    session.record_finding("fuse_ok", "good")
    return session


# ---------------------------------------------------------------------- the action


def test_escalate_is_typed_in_the_line_mode_and_checked_when_read():
    assert parse_action("escalate") == Escalate()
    assert parse_action("Escalate  customer wants a swap today ") == Escalate("customer wants a swap today")
    record = {"action": "escalate", "reason": "r", "label": "call", "cost": 300.0, "cost_unit": "min",
              "outside_model_p": 0.97, "advised": True}
    assert action_from_record(record) == Escalate("r", "call", 300.0, "min", 0.97, True)
    assert Escalate("r", "call", 300.0, "min", 0.97, True).to_record() == record
    assert describe(record) == "escalate (call)"
    for field, bad in (("cost", -1.0), ("cost", math.inf), ("cost", "300"), ("outside_model_p", 1.5),
                       ("advised", "yes"), ("label", 3)):
        with pytest.raises(ActionError, match=field):
            action_from_record({**record, field: bad})


# ---------------------------------------------------------------------- the session


def test_escalating_ends_the_session_at_the_models_price(tmp_path):
    session = cleared_session(tmp_path)
    before = session.state
    assert before.decision.action == "escalate"  # the policy advises it (tests/test_escalation.py)
    spent = before.cost_spent
    state = session.escalate("nothing listed is at fault")
    assert state.status == "escalated" and state.decision.action == "done"
    # FORMAT.md: the price (300 min in the file) is counted once.
    assert state.cost_spent == pytest.approx(spent + load_model(model_file(tmp_path)).escalation.cost)
    action = session.actions[-1]
    assert action == Escalate("nothing listed is at fault", "call the maker's engineer", 300.0, "min",
                              pytest.approx(before.outside_model_p, abs=1e-12), True)
    # Finished: every action that changes the record is refused and changes nothing; a note is kept.
    for refused in (lambda: session.correct_finding("fan_turns", "seized"), lambda: session.record_repair("fan"),
                    lambda: session.skip_check("fan_turns", "no ladder"), lambda: session.escalate()):
        with pytest.raises(SessionError, match="handed over"):
            refused()
        assert session.state == state
    session.add_note("unit tagged for the engineer")
    assert session.state.status == "escalated"
    # Undo takes the note back, then the escalation: the diagnosis goes on.
    session.undo()
    session.undo()
    assert session.state.status == before.status and session.state.cost_spent == spent
    session.record_repair("fan")
    assert session.state.status == "awaiting-verification"
    session.close()


def test_escalating_is_open_at_any_time_until_a_confirmed_repair(tmp_path):
    session = new_session(str(model_file(tmp_path)), log_path=tmp_path / "a.jsonl")
    assert session.state.decision.action == "check"
    session.record_repair("fuse")  # awaiting its verification: escalating is still open
    session.escalate()
    assert session.actions[-1].advised is False and session.state.status == "escalated"
    assert session.state.verification is None
    session.undo()
    session.record_verification("works")
    assert session.state.status == "confirmed"
    with pytest.raises(SessionError, match="confirmed"):
        session.escalate()
    session.close()


def test_without_a_price_the_escalation_is_logged_without_one(tmp_path):
    session = cleared_session(tmp_path, None)
    spent = session.state.cost_spent
    state = session.escalate()
    assert session.actions[-1].cost is None and session.actions[-1].label is None
    assert session.actions[-1].advised is True  # FORMAT.md: still advised once outside the model
    assert state.cost_spent == spent
    session.close()


# ---------------------------------------------------------------------- log, replay, resume


def test_log_round_trip_replay_and_resume_with_an_escalation(tmp_path):
    session = cleared_session(tmp_path)
    p_outside = session.state.outside_model_p
    session.escalate("customer agreed")
    session.close()
    log = tmp_path / "s.jsonl"
    contents = read_log(log)
    line = contents.actions[-1]
    assert line.action == session.actions[-1]
    record = line.record
    assert record["status"] == "escalated"
    assert record["action"]["cost"] == 300.0 and record["action"]["cost_unit"] == "min"
    assert record["action"]["outside_model_p"] == pytest.approx(p_outside, abs=1e-12)
    # Every action line carries the outside-model figures and the decision.
    previous = contents.actions[-2].record
    assert previous["outside_model_p"] == pytest.approx(p_outside, abs=1e-12)
    assert previous["outside_model_by_gate"] == {"top": pytest.approx(p_outside, abs=1e-12)}
    assert previous["decision"] == {"action": "escalate", "target": None, "expected_cost": 300.0}
    report = replay_log(log)
    assert report.confirmed, report.messages
    # Resume: still escalated; undo takes it back and the diagnosis goes on, all in the same log.
    resumed = resume_session(log)
    assert resumed.state.status == "escalated"
    resumed.undo()
    resumed.record_repair("fan")
    resumed.close()
    report = replay_log(log)
    assert report.confirmed, report.messages
    kinds = [line.record["action"]["action"] for line in read_log(log).actions]
    assert kinds == ["finding", "finding", "escalate", "resume", "undo", "repair"]


def test_replay_names_an_escalation_priced_differently_now(tmp_path):
    session = cleared_session(tmp_path)
    session.escalate()
    session.close()
    from troubleshoot.session.replay import rerun

    report = rerun(read_log(tmp_path / "s.jsonl"), unit(450.0), stop_at_difference=False)
    assert not report.confirmed
    # The decision logged before it priced escalating at 300 min too.
    assert any(d.key == "decision" and d.name == "expected_cost" and d.logged == 300.0 for d in report.differences)
    costs = [d for d in report.differences if d.key == "escalate" and d.name == "cost"]
    assert costs and costs[0].logged == 300.0 and costs[0].now == 450.0
    assert "the escalation's cost is 300.0 in the log but 450.0 now" in costs[0].text()


def as_version_1(log, drop=()) -> list[dict]:
    """Rewrite a log as format version 1 (no hash chain), leaving out the snapshot keys ``drop``."""
    lines = [json.loads(x) for x in log.read_text().splitlines()]
    lines[0]["format_version"] = 1
    for record in lines:
        for key in ("prev", "hash") + tuple(drop):
            record.pop(key, None)
    log.write_text("".join(json.dumps(r) + "\n" for r in lines))
    return lines


def test_a_log_line_without_the_new_figures_replays_unchanged(tmp_path):
    # Logs written before the outside-model figures and the decision were logged lack those keys.
    session = new_session(str(model_file(tmp_path)), log_path=tmp_path / "old.jsonl")
    session.record_finding("fan_turns", "free")
    session.close()
    log = tmp_path / "old.jsonl"
    as_version_1(log, drop=("outside_model_p", "outside_model_by_gate", "decision"))
    report = replay_log(log)
    assert report.confirmed, report.messages


def test_a_damaged_figure_in_an_escalate_line_is_named(tmp_path):
    session = cleared_session(tmp_path)
    session.escalate()
    session.close()
    log = tmp_path / "s.jsonl"
    lines = as_version_1(log)
    assert replay_log(log).confirmed
    lines[3]["action"]["outside_model_p"] = 7.0  # line 4: the escalation
    log.write_text("".join(json.dumps(r) + "\n" for r in lines))
    with pytest.raises(LogError, match=r"s\.jsonl:4: .*outside_model_p.*probability from 0 to 1"):
        read_log(log)
    lines[3]["action"]["outside_model_p"] = 0.5
    lines[2]["decision"] = {"action": "check"}  # line 3: a decision without its cost
    log.write_text("".join(json.dumps(r) + "\n" for r in lines))
    with pytest.raises(LogError, match=r"s\.jsonl:3: field 'decision'"):
        read_log(log)


# ---------------------------------------------------------------------- summary and line mode


def test_line_mode_escalates_and_the_summary_says_so(tmp_path):
    from troubleshoot.ui.plain import interact

    session = new_session(str(model_file(tmp_path)), log_path=tmp_path / "plain.jsonl")
    out = io.StringIO()
    interact(session, io.StringIO("fan_turns=free\nfuse_ok=good\nescalate customer agreed\nfan_turns=seized\n"
                                  "quit\n"), out)
    text = out.getvalue()
    # The advice, its price with its unit, before the technician escalates.
    assert "advice: escalate (300 min)" in text and "cause outside the model: P = 0.9" in text
    assert "status: escalated" in text
    assert "refused: cannot record a finding: the unit was handed over (escalated)" in text
    path = write_summary(session, _now())
    session.close()
    summary = path.read_text()
    assert "**Ending:** Escalated — handed over: call the maker's engineer (300 min); reason: customer agreed" \
        in summary
    assert "escalation 300 min" in summary
    assert "Escalated: call the maker's engineer — advised by the tool; a cause this model does not list: " \
           "near certain" in summary
    assert "| 300 min |" in summary


def test_resume_plain_takes_the_escalate_command(tmp_path, monkeypatch, capsys):
    from troubleshoot.cli import main

    session = cleared_session(tmp_path)
    session.close()
    monkeypatch.setattr("sys.stdin", io.StringIO("escalate\n"))
    assert main(["resume", "--plain", str(tmp_path / "s.jsonl")]) == 0
    assert "status: escalated" in capsys.readouterr().out
    assert "**Ending:** Escalated" in (tmp_path / "s.md").read_text()


def _now():
    import datetime as dt

    return dt.datetime.now(dt.UTC)


# ---------------------------------------------------------------------- learning


def test_learning_reads_an_escalated_session(tmp_path):
    from troubleshoot.study.learn import fold_actions, model_sha256, read_session

    session = cleared_session(tmp_path)
    session.escalate()
    session.close()
    path = model_file(tmp_path)
    data, problems = read_session(str(tmp_path / "s.jsonl"), load_model(path), model_sha256(path))
    assert problems == [] and data is not None and data.escalated
    assert [f.target for f in data.findings] == ["top", "fan_turns", "fuse_ok"]
    model = unit(300.0)
    actions = [line.action for line in read_log(tmp_path / "s.jsonl").actions]
    undone = fold_actions(model, actions + [action_from_record({"action": "undo"})])
    assert not undone.escalated
    assert not fold_actions(model, actions[:-1]).escalated


def test_learn_counts_escalated_sessions(tmp_path, capsys):
    from troubleshoot.cli import main

    logs = tmp_path / "logs"
    logs.mkdir()
    model = model_file(tmp_path)
    for name, escalate in (("a.jsonl", True), ("b.jsonl", False)):
        session = new_session(str(model), log_path=logs / name)
        session.record_finding("fan_turns", "free")
        if escalate:
            session.escalate()
        session.close()
    assert main(["learn", str(model), str(logs), "-o", str(tmp_path / "learned.xml"), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["escalated_sessions"] == 1
