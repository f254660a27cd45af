"""The Open-PSA Model Exchange Format: the fault-tree part, read and written.

:mod:`~troubleshoot.model.mef.read` turns a file into a Model,
:mod:`~troubleshoot.model.mef.expressions` evaluates its probability
expressions, :mod:`~troubleshoot.model.mef.write` writes a Model back.
"""

from troubleshoot.model.mef.read import DEFAULT_MISSION_TIME_HOURS, read_mef
from troubleshoot.model.mef.write import write_mef

__all__ = ["DEFAULT_MISSION_TIME_HOURS", "read_mef", "write_mef"]
