"""A seeded mutation fuzzer for session logs: every mutated log ends in success or exit 2 with a
message, never a traceback, a hang or a silent acceptance of a changed log.

Each case takes a log written by a real session (format version 2, chained, or the version-1
fixture), applies one to three random mutations (bit flips, byte changes, deleted, duplicated,
swapped or inserted lines, cuts at any byte, JSON fields edited, renamed, removed or retyped,
deep nesting, binary junk) and runs ``replay`` and ``resume --plain`` on it in process.

Outcomes counted:

- ``unchanged``: the mutation left the bytes as they were (or only cut whole lines off the end,
  which looks exactly like a session stopped earlier: no file can tell them apart);
- ``torn``: accepted with the torn-last-line warning;
- ``v1-caveat``: a version-1 log (no chain) accepted; the verdict says edits cannot be detected;
- ``differs`` (replay exit 1, where and why printed), ``refused`` (exit 2 with a message);
- failures: ``traceback`` (an exception escaped, or exit 70), ``hang`` (over 30 s),
  ``silent`` (a changed version-2 log confirmed without a word).

CI runs ``TROUBLESHOOT_FUZZ_LOGS`` cases (default 200); set it higher on request, e.g. 1000.
Same seed, same cases (``TROUBLESHOOT_FUZZ_SEED``, default 17).
"""

from __future__ import annotations

import json
import os
import random
import shutil
import signal
import sys
from collections import Counter
from pathlib import Path

import pytest

from test_session import pump_model
from troubleshoot.cli import main
from troubleshoot.model.xmlfile import save_model
from troubleshoot.session.logfile import new_session

FIXTURES = Path(__file__).parent / "session_logs"
CASES = int(os.environ.get("TROUBLESHOOT_FUZZ_LOGS", "200"))
SEED = int(os.environ.get("TROUBLESHOOT_FUZZ_SEED", "17"))
HANG_SECONDS = 30

ACTIONS = [
    {"action": "acknowledge", "check": "flow"},
    {"action": "finding", "check": "flow", "outcome": "flow normal"},
    {"action": "skip", "check": "sensor_cal", "reason": "no calibrator on the van"},
    {"action": "note", "text": "pump room flooded last week"},
    {"action": "finding", "check": "lamp", "outcome": "on"},
    {"action": "undo"},
    {"action": "finding", "check": "lamp", "outcome": "off"},
    {"action": "correct", "check": "lamp", "outcome": "on"},
    {"action": "retract", "check": "lamp"},
    {"action": "finding", "check": "valve_look", "outcome": "closed"},
    {"action": "repair", "event": "valve"},
    {"action": "verify", "outcome": "flows"},
]


class _Hang(Exception):
    pass


class _EndOfInput:
    def readline(self) -> str:
        return ""

    def isatty(self) -> bool:
        return False


# ---------------------------------------------------------------------- mutations


def _lines(data: bytes) -> list[bytes]:
    return data.split(b"\n")


def _random_value(rng: random.Random):
    return rng.choice(["3", 3, -1, 2.5, True, None, [], {}, "", "x" * 50, [1, [2]], {"id": 1}, 1e308, "2024-13-45"])


def _edit_json(rng: random.Random, data: bytes) -> bytes:
    lines = _lines(data)
    index = rng.randrange(len(lines))
    try:
        record = json.loads(lines[index])
    except ValueError:
        return data
    if not isinstance(record, dict) or not record:
        return data
    targets: list[tuple[dict, str]] = [(record, k) for k in record]
    for key in ("action", "settings"):
        if isinstance(record.get(key), dict):
            targets += [(record[key], k) for k in record[key]]
    for key in ("ranking", "suspects"):
        if isinstance(record.get(key), list) and record[key] and isinstance(record[key][0], dict):
            targets += [(record[key][0], k) for k in record[key][0]]
    holder, key = rng.choice(targets)
    how = rng.randrange(4)
    if how == 0:
        holder[key] = _random_value(rng)
    elif how == 1:
        del holder[key]
    elif how == 2:
        holder[key + rng.choice(["_", "x", "2"])] = holder.pop(key)
    elif isinstance(holder[key], float):
        holder[key] = holder[key] * (1 + rng.choice([1e-12, 1e-6, 0.1]))
    elif isinstance(holder[key], str) and holder[key]:
        holder[key] = holder[key][:-1] + chr(ord(holder[key][-1]) ^ 1)
    else:
        holder[key] = _random_value(rng)
    lines[index] = json.dumps(record, ensure_ascii=False).encode("utf-8")
    return b"\n".join(lines)


