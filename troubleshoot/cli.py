"""The command line: one subcommand per module in :mod:`troubleshoot.commands`.

Each command module defines ``add_parser(subparsers)`` and ``run(args) -> int``.
A :class:`~troubleshoot.errors.TroubleshootError` becomes one line per problem
on standard error and exit status 2; a traceback never reaches the user.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from troubleshoot.errors import TroubleshootError

#: Subcommand name -> module under troubleshoot.commands. A module that is not
#: written yet is skipped, so the registry can list what is planned.
COMMANDS = {
    "start": "start",
    "check": "check",
    "import-mef": "import_mef",
    "export": "export",
    "suggest": "suggest",
    "replay": "replay",
    "resume": "resume",
    "analyze": "analyze",
    "simulate": "simulate",
    "learn": "learn",
    "bench": "bench",
}


def _available_commands():
    for name, module_name in COMMANDS.items():
        try:
            module = importlib.import_module(f"troubleshoot.commands.{module_name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"troubleshoot.commands.{module_name}":
                continue
            raise
        yield name, module


def build_parser() -> argparse.ArgumentParser:
    from troubleshoot import __version__

    parser = argparse.ArgumentParser(
        prog="troubleshoot",
        description="Diagnose a failed unit from its fault tree: the next best check, "
        "exact posteriors, logged sessions. With no command, opens the bundled demo.",
    )
    parser.add_argument("--version", action="version", version=f"troubleshoot {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, module in _available_commands():
        sub_parser = module.add_parser(sub, name)
        sub_parser.set_defaults(_run=module.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    parser = build_parser()
    if not argv or (argv[0].startswith("-") and argv[0] not in ("-h", "--help", "--version")):
        argv = ["start", *argv]  # no command: open the bundled demo (options go to start)
    args = parser.parse_args(argv)
    if not getattr(args, "_run", None):
        parser.print_help()
        return 2
    try:
        return int(args._run(args) or 0)
    except TroubleshootError as exc:
        for line in exc.lines():
            print(f"troubleshoot: {line}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("troubleshoot: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
