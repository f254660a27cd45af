"""The session log file: append, fsync, lock, read, torn lines, the hash chain.

One JSON Lines file per session. Line 1 is the header: the file format and
its version, the tool version, the model file's path and SHA-256, the
session settings, the start time and the state after the complaint. Every
further line is one action: its sequence number, time (ISO 8601, UTC), the
action (:meth:`troubleshoot.session.actions.Action.to_record`) and what the
tool showed after it (the top 10 of the ranking with bits, cost and score,
the top 10 suspects with their probability, the remaining entropy in bits,
log P(findings), the status, P(the cause lies outside the model) in total
and per gate, and the decision: action, target and expected cost to finish
in the model's cost unit). Lines written before the outside-model figures
and the decision were logged lack those keys and read as they always did.

Format version 2 chains the lines: each carries ``seq`` (0 for the header,
then 1, 2, ...), ``prev`` (the ``hash`` of the line before it, null for the
header) and, last, ``hash``: the SHA-256 (FIPS 180-4) of the line's bytes up
to the comma before ``"hash"``. Reading checks all three, so an edit, a
deletion, a duplicate, a moved line or a flipped byte is reported with its
line. A log cut short at a line boundary looks like a session stopped
earlier: nothing in the file can tell the two apart. Version 1 logs (no
chain) still read, replay and resume, and stay version 1 when resumed.

Each line is written with one ``write`` and made durable with ``os.fsync``
before the action counts as done, so a crash loses at most the action being
written. A torn last line (no newline: the writer was killed mid-write) is
skipped with a warning and cut off when the session is resumed; a last line
that ends with its newline but does not read is damage, not a tear.

A log is locked (``flock``) by the one process writing it. Resuming takes the
lock first, then reads and re-runs the log under it, and refuses if the file
changed meanwhile, so two ``resume`` of one log never both write and no
acknowledged action is lost.

Logs go to ``platformdirs.user_data_dir("troubleshoot")/sessions/`` by
default, one file per session named by its UTC start time and a random
suffix, created with ``O_EXCL`` so two sessions never share a file.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import os
import re
import secrets
import stat
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from troubleshoot.errors import LogError, SessionError, TroubleshootError
from troubleshoot.files import open_input, read_fd
from troubleshoot.model import Model
from troubleshoot.session.actions import Action, ActionError, Resume, action_from_record
from troubleshoot.session.session import STATUSES, Session, SessionView, settings_for

try:  # advisory lock so two processes never append to one log
    import fcntl
except ImportError:  # pragma: no cover - not on POSIX
    fcntl = None  # type: ignore[assignment]

LOG_FORMAT = "troubleshoot-session-log"
#: The version this tool writes for new logs.
LOG_FORMAT_VERSION = 2
#: Versions this tool reads (1: before the hash chain).
READABLE_VERSIONS = (1, 2)
#: Rows of the ranking and of the suspects written per action.
LOGGED_ROWS = 10
#: The job fields a log header may carry (who, which unit, where, which work order).
JOB_KEYS = ("technician", "unit", "site", "work_order")
#: A log larger than this is refused (a long session writes well under 10 MB).
LOG_MAX_BYTES = 64 * 1024 * 1024
#: The keys of the state shown after each action, as the log keeps it.
SNAPSHOT_KEYS = ("status", "entropy_bits", "log_p_findings", "ranking", "suspects")
#: Keys logged since the escalation became an action (a line of an older log lacks them; no difference).
LATER_SNAPSHOT_KEYS = ("outside_model_p", "outside_model_by_gate", "decision")

_HASH_TAIL = re.compile(rb', "hash": "([0-9a-f]{64})"\}\Z')
_HASH_TAIL_LENGTH = len(b', "hash": "') + 64 + len(b'"}')


# ---------------------------------------------------------------------- records


def utc_now() -> str:
    """The current time, ISO 8601 in UTC, e.g. ``2024-05-01T09:30:00.123456Z``."""
    return _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _json_score(score: float):
    return None if math.isinf(score) else score


def snapshot(view: SessionView) -> dict:
    """What the tool shows after an action, in the form the log keeps."""
    return {
        "status": str(view.status),
        "entropy_bits": view.entropy_bits,
        "log_p_findings": view.posterior.log_p,
        "ranking": [{"id": r.check, "bits": r.bits, "cost": r.cost, "score": _json_score(r.score)}
                    for r in view.ranking.rows[:LOGGED_ROWS]],
        "suspects": [{"id": s.id, "p": s.p} for s in view.suspects[:LOGGED_ROWS]],
        "outside_model_p": view.outside_model.p,
        "outside_model_by_gate": dict(view.outside_model.by_gate),
        "decision": {"action": str(view.decision.action), "target": view.decision.target,
                     "expected_cost": _finite(view.decision.expected_cost)},
    }


def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes, in hexadecimal."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 16), b""):
            digest.update(block)
    return digest.hexdigest()


def header_record(session: Session, version: int = LOG_FORMAT_VERSION) -> dict:
    """The header line of a new log for ``session`` (without the chain fields)."""
    from troubleshoot import __version__

    path = session.model_path
    return {
        "kind": "header",
        "format": LOG_FORMAT,
        "format_version": version,
        "tool_version": __version__,
        "model_name": session.model.name,
        "model_path": str(path) if path else None,
        "model_sha256": file_sha256(path) if path else None,
        "engine": session.engine.name,
        "settings": {
            "isolation_threshold": session.settings.isolation_threshold,
            "min_bits": session.settings.min_bits,
            "group_min_p": session.settings.group_min_p,
            "value_lookahead": session.settings.value_lookahead,
            "value_depth": session.settings.value_depth,
            "value_run": session.settings.value_run,
            "value_after_repair": session.settings.value_after_repair,
        },
        "time": utc_now(),
        "job": dict(getattr(session, "job", None) or {}),
        **snapshot(session.view),
    }


def encode_line(record: dict, seq: int, prev: str | None, version: int = LOG_FORMAT_VERSION) -> tuple[bytes, str | None]:
    """One log line (with its newline) and its hash (None for version 1).

    Version 2 puts ``kind``, ``seq`` and ``prev`` first and ``hash`` last:
    the SHA-256 of the UTF-8 bytes before ``, "hash"``.
    """
    if version == 1:
        body = dict(record)
        if record.get("kind") == "action":
            body = {"kind": "action", "seq": seq, **{k: v for k, v in record.items() if k not in ("kind", "seq")}}
        return (json.dumps(body, allow_nan=False, ensure_ascii=False) + "\n").encode("utf-8"), None
    body = {"kind": record["kind"], "seq": seq, "prev": prev,
            **{k: v for k, v in record.items() if k not in ("kind", "seq", "prev", "hash")}}
    text = json.dumps(body, allow_nan=False, ensure_ascii=False)
    prefix = text[:-1].encode("utf-8")  # without the closing brace
    digest = hashlib.sha256(prefix).hexdigest()
    return prefix + b', "hash": "' + digest.encode("ascii") + b'"}\n', digest


# ---------------------------------------------------------------------- writing


def default_log_dir() -> Path:
    """``platformdirs.user_data_dir("troubleshoot")/sessions``."""
    import platformdirs

    return Path(platformdirs.user_data_dir("troubleshoot")) / "sessions"


def _lock(fd: int, path: Path) -> None:
    if fcntl is None:
        return
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        os.close(fd)
        raise LogError(f"{path}: the session log is in use by another session; close that one first") from None


def create_log_file(log_path: str | os.PathLike | None = None) -> tuple[Path, int]:
    """Create a new, empty log file with O_EXCL, lock it, and return its path and descriptor.

    Without ``log_path`` the file goes to :func:`default_log_dir`, named by
    the UTC time and a random suffix (a new suffix is drawn if the name is
    somehow taken). ``O_EXCL`` never follows a symbolic link.
    """
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_APPEND | getattr(os, "O_CLOEXEC", 0)
    if log_path is not None:
        path = Path(log_path)
        try:
            fd = os.open(path, flags, 0o644)
        except FileExistsError:
            raise LogError(f"{path}: a session log already exists there; continue it with "
                           f"'troubleshoot resume {path}' or choose another --log path") from None
        except OSError as exc:
            raise LogError(f"{path}: cannot create the session log ({exc.strerror}); "
                           "choose a writable --log path") from None
        _lock(fd, path)
        return path, fd
    directory = default_log_dir()
    try:
        directory.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise LogError(f"{directory}: cannot create the session log folder ({exc.strerror}); "
                       "give --log PATH") from None
    for _ in range(16):
        stamp = _dt.datetime.now(_dt.UTC).strftime("%Y%m%dT%H%M%S%fZ")
        path = directory / f"{stamp}-{secrets.token_hex(4)}.jsonl"
        try:
            fd = os.open(path, flags, 0o644)
        except FileExistsError:
            continue
        except OSError as exc:
            raise LogError(f"{path}: cannot create the session log ({exc.strerror}); give --log PATH") from None
        _lock(fd, path)
        return path, fd
    raise LogError(f"{directory}: could not find a free session log name; give --log PATH")


class LogWriter:
    """Appends records to an open, locked session log, one line each, fsync'd.

    Attributes
    ----------
    path : Path
    seq : int
        Sequence number of the last line written (0: the header).
    prev : str or None
        Hash of the last line written (version 2).
    version : int
        The log's format version (a resumed version-1 log stays version 1).
    """

    def __init__(self, path: Path, fd: int, seq: int = 0, prev: str | None = None,
                 version: int = LOG_FORMAT_VERSION):
        self.path = Path(path)
        self._fd: int | None = fd
        self.seq = seq
        self.prev = prev
        self.version = version
        self._wrote_header = seq > 0 or prev is not None

    def write_record(self, record: dict) -> None:
        """One line, one ``write``, then ``fsync``; refused (SessionError) when the disk says no."""
        if self._fd is None:
            raise SessionError(f"{self.path}: the session log is closed")
        seq = self.seq + 1 if self._wrote_header else 0
        data, digest = encode_line(record, seq, self.prev, self.version)
        try:
            written = os.write(self._fd, data)
            while written < len(data):
                written += os.write(self._fd, data[written:])
            os.fsync(self._fd)
        except OSError as exc:
            raise SessionError(f"{self.path}: cannot write the session log ({exc.strerror}); "
                               "the action was not recorded") from None
        self.seq, self.prev, self._wrote_header = seq, digest, True

    def write_header(self, session: Session) -> None:
        self.write_record(header_record(session, self.version))

    def write_action(self, action: Action, view: SessionView) -> None:
        self.write_record({"kind": "action", "time": utc_now(), "action": action.to_record(), **snapshot(view)})

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None


# ---------------------------------------------------------------------- sessions


def _load_model(model_or_path) -> tuple[Model, str | None]:
    if isinstance(model_or_path, Model):
        source = model_or_path.source
        if source and Path(source).is_file():
            return model_or_path, str(Path(source).resolve())
        return model_or_path, None
    from troubleshoot.model.source import load_any_model, resolve_model_path

    path = resolve_model_path(str(model_or_path))
    model, _warnings = load_any_model(str(path))
    return model, str(path.resolve())


def new_session(model_or_path, log_path: str | os.PathLike | None = None, *,
                isolation_threshold: float | None = None, min_bits: float | None = None,
                group_min_p: float | None = None, write_log: bool = True,
                job: dict | None = None) -> Session:
    """Start a session on a model (a Model, a model file path or a demo name) and open its log.

    Parameters
    ----------
    model_or_path : Model, str or Path
    log_path : path, optional
        Where the log goes (must not exist); default a new file in
        :func:`default_log_dir`.
    isolation_threshold, min_bits, group_min_p : float, optional
        Override the model's isolation threshold and the defaults.
    write_log : bool
        False: no log at all (a one-shot query).
    job : dict, optional
        Who and what the session is for: ``technician``, ``unit`` (serial or
        tag), ``site``, ``work_order`` (empty ones are left out); written in
        the log header and the summary.

    Returns
    -------
    Session
        ``session.log.path`` is the log file.
    """
    model, model_path = _load_model(model_or_path)
    settings = settings_for(model, isolation_threshold, min_bits, group_min_p)
    session = Session(model, settings, model_path=model_path)
    session.job = clean_job(job)
    if write_log:
        path, fd = create_log_file(log_path)
        writer = LogWriter(path, fd)
        try:
            writer.write_header(session)
        except TroubleshootError:
            writer.close()
            raise
        session.log = writer
    return session


def clean_job(job: dict | None) -> dict:
    """The job fields given (technician, unit, site, work_order), stripped, empty ones left out."""
    out = {}
    for key in JOB_KEYS:
        value = (job or {}).get(key)
        if value is not None and str(value).strip():
            out[key] = str(value).strip()
    return out


def job_of(contents: LogContents) -> dict:
    """The job fields of a log: its header's, updated by any ``job`` line (typed after the start)."""
    job = clean_job(contents.header.get("job"))
    for line in contents.actions:
        if line.record["action"].get("action") == "job":
            job.update(clean_job(line.record["action"]))
    return job


