"""Session logs: one JSON Lines file per session, appended and flushed after every action.

Line 1 is the header: the file format, the tool version, the model file's path
and SHA-256, the session settings, the start time and the state after the
complaint. Every further line is one action: its sequence number, time (ISO
8601, UTC), the action as :meth:`Session.apply` takes it, and what the tool
showed after it (the top 10 of the ranking with bits, cost and score, the top
10 suspects with their probability, the remaining entropy in bits, log
P(findings) and the status).

Each line is written with one ``write`` and made durable with ``os.fsync``
before the action counts as done, so a crash loses at most the action being
written. Reading tolerates a torn last line (killed mid-write): it is
reported as a warning and skipped, and :func:`resume_session` truncates it
before appending. :func:`replay_log` re-runs every action from the model and
confirms every number to 1e-9, or says where it differs.

Logs go to ``platformdirs.user_data_dir("troubleshoot")/sessions/`` by
default, one file per session named by its UTC start time and a random
suffix, created with ``O_EXCL`` so two sessions never share a file, and
locked while a session writes it.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import os
import secrets
from dataclasses import dataclass, field
from pathlib import Path

from troubleshoot.errors import LogError, SessionError, TroubleshootError
from troubleshoot.model import Model
from troubleshoot.session import Session, SessionSettings, SessionView, settings_for

try:  # advisory lock so two processes never append to one log
    import fcntl
except ImportError:  # pragma: no cover - not on POSIX
    fcntl = None

LOG_FORMAT = "troubleshoot-session-log"
LOG_FORMAT_VERSION = 1
#: Rows of the ranking and of the suspects written per action.
LOGGED_ROWS = 10
#: Tolerance replay confirms numbers to (absolute, and relative for scores).
REPLAY_TOLERANCE = 1e-9
#: The job fields a log header may carry (who, which unit, where, which work order).
JOB_KEYS = ("technician", "unit", "site", "work_order")
#: Actions the log records that change nothing in the diagnosis (replay re-checks their snapshot only).
MARK_ACTIONS = ("acknowledge", "resume", "job")


# ---------------------------------------------------------------------- records


def utc_now() -> str:
    """The current time, ISO 8601 in UTC, e.g. ``2024-05-01T09:30:00.123456Z``."""
    return _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _json_score(score: float):
    return None if math.isinf(score) else score


def snapshot(view: SessionView) -> dict:
    """What the tool shows after an action, in the form the log keeps."""
    return {
        "status": view.status,
        "entropy_bits": view.entropy_bits,
        "log_p_findings": view.posterior.log_p,
        "ranking": [{"id": r.check, "bits": r.bits, "cost": r.cost, "score": _json_score(r.score)}
                    for r in view.ranking.rows[:LOGGED_ROWS]],
        "suspects": [{"id": s.id, "p": s.p} for s in view.suspects[:LOGGED_ROWS]],
    }


def file_sha256(path: str | os.PathLike) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 16), b""):
            digest.update(block)
    return digest.hexdigest()


def header_record(session: Session) -> dict:
    from troubleshoot import __version__

    path = session.model_path
    return {
        "kind": "header",
        "format": LOG_FORMAT,
        "format_version": LOG_FORMAT_VERSION,
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
        },
        "time": utc_now(),
        "job": dict(getattr(session, "job", None) or {}),
        **snapshot(session.view),
    }


def describe_action(action: dict) -> str:
    """An action in words, for messages: ``finding c3=abnormal``, ``repair e2``..."""
    kind = action.get("action", "?")
    if kind in ("finding", "correct"):
        return f"{kind} {action.get('check')}={action.get('outcome')}"
    if kind in ("retract", "skip", "unskip"):
        return f"{kind} {action.get('check')}"
    if kind == "repair":
        return f"repair {action.get('event')}"
    if kind == "verify":
        return f"verify {action.get('outcome')}"
    return str(kind)


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
    """Create a new, empty log file with O_EXCL and return its path and descriptor.

    Without ``log_path`` the file goes to :func:`default_log_dir`, named by
    the UTC time and a random suffix (a new suffix is drawn if the name is
    somehow taken).
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
    """Appends records to an open session log, one line each, fsync'd.

    Attributes
    ----------
    path : Path
    seq : int
        Sequence number of the last action written.
    """

    def __init__(self, path: Path, fd: int, seq: int = 0):
        self.path = Path(path)
        self._fd = fd
        self.seq = seq

    def write_record(self, record: dict) -> None:
        """One line, one ``write``, then ``fsync``; refused (SessionError) when the disk says no."""
        if self._fd is None:
            raise SessionError(f"{self.path}: the session log is closed")
        data = (json.dumps(record, allow_nan=False, ensure_ascii=False) + "\n").encode("utf-8")
        try:
            written = os.write(self._fd, data)
            while written < len(data):
                written += os.write(self._fd, data[written:])
            os.fsync(self._fd)
        except OSError as exc:
            raise SessionError(f"{self.path}: cannot write the session log ({exc.strerror}); "
                               "the action was not recorded") from None

    def write_header(self, session: Session) -> None:
        self.write_record(header_record(session))

    def write_action(self, action: dict, view: SessionView) -> None:
        record = {"kind": "action", "seq": self.seq + 1, "time": utc_now(), "action": action, **snapshot(view)}
        self.write_record(record)
        self.seq += 1

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
    for _, record in contents.actions:
        if record["action"].get("action") == "job":
            job.update(clean_job(record["action"]))
    return job


