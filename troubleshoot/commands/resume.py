"""``troubleshoot resume LOG``: continue a session from its log, in the terminal UI or line by line.

At a terminal it opens the terminal UI where the session stopped; with
``--plain``, or when standard input or output is not a terminal (a script),
it runs the line mode (:mod:`troubleshoot.ui.plain`). The log is locked,
re-run and checked by :func:`troubleshoot.session.logfile.resume_session`;
a model file that changed since the log was written needs ``--model FILE``.
"""

from __future__ import annotations

import sys

from troubleshoot.session.actions import LINE_HELP


def add_parser(subparsers, name):
    parser = subparsers.add_parser(
        name,
        help="continue a session from its log",
        description="Continue a diagnosis session from its log, after a crash or later. The log "
        "is locked, re-run from its model and checked line by line; a torn last line is reported "
        "and cut off; new actions are appended. Without a terminal (or with --plain) commands are "
        "read one per line from standard input:\n" + LINE_HELP,
    )
    parser.add_argument("log", metavar="LOG", help="the session log (.jsonl)")
    parser.add_argument("--model", metavar="FILE", help="continue with this model file; needed when the "
                        "model file changed since the log was written (the log records it)")
    parser.add_argument("--plain", action="store_true", help="read commands line by line instead of "
                        "opening the terminal UI (the default when not at a terminal)")
    return parser


def run(args) -> int:
    from troubleshoot.session.logfile import resume_session

    session = resume_session(args.log, model_path=args.model)
    for warning in session.resume_warnings:
        print(f"troubleshoot: warning: {warning}", file=sys.stderr)
    if not args.plain and sys.stdin.isatty() and sys.stdout.isatty():
        from troubleshoot.ui.app import run_app

        return run_app(session)
    from troubleshoot.ui.plain import run_plain

    done = sum(1 for a in session.actions if a.kind != "resume")
    return run_plain(session, f"resumed {args.log}: {done} action(s) re-run; new actions are appended")
