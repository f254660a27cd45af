"""The model: fault tree, checks, symptoms and repairs, and the files they are read from and written to.

Pure types live in :mod:`troubleshoot.model.types`; our XML format in
:mod:`~troubleshoot.model.xmlfile` (checked by :mod:`~troubleshoot.model.validate`,
parsed by :mod:`~troubleshoot.model.xmlsafe`), the Open-PSA Model Exchange
Format in :mod:`troubleshoot.model.mef`, and gate semantics in
:mod:`~troubleshoot.model.gates`.
"""

from troubleshoot.model.types import (
    DERIVED,
    FORMAT_VERSION,
    GATE_KINDS,
    PROBABILITY_BASES,
    READ_VERSIONS,
    BasicEvent,
    Cause,
    Check,
    Escalation,
    Gate,
    Model,
    Repair,
    Verification,
    exponential_probability,
    unlisted_id,
)

__all__ = [
    "DERIVED", "FORMAT_VERSION", "GATE_KINDS", "PROBABILITY_BASES", "READ_VERSIONS", "BasicEvent", "Cause",
    "Check", "Escalation", "Gate", "Model", "Repair", "Verification", "exponential_probability", "unlisted_id",
]