# ---------------------------------------------------------------------- reading


@dataclass
class LogContents:
    """A session log as read.

    Attributes
    ----------
    path : Path
    header : dict
    actions : list of (line number, record)
    warnings : list of str
    good_bytes : int
        Length of the file up to the end of the last good line.
    needs_newline : bool
        The last good line lacks its newline (the writer was killed just before it).
    """

    path: Path
    header: dict
    actions: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    good_bytes: int = 0
    needs_newline: bool = False


def read_log(path: str | os.PathLike) -> LogContents:
    """Read a session log; a torn last line is skipped with a warning.

    Raises
    ------
    LogError
        The file cannot be read, is not a session log, or is damaged before its last line.
    """
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise LogError(f"{path}: cannot read the session log ({exc.strerror or exc})") from None
    pieces = data.split(b"\n")
    # pieces[-1] is what follows the last newline: empty for a complete file.
    lines = [(i + 1, p, True) for i, p in enumerate(pieces[:-1])]
    if pieces[-1]:
        lines.append((len(pieces), pieces[-1], False))
    contents = None
    offset = 0
    records = []
    for index, (number, raw, complete) in enumerate(lines):
        last = index == len(lines) - 1
        try:
            record = json.loads(raw.decode("utf-8"))
            if not isinstance(record, dict):
                raise ValueError("not an object")
        except (UnicodeDecodeError, ValueError):
            if last and number > 1:
                where = "cut off before its end" if not complete else "not valid JSON"
                records.append(("torn", number, where))
                break
            if number == 1:
                raise LogError(f"{path}:1: not a troubleshoot session log (the first line is not its JSON "
                               "header); give the path of a log written by a session") from None
            raise LogError(f"{path}:{number}: not a session log line (not valid JSON); the log is damaged "
                           "here: restore it from a copy, or start a new session") from None
        records.append(("ok", number, record, complete))
        offset += len(raw) + (1 if complete else 0)
    if not records or records[0][0] != "ok" or records[0][2].get("kind") != "header" \
            or records[0][2].get("format") != LOG_FORMAT:
        raise LogError(f"{path}:1: not a troubleshoot session log (no header line); give the path of a "
                       "log written by 'troubleshoot start' or 'troubleshoot resume'")
    header = records[0][2]
    if header.get("format_version") != LOG_FORMAT_VERSION:
        raise LogError(f"{path}:1: session log format version {header.get('format_version')!r} is not "
                       f"supported (this tool reads version {LOG_FORMAT_VERSION})")
    contents = LogContents(path, header, good_bytes=offset)
    for item in records[1:]:
        if item[0] == "torn":
            contents.warnings.append(f"{path}:{item[1]}: the last line is {item[2]} (the session was "
                                     "stopped while writing it); it is skipped, everything before it is kept")
            continue
        _, number, record, complete = item
        if record.get("kind") != "action" or not isinstance(record.get("action"), dict):
            raise LogError(f"{path}:{number}: not an action line; the log is damaged here")
        contents.actions.append((number, record))
        contents.needs_newline = not complete
    return contents


# ---------------------------------------------------------------------- replay


def _close(a, b) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return math.isclose(a, b, rel_tol=REPLAY_TOLERANCE, abs_tol=REPLAY_TOLERANCE)


def compare_snapshot(logged: dict, now: dict) -> str | None:
    """The first difference between a logged snapshot and a recomputed one, in words; None if they agree."""
    for key, what in (("entropy_bits", "remaining entropy (bits)"), ("log_p_findings", "log P(findings)")):
        if key in logged and not _close(logged[key], now[key]):
            return f"{what} is {logged[key]!r} in the log but {now[key]!r} now"
    if "status" in logged and logged["status"] != now["status"]:
        return f"status is {logged['status']!r} in the log but {now['status']!r} now"
    for key, fields in (("ranking", ("bits", "cost", "score")), ("suspects", ("p",))):
        old, new = logged.get(key, []), now[key]
        if len(old) != len(new):
            return f"{key} has {len(old)} rows in the log but {len(new)} now"
        for i, (a, b) in enumerate(zip(old, new), start=1):
            if a.get("id") != b["id"]:
                return f"{key} row {i} is {a.get('id')!r} in the log but {b['id']!r} now"
            for name in fields:
                if not _close(a.get(name), b[name]):
                    unit = {"bits": " bits", "cost": "", "score": " bits per cost unit", "p": ""}[name]
                    return (f"{key} row {i} ({b['id']}): {name} is {a.get(name)!r}{unit} in the log "
                            f"but {b[name]!r}{unit} now")
    return None


