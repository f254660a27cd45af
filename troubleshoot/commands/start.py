"""``troubleshoot start [MODEL] [--log FILE] [--threshold P] [--plain]``: begin a diagnosis.

At a terminal the terminal UI opens; without one (a script, a pipe), or with
``--plain``, the line mode runs, as for ``resume``. With no MODEL the
bundled default demo opens (``troubleshoot`` with no arguments does the
same). The session log is written as the technician works; ``troubleshoot
resume LOG`` reopens it where it stopped.
"""

from __future__ import annotations

import sys

from troubleshoot.errors import SessionError
from troubleshoot.model.demos import DEFAULT_DEMO, DEMOS


def add_parser(subparsers, name):
    parser = subparsers.add_parser(
        name,
        help="begin a diagnosis on a model (default: the bundled demo)",
        description="Open the terminal UI for a diagnosis: mark the symptoms, do the ranked checks, "
        "record the repair and verify it. Without a terminal (or with --plain) commands are read "
        "one per line from standard input ('help' lists them). Every action is saved in the "
        "session log as it is made.",
    )
    parser.add_argument("model", nargs="?", metavar="MODEL", default=None,
                        help=f"model file or demo name ({', '.join(sorted(DEMOS))}); "
                             f"default: the {DEFAULT_DEMO} demo")
    parser.add_argument("--log", metavar="FILE", default=None,
                        help="write the session log here (must not exist yet); default: a new file in "
                             "the user data folder")
    parser.add_argument("--threshold", metavar="P", type=float, default=None,
                        help="isolation threshold: a suspect with P(failed) at or above P is isolated "
                             "(a probability, 0 < P <= 1); default: the model's")
    parser.add_argument("--plain", action="store_true", help="read commands line by line instead of "
                        "opening the terminal UI (the default when not at a terminal)")
    job = parser.add_argument_group("the record (optional; logged in the header and shown in the summary)")
    job.add_argument("--technician", metavar="NAME", help="who does the diagnosis")
    job.add_argument("--unit", metavar="SERIAL", help="the unit's serial number or tag")
    job.add_argument("--site", metavar="SITE", help="where the unit is")
    job.add_argument("--work-order", metavar="NUMBER", dest="work_order", help="the work order")
    return parser


def job_of(args) -> dict:
    """The job fields given on the command line (None for those not given)."""
    return {key: getattr(args, key, None) for key in ("technician", "unit", "site", "work_order")}


def run(args) -> int:
    from troubleshoot.model.source import resolve_model_path
    from troubleshoot.session.logfile import LogWriter, new_session

    if args.threshold is not None and not 0.0 < args.threshold <= 1.0:
        raise SessionError(f"--threshold must be a probability above 0 and at most 1, not {args.threshold:g}; "
                           "for example --threshold 0.9")
    path = resolve_model_path(args.model or DEFAULT_DEMO)
    session = new_session(str(path), log_path=args.log, isolation_threshold=args.threshold, job=job_of(args))
    if not args.plain and sys.stdin.isatty() and sys.stdout.isatty():
        from troubleshoot.ui.app import run_app

        return run_app(session)
    from troubleshoot.ui.plain import run_plain

    log = session.log
    assert isinstance(log, LogWriter), "new_session opens the log file"
    return run_plain(session, f"started a session on {session.model.name}: log {log.path}; "
                              "one command per line ('help' lists them)")
