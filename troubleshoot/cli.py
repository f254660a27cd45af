"""The command line: an explicit registry of subcommands, one module each in :mod:`troubleshoot.commands`.

Each command module defines ``add_parser(subparsers, name)`` and
``run(args) -> int``. Every module of the registry is imported when the
parser is built: one that fails to import is an internal error, never a
silently missing command.

Exit status
-----------
0
    Done.
1
    ``replay``: the log differs from what the model gives now.
2
    A user's mistake or refused input (a :class:`~troubleshoot.errors.TroubleshootError`,
    a bad option, standard output that cannot be written): one line per problem.
70
    An internal error (``EX_SOFTWARE`` of BSD ``sysexits.h``): one line naming
    what failed and the file the full traceback was saved to.
130
    Interrupted (Ctrl+C).
"""

from __future__ import annotations

import argparse
import datetime as _dt
import errno
import importlib
import os
import sys
import tempfile
import traceback
from pathlib import Path

from troubleshoot.errors import TroubleshootError

#: Subcommand name -> module under troubleshoot.commands, in the order ``--help`` lists them.
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
    "optimum-study": "optimum_study",
    "learn": "learn",
    "bench": "bench",
}

EXIT_USER_ERROR = 2
#: An unexpected failure: EX_SOFTWARE of sysexits.h.
EXIT_INTERNAL_ERROR = 70
EXIT_INTERRUPTED = 130


class CommandImportError(Exception):
    """A module of the registry failed to import (an installation or programming fault)."""


def load_commands() -> dict:
    """Import every registered command module; any failure is raised, naming the command."""
    modules = {}
    for name, module_name in COMMANDS.items():
        try:
            modules[name] = importlib.import_module(f"troubleshoot.commands.{module_name}")
        except Exception as exc:
            raise CommandImportError(f"the command {name!r} (module troubleshoot.commands.{module_name}) "
                                     f"cannot be loaded: {exc.__class__.__name__}: {exc}") from exc
    return modules


def build_parser() -> argparse.ArgumentParser:
    from troubleshoot import __version__

    parser = argparse.ArgumentParser(
        prog="troubleshoot",
        description="Diagnose a failed unit from its fault tree: the next best check, "
        "exact posteriors, logged sessions. With no command, opens the bundled demo.",
        epilog="exit status: 0 done; 1 replay differs; 2 refused input (one line per problem); "
        "70 internal error (the traceback is saved to a file, named on standard error); 130 interrupted",
    )
    parser.add_argument("--version", action="version", version=f"troubleshoot {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, module in load_commands().items():
        sub_parser = module.add_parser(sub, name)
        sub_parser.set_defaults(_run=module.run)
    return parser


def crash_dir() -> Path:
    """Where tracebacks of internal errors are saved: ``user_log_dir("troubleshoot")/crashes``."""
    import platformdirs

    return Path(platformdirs.user_log_dir("troubleshoot")) / "crashes"


def save_traceback(exc: BaseException, argv: list[str]) -> Path | None:
    """Write the full traceback of ``exc`` to a new file and return its path (None if nowhere writable)."""
    from troubleshoot import __version__

    text = (f"troubleshoot {__version__}, Python {sys.version.split()[0]}\n"
            f"command: troubleshoot {' '.join(argv)}\n"
            f"time: {_dt.datetime.now(_dt.UTC).isoformat()}\n\n"
            + "".join(traceback.format_exception(type(exc), exc, exc.__traceback__)))
    stamp = _dt.datetime.now(_dt.UTC).strftime("%Y%m%dT%H%M%SZ")
    for folder in (crash_dir(), Path(tempfile.gettempdir())):
        try:
            folder.mkdir(parents=True, exist_ok=True)
            fd, name = tempfile.mkstemp(prefix=f"troubleshoot-crash-{stamp}-", suffix=".txt", dir=folder)
            with os.fdopen(fd, "w", encoding="utf-8") as handle:
                handle.write(text)
            return Path(name)
        except OSError:
            continue
    return None


def _where(exc: BaseException) -> str:
    """The innermost frame of the project, as ``module.py:line in function``."""
    frames = traceback.extract_tb(exc.__traceback__)
    package = Path(__file__).resolve().parent
    ours = [f for f in frames if package in Path(f.filename).resolve().parents]
    if not (ours or frames):
        return "an unknown place"
    frame = (ours or frames)[-1]
    return f"{Path(frame.filename).name}:{frame.lineno} in {frame.name}"


def report_internal_error(exc: BaseException, argv: list[str]) -> int:
    """One line on standard error naming what failed and where the traceback went; exit 70."""
    saved = save_traceback(exc, argv)
    where = f"the full traceback is in {saved}" if saved else "the traceback could not be saved"
    what = f"{exc.__class__.__name__}: {exc}".splitlines()[0][:300] if str(exc) else exc.__class__.__name__
    print(f"troubleshoot: internal error ({what}) at {_where(exc)}; {where}; please report it",
          file=sys.stderr)
    return EXIT_INTERNAL_ERROR


def _stdout_failed(exc: OSError) -> int:
    print(f"troubleshoot: cannot write to standard output ({exc.strerror or exc}); "
          "check the disk or the pipe it goes to", file=sys.stderr)
    return EXIT_USER_ERROR


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    try:
        parser = build_parser()
        if not argv or (argv[0].startswith("-") and argv[0] not in ("-h", "--help", "--version")):
            argv = ["start", *argv]  # no command: open the bundled demo (options go to start)
        args = parser.parse_args(argv)
        if not getattr(args, "_run", None):
            parser.print_help()
            return EXIT_USER_ERROR
        code = int(args._run(args) or 0)
        sys.stdout.flush()
        return code
    except TroubleshootError as exc:
        for line in exc.lines():
            print(f"troubleshoot: {line}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("troubleshoot: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        _silence_stdout()
        return 0
    except OSError as exc:
        if exc.errno in (errno.ENOSPC, errno.EIO, errno.EDQUOT, errno.EFBIG) and _is_stdout_error(exc):
            _silence_stdout()
            return _stdout_failed(exc)
        return report_internal_error(exc, argv)
    except Exception as exc:
        return report_internal_error(exc, argv)


def _is_stdout_error(exc: OSError) -> bool:
    """An error while writing standard output (no file name: a write to a descriptor)."""
    return exc.filename is None


def _silence_stdout() -> None:
    """Point standard output at /dev/null so the interpreter's final flush does not fail again."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, ValueError, AttributeError):
        pass
