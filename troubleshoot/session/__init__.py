"""A troubleshooting session: its record, undo and actions, its log file, replay and resume."""

from troubleshoot.session.session import (
    AMBIGUITY,
    AWAITING_VERIFICATION,
    CONFIRMED,
    DIAGNOSING,
    ISOLATED,
    OBSERVATION,
    Session,
    SessionSettings,
    SessionView,
    Decision,
    Status,
    settings_for,
    top_verification,
    verification_for,
)

__all__ = [
    "AMBIGUITY", "AWAITING_VERIFICATION", "CONFIRMED", "DIAGNOSING", "ISOLATED", "OBSERVATION",
    "Decision", "Session", "SessionSettings", "Status", "SessionView", "settings_for", "top_verification", "verification_for",
]
