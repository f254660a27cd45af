"""The terminal UI for the field technician: a textual App driving one Session.

The App holds the session and its latest state; every session action runs in
a thread worker (the screen stays live, the status line says it is working)
and the screens re-render from the state the worker brings back. A refused
action (SessionError, ImpossibleFindings) changes nothing and is shown as a
message. Every action is saved in the session log as it is made, so quitting
loses nothing; the summary is written beside the log as Markdown.

References
----------
Textual documentation, "Workers" (thread workers and call_from_thread).
"""

from __future__ import annotations

import datetime as _dt
import json
import sys
from pathlib import Path
from collections.abc import Callable

from textual.app import App
from textual.binding import Binding
from textual.notifications import SeverityLevel

from troubleshoot.errors import TroubleshootError
from troubleshoot.session import Status
from troubleshoot.session.summary import parse_time, summary_markdown, write_summary
from troubleshoot.ui.screens import (
    CheckCard,
    CheckScreen,
    MainScreen,
    SafetyScreen,
    StartScreen,
    SummaryScreen,
)


def log_path_of(session) -> Path | None:
    """The session's log file, or None for a session without a log."""
    log = getattr(session, "log", None)
    path = getattr(log, "path", None)
    return Path(path) if path is not None else None


def _log_start_time(path: Path | None) -> _dt.datetime | None:
    """The start time written in a log's header line (UTC), or None when it cannot be read."""
    if path is None:
        return None
    try:
        with open(path, encoding="utf-8") as handle:
            header = json.loads(handle.readline())
        return parse_time(header["time"])
    except (OSError, ValueError, KeyError, TypeError):
        return None


