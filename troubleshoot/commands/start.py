"""``troubleshoot start [MODEL] [--log FILE] [--threshold P]``: open the terminal UI on a model.

With no MODEL the bundled default demo opens (``troubleshoot`` with no
arguments does the same). The session log is written as the technician
works; ``troubleshoot resume LOG`` reopens it where it stopped.
"""

from __future__ import annotations

from troubleshoot.model.demos import DEFAULT_DEMO, DEMOS
from troubleshoot.errors import SessionError


def add_parser(subparsers, name):
    parser = subparsers.add_parser(
        name,
        help="open the terminal UI on a model (default: the bundled demo)",
        description="Open the terminal UI for a diagnosis: mark the symptoms, do the ranked checks, "
        "record the repair and verify it. Every action is saved in the session log as it is made.",
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
    from troubleshoot.session.logfile import new_session
    from troubleshoot.ui.app import run_app

    if args.threshold is not None and not 0.0 < args.threshold <= 1.0:
        raise SessionError(f"--threshold must be a probability above 0 and at most 1, not {args.threshold:g}; "
                           "for example --threshold 0.9")
    path = resolve_model_path(args.model or DEFAULT_DEMO)
    session = new_session(str(path), log_path=args.log, isolation_threshold=args.threshold, job=job_of(args))
    return run_app(session)