# ---------------------------------------------------------------------- reading


@dataclass(frozen=True)
class LogLine:
    """One action line as read: its line number, its record and its typed action."""

    number: int
    record: dict
    action: Action


@dataclass
class LogContents:
    """A session log as read and checked.

    Attributes
    ----------
    path : Path
    header : dict
    actions : list of LogLine
    warnings : list of str
        The torn last line, if any.
    good_bytes : int
        Length of the file up to the end of the last good line.
    needs_newline : bool
        The last good line lacks its newline (the writer was killed just before it).
    version : int
        The format version (1: no hash chain).
    last_seq : int
        Sequence number of the last good line (0: the header).
    last_hash : str or None
        Hash of the last good line (version 2).
    digest : str
        SHA-256 of the whole file as read (to notice a change).
    """

    path: Path
    header: dict
    actions: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    good_bytes: int = 0
    needs_newline: bool = False
    version: int = LOG_FORMAT_VERSION
    last_seq: int = 0
    last_hash: str | None = None
    digest: str = ""

    @property
    def chained(self) -> bool:
        return self.version >= 2


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _is_probability(value: Any) -> bool:
    return _is_number(value) and 0.0 <= value <= 1.0


def _is_count(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and value >= 0


def _is_time(value: Any) -> bool:
    if not isinstance(value, str):
        return False
    try:
        _dt.datetime.fromisoformat(value.replace("Z", "+00:00"))
    except ValueError:
        return False
    return True


_STATUS_TEXTS = frozenset(str(s) for s in STATUSES)
#: Whole numbers inside this bound are finite as floats too (math.isfinite would not overflow on them).
_SAFE_INT = 1e300


def _snapshot_fine(record: dict) -> bool:
    """True when :func:`_snapshot_problem` would find nothing, at a fraction of its cost.

    A log line carries a few dozen numbers, and a fleet has thousands of logs: this walks them with
    exact type tests (what ``json`` makes) and no call per value. It may answer False for a line that
    is fine (a value of an unusual type); the full check then decides, and words the problem.
    """
    if "status" in record:
        status = record["status"]
        if type(status) is not str or status not in _STATUS_TEXTS:
            return False
    for key in ("entropy_bits", "log_p_findings"):
        if key in record:
            v = record[key]
            if not ((type(v) is float and v - v == 0.0) or (type(v) is int and -_SAFE_INT < v < _SAFE_INT)):
                return False
    if "outside_model_p" in record:
        v = record["outside_model_p"]
        if not (type(v) is float and 0.0 <= v <= 1.0):
            return False
    if "outside_model_by_gate" in record:
        by_gate = record["outside_model_by_gate"]
        if type(by_gate) is not dict:
            return False
        for g, v in by_gate.items():
            if not (type(g) is str and type(v) is float and 0.0 <= v <= 1.0):
                return False
    if "decision" in record:
        decision = record["decision"]
        if type(decision) is not dict or "expected_cost" not in decision or "target" not in decision \
                or type(decision.get("action")) is not str:
            return False
        target, v = decision["target"], decision["expected_cost"]
        if not (target is None or type(target) is str):
            return False
        if not (v is None or (type(v) is float and v - v == 0.0)):
            return False
    if "ranking" in record:
        rows = record["ranking"]
        if type(rows) is not list:
            return False
        for row in rows:
            if type(row) is not dict or type(row.get("id")) is not str:
                return False
            b, c, v = row.get("bits", 0.0), row.get("cost", 0.0), row.get("score")
            if not ((type(b) is float and b - b == 0.0) and (type(c) is float and c - c == 0.0)
                    and (v is None or (type(v) is float and v - v == 0.0))):
                return False
    if "suspects" in record:
        rows = record["suspects"]
        if type(rows) is not list:
            return False
        for row in rows:
            if type(row) is not dict or type(row.get("id")) is not str:
                return False
            v = row.get("p", 0.0)
            if not (type(v) is float and v - v == 0.0):
                return False
    return True


def _snapshot_problem(record: dict) -> str | None:
    """A wrong type in the snapshot fields present (a missing key is a replay difference)."""
    if _snapshot_fine(record):
        return None
    if "status" in record and record["status"] not in STATUSES:
        return f"field 'status' must be one of {', '.join(map(str, STATUSES))}, not {record['status']!r}"
    for key in ("entropy_bits", "log_p_findings"):
        if key in record and not _is_number(record[key]):
            return f"field {key!r} must be a number, not {record[key]!r}"
    if "outside_model_p" in record and not _is_probability(record["outside_model_p"]):
        return f"field 'outside_model_p' must be a probability from 0 to 1, not {record['outside_model_p']!r}"
    if "outside_model_by_gate" in record:
        by_gate = record["outside_model_by_gate"]
        if not isinstance(by_gate, dict) or not all(isinstance(g, str) and _is_probability(p)
                                                    for g, p in by_gate.items()):
            return f"field 'outside_model_by_gate' must map gate ids to probabilities, not {by_gate!r}"
    if "decision" in record:
        decision = record["decision"]
        if not (isinstance(decision, dict) and {"action", "target", "expected_cost"} <= set(decision)
                and isinstance(decision.get("action"), str)
                and (decision.get("target") is None or isinstance(decision.get("target"), str))
                and (decision.get("expected_cost") is None or _is_number(decision.get("expected_cost")))):
            return (f"field 'decision' must be an object with an 'action' (text), a 'target' (text or null) "
                    f"and an 'expected_cost' (a number or null), not {decision!r}")
    for key, names in (("ranking", ("bits", "cost", "score")), ("suspects", ("p",))):
        if key not in record:
            continue
        rows = record[key]
        if not isinstance(rows, list):
            return f"field {key!r} must be a list of rows, not {rows!r}"
        for i, row in enumerate(rows, start=1):
            if not isinstance(row, dict) or not isinstance(row.get("id"), str):
                return f"{key} row {i} must be an object with an 'id' text, not {row!r}"
            for name in names:
                value = row.get(name)
                if name == "score" and value is None:
                    continue
                if name in row and not _is_number(value):
                    return f"{key} row {i}: field {name!r} must be a number, not {value!r}"
    return None


def _header_problem(header: dict) -> str | None:
    for key, check, words in (
        ("tool_version", lambda v: isinstance(v, str), "text"),
        ("model_name", lambda v: isinstance(v, str), "text"),
        ("model_path", lambda v: v is None or isinstance(v, str), "a path (text) or null"),
        ("model_sha256", lambda v: v is None or (isinstance(v, str) and re.fullmatch(r"[0-9a-f]{64}", v)),
         "64 lowercase hexadecimal digits or null"),
        ("settings", lambda v: isinstance(v, dict), "an object"),
        ("time", _is_time, "an ISO 8601 time"),
    ):
        if key not in header:
            return f"the header lacks its {key!r} field"
        if not check(header[key]):
            return f"header field {key!r} must be {words}, not {header[key]!r}"
    if (header["model_path"] is None) != (header["model_sha256"] is None):
        return "the header names a model file without its SHA-256 (or the reverse); the log was edited"
    settings = header["settings"]
    for key in ("isolation_threshold", "min_bits", "group_min_p"):
        if key in settings and not _is_number(settings[key]):
            return f"header setting {key!r} must be a number, not {settings[key]!r}"
    for key in ("value_lookahead", "value_depth", "value_run"):
        if key in settings and not _is_count(settings[key]):
            return f"header setting {key!r} must be a whole number, not {settings[key]!r}"
    if "value_after_repair" in settings and not isinstance(settings["value_after_repair"], bool):
        return f"header setting 'value_after_repair' must be true or false, not {settings['value_after_repair']!r}"
    return _snapshot_problem(header)


def _damaged(path: Path, number: int, what: str) -> LogError:
    return LogError(f"{path}:{number}: {what}; the log was edited or damaged here: restore it from a "
                    "copy, or start a new session")


def _split_lines(data: bytes) -> list[tuple[int, bytes, bool]]:
    pieces = data.split(b"\n")
    # pieces[-1] is what follows the last newline: empty for a complete file.
    lines = [(i + 1, p, True) for i, p in enumerate(pieces[:-1])]
    if pieces[-1]:
        lines.append((len(pieces), pieces[-1], False))
    return lines


def parse_log(data: bytes, path: str | os.PathLike) -> LogContents:
    """Read and check the bytes of a session log (see the module notes).

    Raises
    ------
    LogError
        Not a session log, an unknown version, a damaged or edited line
        (wrong JSON, wrong field type, broken hash chain), named with its line.
    """
    path = Path(path)
    lines = _split_lines(data)
    if not lines:
        raise LogError(f"{path}:1: the file is empty, not a troubleshoot session log; give the path of a "
                       "log written by 'troubleshoot start' or 'troubleshoot resume'")
    records: list[tuple[int, bytes, dict, bool]] = []
    torn: tuple[int, str] | None = None
    for index, (number, raw, complete) in enumerate(lines):
        last = index == len(lines) - 1
        try:
            record = json.loads(raw.decode("utf-8"))
            if not isinstance(record, dict):
                raise ValueError("not an object")
        except (UnicodeDecodeError, ValueError, RecursionError):
            if last and not complete and number > 1:
                torn = (number, "cut off before its end")
                break
            if number == 1:
                if not complete and raw.startswith(b'{"kind": "header"'):
                    raise LogError(f"{path}:1: the log was cut off while its header was being written (no "
                                   "action was recorded); start a new session") from None
                raise LogError(f"{path}:1: not a troubleshoot session log (the first line is not its JSON "
                               "header); give the path of a log written by a session") from None
            raise _damaged(path, number, "not a session log line (not valid JSON)") from None
        records.append((number, raw, record, complete))
    number, raw, header, complete = records[0]
    if header.get("kind") != "header" or header.get("format") != LOG_FORMAT:
        raise LogError(f"{path}:1: not a troubleshoot session log (no header line); give the path of a "
                       "log written by 'troubleshoot start' or 'troubleshoot resume'")
    version = header.get("format_version")
    if version not in READABLE_VERSIONS or isinstance(version, bool):
        raise LogError(f"{path}:1: session log format version {version!r} is not supported (this tool reads "
                       f"versions {', '.join(map(str, READABLE_VERSIONS))}); use a newer troubleshoot")
    contents = LogContents(path, header, version=version, digest=hashlib.sha256(data).hexdigest())
    prev: str | None = None
    offset = 0
    for position, (number, raw, record, complete) in enumerate(records):
        if version >= 2:
            prev = _check_chain(path, number, raw, record, position, prev)
        if position == 0:
            problem = _header_problem(record)
            if problem:
                raise _damaged(path, 1, problem)
        else:
            contents.actions.append(_action_line(path, number, record, position))
        offset += len(raw) + (1 if complete else 0)
        contents.needs_newline = not complete
        contents.last_seq = position
    contents.good_bytes = offset
    contents.last_hash = prev
    if torn is not None:
        contents.warnings.append(f"{path}:{torn[0]}: the last line is {torn[1]} (the session was stopped while "
                                 "writing it); it is skipped, everything before it is kept")
    return contents


def _check_chain(path: Path, number: int, raw: bytes, record: dict, position: int, prev: str | None) -> str:
    match = _HASH_TAIL.search(raw)
    if match is None or record.get("hash") != match.group(1).decode("ascii"):
        raise _damaged(path, number, "the line does not end with its hash")
    digest = hashlib.sha256(raw[:-_HASH_TAIL_LENGTH]).hexdigest()
    if digest != record["hash"]:
        raise _damaged(path, number, "the line does not match its hash (a character was changed)")
    _check_seq(path, number, record, position)
    if record.get("prev") != prev:
        raise _damaged(path, number, "the line does not follow the line before it (its 'prev' hash differs: "
                                     "a line was deleted, duplicated, moved or edited before it)")
    return digest


def _check_seq(path: Path, number: int, record: dict, position: int) -> None:
    """The line's ``seq`` is its position: 0 for the header, then 1, 2, ..."""
    seq = record.get("seq")
    if not _is_count(seq):
        raise _damaged(path, number, f"field 'seq' must be a whole number, not {seq!r}")
    if seq != position:
        raise _damaged(path, number, f"the sequence number is {seq}, where {position} follows line {number - 1} "
                                     "(a line was deleted, duplicated or moved)")


def _action_line(path: Path, number: int, record: dict, position: int) -> LogLine:
    if record.get("kind") != "action":
        raise _damaged(path, number, "not an action line (its 'kind' is not \"action\")")
    _check_seq(path, number, record, position)
    if not _is_time(record.get("time")):
        raise _damaged(path, number, f"field 'time' must be an ISO 8601 time, not {record.get('time')!r}")
    try:
        action = action_from_record(record.get("action"))
    except ActionError as exc:
        raise _damaged(path, number, str(exc)) from None
    problem = _snapshot_problem(record)
    if problem:
        raise _damaged(path, number, problem)
    return LogLine(number, record, action)


def read_log(path: str | os.PathLike) -> LogContents:
    """Read and check a session log file; a torn last line is skipped with a warning.

    Raises
    ------
    LogError
        The file cannot be read (missing, not a regular file, too large), is
        not a session log, or is damaged or edited (named with its line).
    """
    from troubleshoot.errors import InputError

    try:
        fd = open_input(path, LOG_MAX_BYTES, "session log")
        try:
            data = read_fd(fd, str(path), LOG_MAX_BYTES, "session log")
        finally:
            os.close(fd)
    except InputError as exc:
        raise LogError(f"cannot read the session log: {exc}") from None
    return parse_log(data, path)


# ---------------------------------------------------------------------- resume


def expected_model(contents: LogContents) -> tuple[str | None, str | None]:
    """The model file and SHA-256 the session last ran with: the last resume's, else the header's."""
    path, sha = contents.header.get("model_path"), contents.header.get("model_sha256")
    for line in contents.actions:
        if isinstance(line.action, Resume) and line.action.model_sha256 is not None:
            path, sha = line.action.model_path, line.action.model_sha256
    return path, sha


def _model_for_resume(contents: LogContents, model: Model | None, model_path: str | None
                      ) -> tuple[Model, str | None, str | None, bool]:
    """The model to continue with, its path and SHA-256, and whether it differs from the logged one."""
    from troubleshoot.model.source import load_any_model, resolve_model_path

    logged_path, logged_sha = expected_model(contents)
    path = contents.path
    if model_path is not None:
        resolved = resolve_model_path(str(model_path))
        loaded, _ = load_any_model(str(resolved))
        sha = file_sha256(resolved)
        return loaded, str(resolved.resolve()), sha, sha != logged_sha
    if model is not None:
        return model, logged_path, None, False
    if not logged_path:
        raise LogError(f"{path}:1: the log does not say which model file it used; give the model with --model")
    if not Path(logged_path).is_file():
        raise LogError(f"{path}:1: the model file {logged_path} is gone; give the model with --model FILE")
    sha = file_sha256(logged_path)
    if logged_sha is not None and sha != logged_sha:
        raise LogError(f"{path}: the model file {logged_path} changed since the session was logged (SHA-256 "
                       "differs); to continue under the changed model, give it explicitly with --model FILE "
                       "(the log will say so)")
    loaded, _ = load_any_model(logged_path)
    return loaded, logged_path, sha, False


def resume_session(log_path: str | os.PathLike, model: Model | None = None, *,
                   model_path: str | os.PathLike | None = None) -> Session:
    """Continue a session from its log (after a crash, or later).

    The log is locked first, then read and re-run from the model under the
    lock; if the file changed meanwhile nothing is written and the resume is
    refused. A torn last line is cut off (and reported in
    ``session.resume_warnings``); a ``resume`` action is logged (naming the
    model and whether it changed); new actions append after it.

    Parameters
    ----------
    log_path : path
    model : Model, optional
        Continue with this model object (tests and programs).
    model_path : path, optional
        Continue with this model file (``resume --model FILE``): needed when
        the logged model file changed, and logged as a change of model.

    Raises
    ------
    LogError
        The log is unreadable, damaged or edited, in use by another session,
        changed while being read, names no usable model or a changed one
        (without ``model_path``), or an action in it is refused under the
        model as it is now.
    """
    from troubleshoot import __version__
    from troubleshoot.errors import InputError
    from troubleshoot.session.replay import rerun

    path = Path(log_path)
    try:
        fd = open_input(path, LOG_MAX_BYTES, "session log", flags=os.O_RDWR)
    except InputError as exc:
        raise LogError(f"cannot resume: {exc}") from None
    _lock(fd, path)  # first: nothing is read before this process holds the log
    try:
        data = read_fd(fd, str(path), LOG_MAX_BYTES, "session log")
        contents = parse_log(data, path)
        loaded, used_path, sha, changed = _model_for_resume(contents, model, None if model_path is None
                                                            else str(model_path))
        report = rerun(contents, loaded, stop_at_difference=False, switch_models=False)
        if report.refusals:
            first = report.refusals[0]
            raise LogError(f"{first}; the session cannot be resumed with this model")
        _refuse_if_changed(fd, path, contents)
        os.ftruncate(fd, contents.good_bytes)
        os.lseek(fd, 0, os.SEEK_END)
        if contents.needs_newline:
            os.write(fd, b"\n")
        os.fsync(fd)
    except OSError as exc:
        os.close(fd)
        raise LogError(f"{path}: cannot repair the end of the session log ({exc.strerror})") from None
    except BaseException:
        os.close(fd)
        raise
    session = report.session
    assert session is not None
    session.log = LogWriter(path, fd, seq=contents.last_seq, prev=contents.last_hash, version=contents.version)
    session.resume_warnings = contents.warnings + report.messages
    if changed:
        session.resume_warnings.append(f"{path}: continuing under a changed model: {used_path}; the log says so")
    session.job = job_of(contents)
    session.record_resume(Resume(used_path, sha, changed, __version__))
    return session


def _refuse_if_changed(fd: int, path: Path, contents: LogContents) -> None:
    """Refuse when the file under the lock differs from what was read, or the path now names another file."""
    now = read_fd(fd, str(path), LOG_MAX_BYTES, "session log")
    try:
        named = os.stat(path)
    except OSError:
        named = None
    mine = os.fstat(fd)
    if hashlib.sha256(now).hexdigest() != contents.digest or named is None \
            or (named.st_dev, named.st_ino) != (mine.st_dev, mine.st_ino) or not stat.S_ISREG(mine.st_mode):
        raise LogError(f"{path}: the session log changed while it was being read (another program wrote or "
                       "replaced it); nothing was written: run resume again")


def replay_log(path: str | os.PathLike, model: Model | None = None):
    """Re-run a session log from its model (see :func:`troubleshoot.session.replay.replay_log`)."""
    from troubleshoot.session.replay import replay_log as _replay

    return _replay(path, model)