class TroubleshootApp(App[int]):
    """The technician's UI over one :class:`~troubleshoot.session.Session`.

    Parameters
    ----------
    session : Session
        A new session (the start screen comes first) or a resumed one (the
        main screen comes first, after the safety notice).
    fresh : bool, optional
        Show the start screen; default: when the session holds no action yet.
    """

    CSS_PATH = "troubleshoot.tcss"
    ENABLE_COMMAND_PALETTE = False
    TITLE = "troubleshoot"
    BINDINGS = [
        Binding("ctrl+t", "toggle_theme", "Light/dark", show=False),
        Binding("ctrl+q", "quit_session", "Quit", show=False, priority=True),
        # Ctrl+C quits as safely as q: every action is already in the log.
        Binding("ctrl+c", "quit_session", "Quit", show=False, priority=True),
    ]

    def __init__(self, session, fresh: bool | None = None) -> None:
        super().__init__()
        self.session = session
        self.fresh = (not session.actions) if fresh is None else fresh
        self.state = None
        self.show_figures = False  # bits, scores and entropy: one key away (f)
        self.busy = False
        self.quit_pending = False
        self.messages: list[str] = []  # every message shown, newest last (the screen shows them as toasts)
        self.log_path = log_path_of(session)
        self.started = _log_start_time(self.log_path) or _dt.datetime.now(_dt.UTC)
        self.summary_written: Path | None = None
        model = session.model
        self.complaint = model.top_label or model.label_of(model.top)

    # ------------------------------------------------------------------ screens

    def on_mount(self) -> None:
        if self.fresh:
            self.push_screen(StartScreen(self.session.model))
        else:
            self._open_main()
            self.push_screen(SafetyScreen())

    def _open_main(self) -> None:
        self.push_screen(MainScreen())
        self.perform("working out the ranking", None)

    def _main(self) -> MainScreen | None:
        for screen in reversed(self.screen_stack):
            if isinstance(screen, MainScreen):
                return screen
        return None

    def say(self, message: str, severity: SeverityLevel = "information") -> None:
        """Show a message (and keep it, so tests and the summary can read what was said)."""
        self.messages.append(message)
        self.notify(message, severity=severity, markup=False, timeout=6)

    # ------------------------------------------------------------------ session actions

    def perform(self, what: str, action: Callable[[], object] | None,
                then: Callable[[], None] | None = None, done: str | None = None) -> None:
        """Run one session action in a thread worker, then re-render from the new state.

        A second action while one runs is refused with a message; a refused
        action leaves the session unchanged (the session validates first).
        """
        if self.busy:
            self.say("Still working on the last action; wait a moment.", "warning")
            return
        self.busy = True
        self._show_busy()

        def work() -> None:
            error = None
            state = None
            try:
                if action is not None:
                    action()
                state = self.session.explained_state()  # computed here, off the screen's thread
            except TroubleshootError as exc:
                error = "\n".join(exc.lines())
            except Exception as exc:  # an unexpected failure must not kill the screen
                error = f"unexpected error while {what}: {exc.__class__.__name__}: {exc}"
            self.call_from_thread(self._performed, what, state, error, then, done)

        self.run_worker(work, thread=True, group="session", exit_on_error=False)

    def _performed(self, what, state, error, then, done) -> None:
        self.busy = False
        if self.quit_pending:
            if state is not None:
                self.state = state
            self.action_quit_session()
            return
        before = self.state.status if self.state is not None else None
        if state is not None:
            self.state = state
        self._show_busy()
        main = self._main()
        if main is not None and main.is_mounted:
            main.show_state()
        if error is not None:
            self.say(f"Refused ({what}): {error}", "error")
            return
        if done:
            self.say(done)
        if then is not None:
            self.call_after_refresh(then)  # after a dialog dismissed just before is gone
        # The diagnosis is finished (repair confirmed, or the unit handed over): the summary comes up.
        finished = (Status.CONFIRMED, Status.ESCALATED)
        if self.state is not None and self.state.status in finished and before not in finished:
            self.show_summary()

    def _show_busy(self) -> None:
        main = self._main()
        if main is not None and main.is_mounted:
            main.show_busy()

    def begin_diagnosis(self, observations: list[tuple[str, int]], job: dict | None = None) -> None:
        """Record the symptoms marked on the start screen (all or none), then open the main screen.

        ``job`` holds the technician, unit, site and work order typed on the
        start screen; they are logged (the header holds those given on the
        command line) and go to the summary.
        """
        session = self.session
        # Only what was typed or changed here: the header already holds the command line's fields.
        job = {k: v.strip() for k, v in (job or {}).items() if v and v.strip() and session.job.get(k) != v.strip()}

        def record_all() -> None:
            if job:  # the header is written already: the job typed here is logged as its own line
                session.record_job(job)
            recorded = 0
            try:
                for symptom_id, outcome in observations:
                    session.record_finding(symptom_id, outcome)
                    recorded += 1
            except TroubleshootError:
                for _ in range(recorded):  # all or nothing: take back the ones that went in
                    session.undo()
                raise

        def opened() -> None:
            self.switch_screen(MainScreen())

        if self.busy:
            self.say("Still working; wait a moment.", "warning")
            return
        self.perform("recording the symptoms", record_all, then=opened)

    def acknowledge_caution(self, target: str) -> bool:
        """Log that the technician acknowledged the caution of a check (or of the verification).

        Done at once, not in a worker: it changes no finding and needs no
        propagation, and the outcome typed right after it must not find the
        session busy.
        """
        if self.busy:
            self.say("Still working on the last action; acknowledge again in a moment.", "warning")
            return False
        try:
            self.session.acknowledge_caution(target)
        except TroubleshootError as exc:
            self.say(f"Refused (acknowledging the caution): {' '.join(exc.lines())}", "error")
            return False
        return True

    def open_verification(self) -> None:
        """Open the verification the last repair asks for (its named check, or the top event)."""
        state = self.state
        # The unit in doubt (its repair's own check read abnormal) may be tried, advised or not.
        v = None if state is None else state.verification or state.unit_check
        if v is None:
            self.say("No repair is waiting for its verification.")
            return
        card = CheckCard(v.target, v.label, v.cost, state.cost_unit, tuple(v.outcomes), v.instructions,
                         v.caution, verification=True)

        def verified(result) -> None:
            if not result or result[0] != "outcome":
                return
            index = result[2]
            message = None if index == 0 else "The fault persists: the diagnosis goes on with the next check."
            self.perform("recording the verification", lambda: self.session.record_verification(index),
                         done=message)

        self.push_screen(CheckScreen(card), verified)

    # ------------------------------------------------------------------ the end

    def write_summary(self) -> Path | None:
        """Write the summary beside the log (LOG with suffix .md); None without a log."""
        if self.log_path is None or self.state is None:
            return None
        try:
            path = write_summary(self.session, _dt.datetime.now(_dt.UTC))
        except (OSError, TroubleshootError) as exc:
            self.say(f"Cannot write the summary beside {self.log_path}: {exc}", "error")
            return None
        except Exception as exc:  # never lose the end of a session to a fault in the summary
            self.say(f"Cannot write the summary beside {self.log_path}: unexpected "
                     f"{exc.__class__.__name__}: {exc}", "error")
            return None
        self.summary_written = path
        return path

    def show_summary(self) -> None:
        path = self.write_summary()
        if path is not None:
            text = path.read_text(encoding="utf-8") + f"\nThis summary is also written to `{path}`.\n"
        else:
            text = summary_markdown(self.session.model, self.state, self.log_path, self.started,
                                    _dt.datetime.now(_dt.UTC), job=self.session.job)
        # After the next refresh: a dialog dismissed just before (the verification) is gone by then,
        # so its pop never takes this screen off instead.
        self.call_after_refresh(self.push_screen, SummaryScreen(text))

    def action_quit_session(self) -> None:
        """Quit: every action is already in the log; the summary is brought up to date.

        While an action is being worked out, the quit waits for it to be saved.
        """
        if self.busy:
            self.quit_pending = True
            self.say("Quitting as soon as the current action is saved.", "warning")
            return
        self.write_summary()
        self.exit(0)

    def action_toggle_theme(self) -> None:
        self.theme = "textual-light" if self.theme == "textual-dark" else "textual-dark"


def goodbye(session, app: TroubleshootApp) -> str:
    """What is printed after the UI closes: where the log (and the summary) are."""
    path = app.log_path
    if path is None:
        return "troubleshoot: this session had no log."
    lines = [f"troubleshoot: the session is saved in {path}",
             f"troubleshoot: continue it with: troubleshoot resume {path}"]
    if app.summary_written is not None:
        lines.append(f"troubleshoot: summary: {app.summary_written}")
    return "\n".join(lines)


def run_app(session, fresh: bool | None = None) -> int:
    """Run the UI on a session until the technician quits; return the exit status.

    Parameters
    ----------
    session : Session
        From :func:`troubleshoot.session.logfile.new_session` or
        :func:`troubleshoot.session.logfile.resume_session`.
    fresh : bool, optional
        Show the start screen (symptoms); default: when the session holds no action yet.

    Returns
    -------
    int
        0 after a normal quit.
    """
    app = TroubleshootApp(session, fresh=fresh)
    try:
        code = app.run()
    finally:
        session.close()
    print(goodbye(session, app))
    return 0 if code is None else int(code)


if __name__ == "__main__":  # pragma: no cover - python -m troubleshoot.ui.app MODEL
    from troubleshoot.session.logfile import new_session

    sys.exit(run_app(new_session(sys.argv[1] if len(sys.argv) > 1 else "rooftop")))
