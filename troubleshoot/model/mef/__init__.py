"""The Open-PSA Model Exchange Format: the fault-tree part, read and written."""

from troubleshoot.model.mef.read import DEFAULT_MISSION_TIME_HOURS, read_mef, write_mef

__all__ = ["DEFAULT_MISSION_TIME_HOURS", "read_mef", "write_mef"]
