"""``troubleshoot replay LOG``: re-run a session log and confirm every number in it.

Exit status 0 when every ranking and posterior agrees with the log to 1e-9,
1 when something differs (the message says the line, the action and the
number; "the model file changed (SHA-256 differs)" when it did), 2 when the
log cannot be read or was edited or damaged (the line is named).
"""

from __future__ import annotations

import sys


def add_parser(subparsers, name):
    parser = subparsers.add_parser(
        name,
        help="re-run a session log and confirm its rankings and posteriors",
        description="Check a session log line by line (its hash chain) and re-run every action on "
        "its model, confirming that each ranking (bits, cost, score), each suspect's probability "
        "and the remaining entropy agree with the log to 1e-9. Exit 0 when confirmed, 1 when "
        "something differs (where and why is printed), 2 when the log cannot be read or was edited.",
    )
    parser.add_argument("log", metavar="LOG", help="the session log (.jsonl)")
    parser.add_argument("--model", metavar="FILE", help="use this model file instead of the one the "
                        "log names")
    return parser


def run(args) -> int:
    from troubleshoot.model.source import load_optional_model
    from troubleshoot.session.replay import replay_log

    model = load_optional_model(args.model)
    report = replay_log(args.log, model=model)
    for message in report.messages:
        print(f"troubleshoot: {message}", file=sys.stderr)
    print(f"{args.log}: {report.verdict()}")
    return 0 if report.confirmed else 1
