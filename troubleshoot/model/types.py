"""The diagnostic model: a fault tree plus the checks and symptoms a technician can observe.

A :class:`Model` is immutable. It is built by the XML loader
(:func:`troubleshoot.model.xmlfile.load_model`), by the Open-PSA importer, or by
code (tests, the benchmark generator); :func:`troubleshoot.model.validate.validate_model`
reports every problem in one pass.

Ids are unique across basic events, gates, checks and symptoms, so a finding
can name a check, a symptom, or (for an exact observation such as "the unit
still fails") an event or gate directly.

References
----------
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981 (gates, basic events, top event).
J. Pearl, *Probabilistic Reasoning in Intelligent Systems*, 1988 (noisy-OR).
M. Henrion, "Some practical issues in constructing belief networks", UAI 1989 (leak).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property

FORMAT_VERSION = "1.1"
#: Every format version the loader reads; 1.0 files mean exactly what they meant.
READ_VERSIONS = ("1.0", "1.1")

GATE_KINDS = ("and", "or", "atleast", "not", "inhibit")
PROBABILITY_BASES = ("per-demand", "mission-time")

#: Separator that cannot appear in a model id (ids are XML NCNames without it);
#: derived node ids use it so they never collide with the model's own.
DERIVED = "~"


def unlisted_id(gate_id: str) -> str:
    """Id of the root event standing for a gate's unlisted causes (its leak)."""
    return f"{gate_id}{DERIVED}unlisted"


def exponential_probability(rate: float, exposure: float) -> float:
    """Failure probability of a constant failure rate over an exposure time.

    p = 1 - exp(-rate * exposure), computed with expm1 so a tiny rate keeps its digits.

    References
    ----------
    NUREG-0492, chapter VI (probability theory: the exponential failure law).
    """
    return -math.expm1(-rate * exposure)


@dataclass(frozen=True)
class Repair:
    """How a basic event is put right: a label and its cost in the model's unit.

    ``verify`` optionally names the check that confirms the repair; without it
    the top event itself is checked.
    """

    label: str
    cost: float
    verify: str | None = None


@dataclass(frozen=True)
class BasicEvent:
    """A component failure mode: a root of the fault tree.

    ``probability`` is the prior probability of the failed state, already
    resolved: when the file gives a constant failure rate (per hour) and an
    exposure time (hours), probability = 1 - exp(-rate * exposure).
    """

    id: str
    label: str
    probability: float
    description: str = ""
    rate: float | None = None
    exposure: float | None = None
    repair: Repair | None = None
    line: int | None = field(default=None, compare=False)


@dataclass(frozen=True)
class Gate:
    """A deterministic gate over events and other gates.

    kind
        ``and``, ``or``, ``atleast`` (k of the inputs), ``not`` (one input),
        ``inhibit`` (the one input AND the ``condition`` event).
    unlisted
        OR gates only: probability that the gate occurs through causes
        outside the model; it becomes the root event :func:`unlisted_id`.
    """

    id: str
    label: str
    kind: str
    inputs: tuple[str, ...]
    k: int | None = None
    condition: str | None = None
    unlisted: float | None = None
    description: str = ""
    line: int | None = field(default=None, compare=False)

    @property
    def operands(self) -> tuple[str, ...]:
        """Every event or gate this gate reads, the inhibit condition included."""
        return self.inputs + ((self.condition,) if self.condition else ())


@dataclass(frozen=True)
class Cause:
    """A cause a check responds to (a gate or basic event) and how it shows.

    ``detection`` is the probability that this cause, when present, shows
    at all (some abnormal outcome). ``shows`` (format 1.1) splits it over
    the abnormal outcomes as (outcome name, probability) pairs; when it is
    given, ``detection`` is its sum. Without ``shows`` (a two-outcome check)
    the whole ``detection`` goes to the one abnormal outcome.
    """

    target: str
    detection: float = 0.0
    shows: tuple[tuple[str, float], ...] = ()

    def __post_init__(self):
        if self.shows:
            object.__setattr__(self, "detection", math.fsum(float(p) for _, p in self.shows))


