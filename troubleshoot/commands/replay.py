"""``troubleshoot replay``: re-run a session log and confirm every number in it.

Exit status 0 when every ranking and posterior agrees with the log to 1e-9,
1 when something differs (the message says the line, the action and the
number; "the model file changed (SHA-256 differs)" when it did), 2 when the
log cannot be read.
"""

from __future__ import annotations

import sys


def add_parser(subparsers, name):
    parser = subparsers.add_parser(
        name,
        help="re-run a session log and confirm its rankings and posteriors",
        description="Re-run every action of a session log on its model and confirm that each "
        "ranking (bits, cost, score), each suspect's probability and the remaining entropy "
        "agree with the log to 1e-9. Exit 0 when confirmed, 1 when something differs (where and "
        "why is printed), 2 when the log cannot be read.",
    )
    parser.add_argument("log", metavar="LOG", help="the session log (.jsonl)")
    parser.add_argument("--model", metavar="MODEL", help="use this model file instead of the one the "
                        "log names")
    return parser


def run(args) -> int:
    from troubleshoot.model.source import load_optional_model
    from troubleshoot.session.logfile import replay_log

    model = load_optional_model(args.model)
    report = replay_log(args.log, model=model)
    for message in report.messages:
        print(f"troubleshoot: {message}", file=sys.stderr)
    if report.confirmed:
        print(f"{args.log}: confirmed: {report.actions} action(s) re-run, every ranking and posterior "
              "agrees to 1e-9")
        return 0
    print(f"{args.log}: differs (see above); {report.actions} action(s) re-run")
    return 1
