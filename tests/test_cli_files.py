"""The command line's failure modes and file safety (issue reproducers).

- an unexpected exception is one line naming what failed and the saved traceback, exit 70
  (EX_SOFTWARE, BSD sysexits.h);
- a command module that fails to import is an error, never a missing command;
- inputs must be regular files: a FIFO, a device or a folder is refused without blocking;
- outputs go atomically to new paths or regular files only: never onto a device, a folder, or
  through a symbolic link; a missing folder or a full device is a user error naming the path,
  found before the work.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from test_session import pump_model
from troubleshoot import cli
from troubleshoot.model.demos import demo_path
from troubleshoot.model.mef.write import write_mef
from troubleshoot.model.xmlfile import save_model

MEF = Path(__file__).parent / "mef_files"


def run(capsys, *args) -> tuple[int, str, str]:
    status = cli.main([str(a) for a in args])
    out = capsys.readouterr()
    return status, out.out, out.err


@pytest.fixture
def crash_home(tmp_path, monkeypatch) -> Path:
    monkeypatch.setenv("XDG_STATE_HOME", str(tmp_path / "state"))
    return tmp_path / "state"


def test_an_unexpected_exception_is_one_line_and_a_saved_traceback(capsys, crash_home, monkeypatch):
    import troubleshoot.commands.check as check

    def broken(args):
        raise RecursionError("maximum recursion depth exceeded")

    monkeypatch.setattr(check, "run", broken)
    status, out, err = run(capsys, "check", "rooftop")
    assert status == cli.EXIT_INTERNAL_ERROR == 70
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert "internal error (RecursionError: maximum recursion depth exceeded)" in lines[0]
    assert re.search(r" at \w+\.py:\d+ in \w+;", lines[0])  # the innermost frame of the package
    saved = Path(lines[0].split("the full traceback is in ")[1].split(";")[0])
    assert saved.is_file() and crash_home in saved.parents
    text = saved.read_text(encoding="utf-8")
    assert "Traceback (most recent call last)" in text and "troubleshoot check rooftop" in text


def test_a_command_module_that_fails_to_import_is_an_error(capsys, crash_home, monkeypatch):
    monkeypatch.setitem(cli.COMMANDS, "ghost", "ghost_that_does_not_exist")
    status, _, err = run(capsys, "check", "rooftop")
    assert status == 70
    assert "the command 'ghost' (module troubleshoot.commands.ghost_that_does_not_exist) cannot be loaded" in err


def test_every_registered_command_loads_and_is_listed(capsys):
    modules = cli.load_commands()
    assert list(modules) == list(cli.COMMANDS)
    with pytest.raises(SystemExit):
        cli.main(["--help"])
    out = capsys.readouterr().out
    for name in cli.COMMANDS:
        assert name in out
    assert "70 internal error" in out


def test_a_full_standard_output_is_a_user_error():
    """Reproducer: ``export ... > /dev/full`` printed a traceback."""
    if not Path("/dev/full").exists():
        pytest.skip("no /dev/full on this system")
    with open("/dev/full", "w") as full:
        done = subprocess.run([sys.executable, "-m", "troubleshoot", "export", "rooftop", "--format", "dot"],
                              stdout=full, stderr=subprocess.PIPE, text=True, timeout=120)
    assert done.returncode == 2
    assert "cannot write to standard output (No space left on device)" in done.stderr
    assert "Traceback" not in done.stderr


# ---------------------------------------------------------------------- inputs


@pytest.mark.parametrize("command", [["check"], ["replay"], ["import-mef", "-o", "OUT"], ["suggest"],
                                     ["export", "--format", "dot"]])
def test_a_fifo_is_refused_without_blocking(tmp_path, command):
    """Reproducer: ``check`` and ``import-mef`` on a FIFO blocked forever."""
    fifo = tmp_path / "pipe.xml"
    os.mkfifo(fifo)
    args = [command[0], str(fifo), *[str(tmp_path / "out.xml") if a == "OUT" else a for a in command[1:]]]
    done = subprocess.run([sys.executable, "-m", "troubleshoot", *args], capture_output=True, text=True,
                          timeout=120, stdin=subprocess.DEVNULL)
    assert done.returncode == 2, done.stderr
    assert "FIFO" in done.stderr or "not a file" in done.stderr
    assert "Traceback" not in done.stderr


@pytest.mark.parametrize("command", [["check"], ["replay"], ["resume", "--plain"]])
def test_a_device_or_a_folder_is_refused(capsys, tmp_path, command):
    """Reproducer: ``replay /dev/zero`` read without limit."""
    for target in ("/dev/zero", str(tmp_path)):
        status, _, err = run(capsys, command[0], target, *command[1:])
        assert status == 2 and ("device" in err or "folder" in err or "not a file" in err), err


def test_a_log_over_the_size_limit_is_refused(capsys, tmp_path, monkeypatch):
    import troubleshoot.session.logfile as logfile

    monkeypatch.setattr(logfile, "LOG_MAX_BYTES", 1000)
    big = tmp_path / "big.jsonl"
    big.write_bytes(b"x" * 2000)
    status, _, err = run(capsys, "replay", big)
    assert status == 2 and "limit" in err


# ---------------------------------------------------------------------- outputs


def test_import_mef_never_replaces_a_symlink_or_a_device(capsys, tmp_path):
    """Reproducer: ``import-mef -o`` replaced a device node or a symlink by a regular file."""
    source = tmp_path / "in.xml"
    write_mef(pump_model(), source)
    precious = tmp_path / "precious.txt"
    precious.write_text("keep me\n")
    link = tmp_path / "link.xml"
    link.symlink_to(precious)
    status, _, err = run(capsys, "import-mef", source, "-o", link)
    assert status == 2 and "symbolic link" in err
    assert link.is_symlink() and precious.read_text() == "keep me\n"
    status, _, err = run(capsys, "import-mef", source, "-o", "/dev/null")
    assert status == 2 and "device" in err
    assert Path("/dev/null").is_char_device()
    status, _, err = run(capsys, "import-mef", source, "-o", tmp_path / "ok.xml")
    assert status == 0, err
    assert (tmp_path / "ok.xml").stat().st_mode & 0o777 == 0o644 & ~_umask()


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@pytest.mark.parametrize("where, words", [
    ("missing/out.dot", "does not exist"),
    ("", "a folder"),
])
def test_export_to_a_missing_folder_or_onto_a_folder_is_a_user_error(capsys, tmp_path, where, words):
    target = tmp_path / where if where else tmp_path
    status, _, err = run(capsys, "export", "rooftop", "--format", "dot", "-o", target)
    assert status == 2 and words in err and str(target) in err and "Traceback" not in err


def test_export_onto_a_full_device_is_refused_before_the_work(capsys):
    if not Path("/dev/full").exists():
        pytest.skip("no /dev/full on this system")
    status, _, err = run(capsys, "export", "rooftop", "--format", "mef", "-o", "/dev/full")
    assert status == 2 and "/dev/full" in err and "device" in err


def test_an_output_path_is_checked_before_the_input_is_read(capsys, tmp_path):
    status, _, err = run(capsys, "import-mef", tmp_path / "absent.xml", "-o", tmp_path / "no" / "out.xml")
    assert status == 2 and "does not exist" in err and "absent.xml" not in err


def test_export_replaces_a_regular_file_atomically(capsys, tmp_path):
    target = tmp_path / "net.dot"
    target.write_text("old\n")
    status, _, _ = run(capsys, "export", "rooftop", "--format", "dot", "-o", target)
    assert status == 0 and target.read_text().startswith("digraph")
    assert [p.name for p in tmp_path.iterdir()] == ["net.dot"]  # no temporary file left behind


def test_save_model_refuses_a_symlink_elsewhere(tmp_path):
    from troubleshoot.errors import ModelError

    precious = tmp_path / "precious.xml"
    save_model(pump_model(), precious)
    before = precious.read_bytes()
    link = tmp_path / "link.xml"
    link.symlink_to(precious)
    with pytest.raises(ModelError, match="symbolic link"):
        save_model(pump_model(unlisted=0.5), link)
    assert precious.read_bytes() == before


def test_demo_paths_still_read(capsys):
    status, out, _ = run(capsys, "check", demo_path("rooftop"))
    assert status == 0 and "model is valid" in out
