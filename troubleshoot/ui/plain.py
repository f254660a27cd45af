"""The line mode: one typed command per line, for scripts, pipes and terminals without a screen.

``troubleshoot resume --plain`` and ``troubleshoot start`` without a terminal
run it. Each line is parsed into a typed action
(:func:`troubleshoot.session.actions.parse_action`) and applied to the
session, which logs it; a refused line changes nothing and the next line is
read. After each action the state is printed
(:func:`troubleshoot.session.render.render_brief`). At the end (``quit`` or
the end of input) the Markdown summary is written beside the log.
"""

from __future__ import annotations

import datetime as _dt
import sys
from pathlib import Path

from troubleshoot.errors import TroubleshootError
from troubleshoot.session.actions import LINE_HELP, parse_action
from troubleshoot.session.render import render_brief


def perform(session, line: str, out=None) -> bool:
    """Do one command line; False when the user quits. Raises TroubleshootError on a refused action."""
    out = out or sys.stdout
    text = line.strip()
    if not text or text.startswith("#"):
        return True
    word = text.split()[0].casefold()
    if word in ("quit", "exit"):
        return False
    if word == "help":
        print(LINE_HELP, file=out)
    elif word == "show":
        print(render_brief(session.state), file=out)
    else:
        session.apply(parse_action(text))
    return True


def write_summary(session) -> Path | None:
    """Write the Markdown summary beside the session's log (:func:`troubleshoot.session.summary.write_summary`).

    Raises
    ------
    OutputError
        The summary path is refused or cannot be written.
    """
    from troubleshoot.session.summary import write_summary as write

    return write(session, _dt.datetime.now(_dt.UTC))


def interact(session, stdin=None, stdout=None) -> None:
    """Read commands until 'quit' or end of input, printing the state after each action."""
    stdin = stdin or sys.stdin
    out = stdout or sys.stdout
    print(render_brief(session.state), file=out)
    while True:
        if stdin.isatty():
            out.write("> ")
            out.flush()
        line = stdin.readline()
        if not line:
            break
        try:
            if not perform(session, line, out):
                break
        except TroubleshootError as exc:
            for message in exc.lines():
                print(f"refused: {message}", file=out)
            out.flush()
            continue
        word = line.strip().split(" ")[0].casefold() if line.strip() else ""
        if word not in ("help", "show", "") and not word.startswith("#"):
            print(render_brief(session.state), file=out)
        out.flush()


def run_plain(session, intro: str | None = None) -> int:
    """Run the line mode on a session until quit or end of input; write the summary; return 0."""
    if intro:
        print(intro)
    try:
        interact(session)
    finally:
        session.close()
    path = write_summary(session)
    log_path = getattr(getattr(session, "log", None), "path", None)
    if log_path is not None:
        print(f"troubleshoot: the session is saved in {log_path}", file=sys.stderr)
        print(f"troubleshoot: continue it with: troubleshoot resume {log_path}", file=sys.stderr)
    if path is not None:
        print(f"troubleshoot: summary: {path}", file=sys.stderr)
    return 0
