"""Smoke test of the real program in a real terminal: tmux at 80 x 24, keys in, screen out.

``troubleshoot start --log LOG`` runs in a detached tmux session on its own
server socket, with a temporary HOME; the test begins the diagnosis, looks
for the demo's top-ranked check on the captured screen, quits, and reads
the exit status the shell wrote.
"""

from __future__ import annotations

import os
import shlex
import shutil
import subprocess
import sys
import time
import uuid

import pytest

TMUX = shutil.which("tmux")
pytestmark = pytest.mark.skipif(TMUX is None, reason="tmux is not installed (CI: apt-get install -y tmux)")

#: How long to wait for the screen to show something before giving up (not a timing assertion).
PATIENCE_SECONDS = 60


def _tmux(socket: str, *args: str, check: bool = True) -> subprocess.CompletedProcess:
    return subprocess.run([TMUX, "-L", socket, "-f", os.devnull, *args], capture_output=True, text=True,
                          check=check)


def _wait_for(predicate, what: str):
    deadline = time.monotonic() + PATIENCE_SECONDS
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(0.2)
    raise AssertionError(f"gave up waiting for {what}")


def test_start_in_tmux_shows_the_top_check_and_quits_with_status_0(tmp_path):
    from troubleshoot.session.logfile import new_session

    # What the screen should show first: the recommended check of the demo before any finding.
    probe = new_session("rooftop", write_log=False)
    top_label = probe.state.next_check.label  # the recommended check is the first row
    home = tmp_path / "home"
    home.mkdir()
    log = tmp_path / "logs" / "session.jsonl"
    log.parent.mkdir()
    status_file = tmp_path / "status"
    socket = f"troubleshoot-test-{uuid.uuid4().hex[:8]}"
    command = (f"env HOME={shlex.quote(str(home))} TERM=xterm-256color "
               f"{shlex.quote(sys.executable)} -m troubleshoot start --log {shlex.quote(str(log))}; "
               f"echo $? > {shlex.quote(str(status_file))}")
    _tmux(socket, "new-session", "-d", "-s", "ui", "-x", "80", "-y", "24", command)
    try:
        def screen() -> str:
            return _tmux(socket, "capture-pane", "-p", "-t", "ui", check=False).stdout

        _wait_for(lambda: "Begin" in screen(), "the start screen")
        assert "lockout/tagout" in screen()
        _tmux(socket, "send-keys", "-t", "ui", "b")
        # The table cuts a long label to its column: look for its first 20 characters, on the
        # main screen (a symptom's label is on the start screen too).
        _wait_for(lambda: "Checks" in screen() and top_label[:20] in screen(),
                  f"the main screen with the top-ranked check {top_label!r}")
        _tmux(socket, "send-keys", "-t", "ui", "q")
        status = _wait_for(lambda: status_file.exists() and status_file.read_text().strip(), "the exit status")
        assert status == "0"
    finally:
        _tmux(socket, "kill-server", check=False)  # only this test's own tmux server (its own socket)
    assert log.exists() and log.with_suffix(".md").exists()