@dataclass
class ReplayReport:
    """The outcome of re-running a log.

    Attributes
    ----------
    confirmed : bool
        Every ranking and posterior agrees to 1e-9 and the model file is unchanged.
    messages : list of str
        Where and why it differs (file:line, the action, the number), and warnings.
    actions : int
        Actions re-run.
    session : Session
        The session as re-run (no log attached).
    """

    confirmed: bool
    messages: list
    actions: int
    session: Session | None = None


def _model_for(contents: LogContents, model: Model | None) -> tuple[Model, str | None, list[str]]:
    header, path = contents.header, contents.path
    notes: list[str] = []
    if model is not None:
        return model, header.get("model_path"), notes
    model_path = header.get("model_path")
    if not model_path:
        raise LogError(f"{path}:1: the log does not say which model file it used; give the model with --model")
    if not Path(model_path).is_file():
        raise LogError(f"{path}:1: the model file {model_path} is gone; give the model with --model")
    from troubleshoot.model.source import load_any_model

    loaded, _warnings = load_any_model(model_path)
    if header.get("model_sha256") and file_sha256(model_path) != header["model_sha256"]:
        notes.append(f"{path}:1: the model file changed (SHA-256 differs): {model_path}")
    return loaded, model_path, notes


def _settings_from(contents: LogContents, model: Model) -> SessionSettings:
    s = contents.header.get("settings") or {}
    try:
        return settings_for(model, s.get("isolation_threshold"), s.get("min_bits"), s.get("group_min_p"),
                            s.get("value_lookahead"), s.get("value_depth"))
    except SessionError as exc:
        raise LogError(f"{contents.path}:1: bad settings in the header: {exc}") from None


def rerun(contents: LogContents, model: Model | None = None, stop_at_difference: bool = True) -> ReplayReport:
    """Re-run a log's actions on its model and compare every snapshot."""
    model, model_path, messages = _model_for(contents, model)
    differs = bool(messages)
    session = Session(model, _settings_from(contents, model), model_path=model_path)
    problem = compare_snapshot(contents.header, snapshot(session.view))
    if problem:
        messages.append(f"{contents.path}:1 (the complaint): {problem}")
        differs = True
        if stop_at_difference:
            return ReplayReport(False, messages, 0, session)
    count = 0
    for number, record in contents.actions:
        action = record["action"]
        if action.get("action") in MARK_ACTIONS:  # changes nothing: kept, not re-run nor counted
            session.actions.append(action)
            continue
        try:
            session.apply(action)
        except TroubleshootError as exc:
            messages.append(f"{contents.path}:{number} ({describe_action(action)}): the action is refused "
                            f"now: {exc}")
            return ReplayReport(False, messages, count, session)
        count += 1
        problem = compare_snapshot(record, snapshot(session.view))
        if problem:
            messages.append(f"{contents.path}:{number} ({describe_action(action)}): {problem}")
            differs = True
            if stop_at_difference:
                return ReplayReport(False, messages, count, session)
    return ReplayReport(not differs, messages, count, session)


def replay_log(path: str | os.PathLike, model: Model | None = None) -> ReplayReport:
    """Re-run a session log from its model and confirm every ranking and posterior to 1e-9.

    Parameters
    ----------
    path : path
    model : Model, optional
        Use this model instead of the file named in the header.

    Raises
    ------
    LogError
        The log cannot be read or names no usable model.
    """
    contents = read_log(path)
    report = rerun(contents, model)
    report.messages[:0] = contents.warnings
    return report


def resume_session(log_path: str | os.PathLike, model: Model | None = None) -> Session:
    """Continue a session from its log (after a crash, or later).

    The log is re-run from the model; a torn last line is cut off (and
    reported in ``session.resume_warnings``); new actions append after the
    last good line.

    Raises
    ------
    LogError
        The log is unreadable, names no usable model, or an action in it is
        refused under the model as it is now.
    """
    contents = read_log(log_path)
    report = rerun(contents, model, stop_at_difference=False)
    refused = [m for m in report.messages if "the action is refused now" in m]
    if refused:
        raise LogError(refused[0] + "; the session cannot be resumed with this model")
    session = report.session
    path = contents.path
    try:
        fd = os.open(path, os.O_RDWR | getattr(os, "O_CLOEXEC", 0))
    except OSError as exc:
        raise LogError(f"{path}: cannot open the session log for writing ({exc.strerror})") from None
    _lock(fd, path)
    try:
        os.ftruncate(fd, contents.good_bytes)
        os.lseek(fd, 0, os.SEEK_END)
        if contents.needs_newline:
            os.write(fd, b"\n")
        os.fsync(fd)
    except OSError as exc:
        os.close(fd)
        raise LogError(f"{path}: cannot repair the end of the session log ({exc.strerror})") from None
    last_seq = contents.actions[-1][1].get("seq", len(contents.actions)) if contents.actions else 0
    session.log = LogWriter(path, fd, seq=int(last_seq))
    session.resume_warnings = contents.warnings + report.messages
    session.job = job_of(contents)
    resumed = {"action": "resume"}
    if contents.warnings:
        resumed["reason"] = "the last line was torn: the session had stopped while writing it"
    session.mark(resumed)
    return session
