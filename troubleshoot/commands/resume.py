"""``troubleshoot resume``: continue a session from its log, in the terminal UI or line by line.

At a terminal it opens the terminal UI where the session stopped; with
``--plain``, or when standard input or output is not a terminal (a script),
it reads one command per line instead.

The log is re-run from the model, a torn last line (the session was killed
while writing it) is reported and cut off, and every new action is appended
after the last good line. The prompt takes one command per line; ``help``
lists them. The terminal UI reuses :func:`troubleshoot.session.logfile.resume_session`.
"""

from __future__ import annotations

import shlex
import sys

from troubleshoot.errors import TroubleshootError
from troubleshoot.session import Session

HELP = """commands (one per line):
  CHECK=OUTCOME            record a finding (e.g. pressure_switches=a switch is open)
  correct CHECK=OUTCOME    change a finding already recorded
  retract CHECK            withdraw a finding
  skip CHECK REASON...     leave a check out (it cannot be done now)
  unskip CHECK             bring a skipped check back
  repair EVENT             record a repair
  verify OUTCOME           record the check after the repair (e.g. verify works)
  note TEXT...             add a note to the log
  undo                     take back the last action
  show                     show the ranking and suspects again
  quit                     stop (the log keeps everything; resume it later)"""


def add_parser(subparsers, name):
    parser = subparsers.add_parser(
        name,
        help="continue a session from its log",
        description="Continue a diagnosis session from its log, after a crash or later. The log "
        "is re-run from its model; a torn last line is reported and skipped; new actions are "
        "appended. Commands are read one per line from standard input ('help' lists them).",
    )
    parser.add_argument("log", metavar="LOG", help="the session log (.jsonl)")
    parser.add_argument("--model", metavar="MODEL", help="use this model file instead of the one the "
                        "log names")
    parser.add_argument("--plain", action="store_true", help="read commands line by line instead of "
                        "opening the terminal UI (the default when not at a terminal)")
    return parser


def summary(session: Session) -> str:
    """A short view of the state: status, next check or repair order, top suspects."""
    st = session.state
    unit = st.cost_unit
    lines = [f"status: {st.status}; remaining uncertainty {st.entropy_bits:.3f} bits; "
             f"cost spent {st.cost_spent:g} {unit}"]
    if st.next_check:
        r = st.next_check
        odds = ", ".join(f"{o} {p:.2f}" for o, p in zip(r.outcomes, r.p_outcomes))
        lines.append(f"next check: {r.check} ({r.label}); {r.bits:.3f} bits, {r.cost:g} {unit}; {odds}")
    if st.verification:
        v = st.verification
        lines.append(f"verify the repair: {v.label}: {v.outcomes[0]!r} or {v.outcomes[1]!r}")
    if st.isolated:
        lines.append(f"isolated: {st.isolated.id} ({st.isolated.label}), P = {st.isolated.p:.3f}")
    if st.status in ("isolated", "ambiguity") and st.repair_order:
        lines.append("repair order: " + ", ".join(s.id for s in st.repair_order))
    lines.append("suspects: " + ", ".join(f"{s.id} {s.p:.3f}" for s in st.suspects[:5]))
    for c in st.cautions:
        lines.append(f"CAUTION: {c}")
    return "\n".join(lines)


def perform(session: Session, line: str) -> bool:
    """Do one command line; False when the user quits. Raises TroubleshootError on a refused action."""
    line = line.strip()
    if not line or line.startswith("#"):
        return True
    word, _, rest = line.partition(" ")
    rest = rest.strip()
    if word in ("quit", "exit"):
        return False
    if word == "help":
        print(HELP)
    elif word == "show":
        print(summary(session))
    elif word == "undo":
        session.undo()
    elif word == "repair":
        session.record_repair(rest)
    elif word == "verify":
        session.record_verification(rest)
    elif word == "note":
        session.add_note(rest)
    elif word == "retract":
        session.retract_finding(rest)
    elif word == "unskip":
        session.unskip_check(rest)
    elif word == "skip":
        parts = shlex.split(rest) if rest else []
        if not parts:
            raise TroubleshootError("write: skip CHECK REASON")
        session.skip_check(parts[0], " ".join(parts[1:]))
    elif word == "correct":
        check, sep, outcome = rest.partition("=")
        if not sep:
            raise TroubleshootError("write: correct CHECK=OUTCOME")
        session.correct_finding(check.strip(), outcome.strip())
    elif "=" in line:
        check, _, outcome = line.partition("=")
        session.record_finding(check.strip(), outcome.strip())
    else:
        raise TroubleshootError(f"unknown command {word!r}; type 'help'")
    return True


def interact(session: Session, stdin=None, stdout=None) -> None:
    """Read commands until 'quit' or end of input, printing the state after each."""
    stdin = stdin or sys.stdin
    out = stdout or sys.stdout
    print(summary(session), file=out)
    while True:
        if stdin.isatty():
            out.write("> ")
            out.flush()
        line = stdin.readline()
        if not line:
            break
        try:
            if not perform(session, line):
                break
        except TroubleshootError as exc:
            for message in exc.lines():
                print(f"refused: {message}", file=out)
            continue
        if line.strip().split(" ")[0] not in ("help", "show", ""):
            print(summary(session), file=out)
        out.flush()


def run(args) -> int:
    from troubleshoot.model.source import load_optional_model
    from troubleshoot.session.logfile import resume_session

    model = load_optional_model(args.model)
    session = resume_session(args.log, model=model)
    for warning in session.resume_warnings:
        print(f"troubleshoot: warning: {warning}", file=sys.stderr)
    if not args.plain and sys.stdin.isatty() and sys.stdout.isatty():
        from troubleshoot.ui.app import run_app

        return run_app(session)
    print(f"resumed {args.log}: {len(session.actions)} action(s) re-run; new actions are appended")
    try:
        interact(session)
    finally:
        written = _summary(session)
        session.close()
    if written is not None:
        print(f"summary: {written}")
    return 0


def _summary(session: Session):
    """Bring the Markdown summary beside the log up to date, as the terminal UI does on quitting."""
    import datetime as _dt

    from troubleshoot.session.summary import write_summary

    try:
        return write_summary(session, _dt.datetime.now(_dt.UTC))
    except (OSError, TroubleshootError) as exc:
        where = getattr(session.log, "path", "the log")
        print(f"troubleshoot: warning: the summary beside {where} was not written: {exc}", file=sys.stderr)
        return None
