"""``troubleshoot import-mef IN.xml -o OUT.xml``: an Open-PSA MEF fault tree into a model file of our format.

The output path is checked before the file is read; the model file is
written atomically, only to a new path or over a regular file.
"""

from __future__ import annotations

import sys

from troubleshoot.errors import ModelError, TroubleshootError


def add_parser(subparsers, name):
    parser = subparsers.add_parser(
        name,
        help="convert the fault tree of an Open-PSA MEF file into a model file",
        description="Read the fault-tree part of an Open-PSA Model Exchange Format file "
        "(gates, basic events, house events, parameters) and write it as a model file of "
        "this program. Everything not supported is reported with its line. The result has "
        "no checks yet: add them before a diagnosis.",
    )
    parser.add_argument("input", metavar="IN.xml", help="the MEF file to read")
    parser.add_argument("-o", "--output", metavar="OUT.xml", required=True, help="model file to write")
    parser.add_argument("--top", metavar="GATE", help="MEF name of the top gate (needed when "
                        "several gates are referenced by no other gate)")
    parser.add_argument("--mission-time", metavar="HOURS", type=float, help="mission time in hours "
                        "for <system-mission-time/> (default 8760 h)")
    return parser


def run(args) -> int:
    from troubleshoot.files import check_output_path
    from troubleshoot.model.mef.read import read_mef
    from troubleshoot.model.validate import validate_model
    from troubleshoot.model.xmlfile import save_model

    if args.mission_time is not None and not args.mission_time >= 0:
        raise TroubleshootError("--mission-time must be a number of hours, 0 or more")
    check_output_path(args.output, "model file")
    model, report = read_mef(args.input, top=args.top, mission_time=args.mission_time)
    for problem in report:
        print(f"troubleshoot: {problem}", file=sys.stderr)
    problems = validate_model(model, args.input)
    for problem in problems:
        if problem.severity != "error":
            print(f"troubleshoot: {problem}", file=sys.stderr)
    errors = [p for p in problems if p.severity == "error"]
    if errors:
        raise ModelError(errors)
    save_model(model, args.output)
    print(f"wrote {args.output}: fault tree '{model.name}', top gate {model.top}, "
          f"{len(model.gates)} gates, {len(model.basic_events)} basic events, no checks "
          f"({len(report)} note(s) above)")
    return 0