@dataclass(frozen=True)
class Check:
    """Something a technician can do or read: a noisy-OR (two outcomes) or noisy-MAX over its causes.

    ``outcomes`` lists the K >= 2 outcome names, the normal one first (what
    is seen when none of the causes shows), then the abnormal ones. Each
    present cause independently produces an abnormal outcome or nothing
    (:class:`Cause`), so does the false alarm (the leak), and the check
    shows the produced outcome that dominates: the abnormal outcomes are
    listed from weakest to strongest, so the one listed last wins
    (noisy-MAX over that order). With two outcomes this is the noisy-OR
    P(abnormal | causes) = 1 - (1 - false_alarm) * prod over present causes
    of (1 - detection). :mod:`troubleshoot.engine.observation` holds the rule.
    A symptom is a Check with cost 0 that is observed at the start.

    ``false_alarm`` is the leak's total probability; ``leak`` (format 1.1)
    splits it over the abnormal outcomes as (outcome name, probability)
    pairs, and when given ``false_alarm`` is its sum.
    """

    id: str
    label: str
    cost: float
    outcomes: tuple[str, ...]
    causes: tuple[Cause, ...]
    false_alarm: float = 0.0
    instructions: str = ""
    caution: str | None = None
    line: int | None = field(default=None, compare=False)
    leak: tuple[tuple[str, float], ...] = ()

    def __post_init__(self):
        if self.leak:
            object.__setattr__(self, "false_alarm", math.fsum(float(p) for _, p in self.leak))

    def outcome_index(self, name: str) -> int:
        """Index of an outcome name (0 for the normal outcome); ValueError otherwise."""
        return self.outcomes.index(name)

    @property
    def normal(self) -> str:
        """The normal outcome's name."""
        return self.outcomes[0]

    @property
    def dominance_order(self) -> tuple[str, ...]:
        """The abnormal outcomes, weakest first (their listed order): the last one dominates."""
        return tuple(self.outcomes[1:])


@dataclass(frozen=True)
class Verification:
    """Checking the top event itself after a repair ("does the unit work now?")."""

    label: str
    cost: float
    instructions: str = ""
    outcomes: tuple[str, str] = ("works", "still fails")


@dataclass(frozen=True)
class Escalation:
    """Handing the unit over when the cause lies beyond the model (format 1.1).

    ``label`` says what escalating means in words ("call the manufacturer's
    field engineer", "swap the whole unit"); ``cost`` is its price in the
    model's cost unit, counted once, after which the unit is taken as put
    right.
    """

    label: str
    cost: float
    instructions: str = ""


@dataclass(frozen=True)
class Model:
    """A validated, immutable diagnostic model.

    Parameters
    ----------
    name : str
        Short name of the model.
    top : str
        Id of the top event (a gate, or a basic event for a trivial tree):
        the complaint.
    gates, basic_events, checks, symptoms : tuple
        The model's elements in file order.
    cost_unit : str
        Unit of every cost (``min``, ``EUR``...).
    probability_basis : str
        ``per-demand`` or ``mission-time`` (then ``mission_time`` in hours).
    verification : Verification or None
        The check of the top event after a repair.
    isolation_threshold : float
        Posterior at which a suspect counts as isolated.
    escalation : Escalation or None
        What handing the unit over costs and means (format 1.1); None: no
        price, so escalation is never chosen by cost (see
        :mod:`troubleshoot.advice.policy`).
    """

    name: str
    top: str
    gates: tuple[Gate, ...]
    basic_events: tuple[BasicEvent, ...]
    checks: tuple[Check, ...] = ()
    symptoms: tuple[Check, ...] = ()
    equipment: str = ""
    author: str = ""
    description: str = ""
    cost_unit: str = "min"
    probability_basis: str = "per-demand"
    mission_time: float | None = None
    top_label: str = ""
    verification: Verification | None = None
    isolation_threshold: float = 0.95
    escalation: Escalation | None = None
    source: str | None = field(default=None, compare=False)

    # Lookups, derived once; cached_property writes to __dict__, so it is
    # compatible with the frozen dataclass and excluded from equality.
    @cached_property
    def gate_by_id(self) -> dict[str, Gate]:
        return {g.id: g for g in self.gates}

    @cached_property
    def event_by_id(self) -> dict[str, BasicEvent]:
        return {e.id: e for e in self.basic_events}

    @cached_property
    def check_by_id(self) -> dict[str, Check]:
        """Checks and symptoms together, by id."""
        return {c.id: c for c in self.checks + self.symptoms}

    @cached_property
    def hypotheses(self) -> tuple[str, ...]:
        """Root events: every basic event, then each OR gate's unlisted-cause event."""
        return tuple(e.id for e in self.basic_events) + tuple(
            unlisted_id(g.id) for g in self.gates if g.unlisted is not None
        )

    @cached_property
    def hypothesis_ids(self) -> frozenset[str]:
        """The root events as a set: membership in constant time (a tree may have 50,000 of them)."""
        return frozenset(self.hypotheses)

    def label_of(self, node_id: str) -> str:
        """Human label of any id: event, gate, check, symptom or unlisted-cause event."""
        if node_id in self.event_by_id:
            return self.event_by_id[node_id].label
        if node_id in self.gate_by_id:
            return self.gate_by_id[node_id].label
        if node_id in self.check_by_id:
            return self.check_by_id[node_id].label
        if node_id.endswith(DERIVED + "unlisted"):
            gate = self.gate_by_id.get(node_id[: -len(DERIVED + "unlisted")])
            if gate is not None:
                return f"unlisted cause under: {gate.label}"
        return node_id

    def prior_of(self, root_id: str) -> float:
        """Prior failure probability of a root (basic event or unlisted-cause event)."""
        if root_id in self.event_by_id:
            return self.event_by_id[root_id].probability
        gate = self.gate_by_id[root_id[: -len(DERIVED + "unlisted")]]
        assert gate.unlisted is not None
        return gate.unlisted