def mutate(rng: random.Random, data: bytes) -> bytes:
    kind = rng.randrange(14)
    lines = _lines(data)
    if kind == 0 and data:  # flip one bit
        i = rng.randrange(len(data))
        return data[:i] + bytes([data[i] ^ (1 << rng.randrange(8))]) + data[i + 1:]
    if kind == 1 and data:  # one byte changed to any byte
        i = rng.randrange(len(data))
        return data[:i] + bytes([rng.randrange(256)]) + data[i + 1:]
    if kind == 2 and len(lines) > 2:  # a line deleted
        del lines[rng.randrange(len(lines) - 1)]
        return b"\n".join(lines)
    if kind == 3 and len(lines) > 2:  # a line duplicated
        i = rng.randrange(len(lines) - 1)
        lines.insert(i, lines[i])
        return b"\n".join(lines)
    if kind == 4 and len(lines) > 3:  # two lines swapped
        i, j = rng.sample(range(len(lines) - 1), 2)
        lines[i], lines[j] = lines[j], lines[i]
        return b"\n".join(lines)
    if kind == 5 and data:  # cut at any byte (a crash, a full disk)
        return data[:rng.randrange(len(data))]
    if kind == 6:  # junk inserted
        i = rng.randrange(len(data) + 1)
        junk = rng.choice([b"\x00", b"\xff\xfe", b"{", b"}", b'"', b"\n", b"\n\n", b"[" * 5000, b"\r\n",
                           bytes(rng.randrange(256) for _ in range(rng.randrange(1, 20)))])
        return data[:i] + junk + data[i:]
    if kind in (7, 8, 9, 10):  # a JSON field edited, removed, renamed or retyped
        return _edit_json(rng, data)
    if kind == 11:  # a whole line appended
        return data + rng.choice([b"{}\n", b'{"kind": "action"}\n', lines[rng.randrange(len(lines))] + b"\n",
                                  b"[" * 100000 + b"\n", b"\xff" * 10 + b"\n"])
    if kind == 12:  # whitespace inside a line (the same JSON, other bytes)
        i = rng.randrange(len(lines))
        lines[i] = lines[i].replace(b": ", b":", 1)
        return b"\n".join(lines)
    return rng.choice([b"", b"\n", b"not a log\n", b"\x89PNG\r\n\x1a\n" + bytes(50), data + data])


def _unchanged(original: bytes, mutated: bytes) -> bool:
    """The same log, or only whole lines cut off its end (a session stopped earlier looks the same)."""
    if mutated == original:
        return True
    return original.startswith(mutated) and (mutated.endswith(b"\n")) and mutated.count(b"\n") >= 1


# ---------------------------------------------------------------------- running


def _run(args: list[str], capsys) -> tuple[int | str, str, str]:
    def alarm(signum, frame):
        raise _Hang()

    previous = signal.signal(signal.SIGALRM, alarm)
    signal.alarm(HANG_SECONDS)
    try:
        status: int | str = main(args)
    except _Hang:
        status = "hang"
    except BaseException as exc:  # anything escaping main is a traceback for the user
        status = f"traceback {exc.__class__.__name__}: {exc}"
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    out = capsys.readouterr()
    return status, out.out, out.err


def classify(status, out: str, err: str, version: int, unchanged: bool) -> str:
    if status == "hang":
        return "hang"
    if not isinstance(status, int) or status == 70 or "Traceback" in err:
        return "traceback"
    if status == 2:
        return "refused" if err.strip() else "silent-refusal"
    if status == 1:
        return "differs"
    if status != 0:
        return f"exit-{status}"
    if "cut off before its end" in err:
        return "torn"
    if unchanged:
        return "unchanged"
    if version == 1:
        return "v1-caveat" if ("format version 1" in out or "version" in err or "resumed" in out) else "silent"
    return "silent"


@pytest.fixture(scope="module")
def base_logs(tmp_path_factory) -> dict:
    folder = tmp_path_factory.mktemp("fuzz")
    model = folder / "pump.xml"
    save_model(pump_model(), model)
    log = folder / "base.jsonl"
    session = new_session(str(model), log)
    for action in ACTIONS:
        session.apply(action)
    session.close()
    v1_model = folder / "pump_v1.xml"
    shutil.copy(FIXTURES / "pump_v1.xml", v1_model)
    records = [json.loads(x) for x in (FIXTURES / "pump_v1.jsonl").read_text(encoding="utf-8").splitlines()]
    records[0]["model_path"] = str(v1_model)
    v1 = "".join(json.dumps(r) + "\n" for r in records).encode("utf-8")
    return {"folder": folder, 2: log.read_bytes(), 1: v1}


def fuzz(base_logs: dict, capsys, cases: int, seed: int) -> tuple[Counter, list[str]]:
    rng = random.Random(seed)
    counts: Counter = Counter()
    failures: list[str] = []
    folder: Path = base_logs["folder"]
    for case in range(cases):
        version = 2 if rng.random() < 0.85 else 1
        original = base_logs[version]
        mutated = original
        for _ in range(rng.choice([1, 1, 1, 2, 3])):
            mutated = mutate(rng, mutated)
        unchanged = _unchanged(original, mutated)
        for command in ("replay", "resume"):
            log = folder / f"case{case}-{command}.jsonl"
            log.write_bytes(mutated)
            args = ["replay", str(log)] if command == "replay" else ["resume", str(log), "--plain"]
            status, out, err = _run(args, capsys)
            outcome = classify(status, out, err, version, unchanged)
            counts[(command, outcome)] += 1
            if outcome in ("traceback", "hang", "silent", "silent-refusal") or outcome.startswith("exit-"):
                failures.append(f"case {case} (seed {seed}, v{version}) {command}: {outcome}: {status} "
                                f"{err.strip()[:300]}")
            for path in (log, log.with_suffix(".md")):
                if path.exists():
                    path.unlink()
    return counts, failures


def test_mutated_session_logs_end_in_success_or_a_clear_refusal(base_logs, capsys, monkeypatch, tmp_path):
    monkeypatch.setattr(sys, "stdin", _EndOfInput())
    monkeypatch.setenv("XDG_STATE_HOME", str(tmp_path / "state"))  # where a crash report would go
    counts, failures = fuzz(base_logs, capsys, CASES, SEED)
    with capsys.disabled():
        table = ", ".join(f"{command} {outcome} {n}" for (command, outcome), n in sorted(counts.items()))
        print(f"\nsession-log fuzzer: {CASES} logs, seed {SEED}: {table}; failures {len(failures)}")
    assert failures == [], "\n".join(failures[:20])
    assert sum(counts.values()) == 2 * CASES
