"""Semantic checks of a :class:`~troubleshoot.model.Model`, all problems in one pass.

The checks apply to any Model, whether it was read from an XML model file,
imported from another format or built by code: ids, references, ranges,
gate arities, cycles and reachability. Each problem says what to fix.

References
----------
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981, chapters IV-V (gate
definitions: AND, OR, k-out-of-n voting, INHIBIT; a fault tree is acyclic).
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from functools import lru_cache
from typing import TypeGuard

import networkx as nx
from lxml import etree

from troubleshoot.errors import Problem
from troubleshoot.model import (
    DERIVED,
    GATE_KINDS,
    PROBABILITY_BASES,
    Check,
    Model,
    exponential_probability,
)

#: An ASCII id: a letter or '_' first, then letters, digits, '-', '_' or '.'.
_ASCII_ID = re.compile(r"[A-Za-z_][A-Za-z0-9_.\-]*", re.ASCII)

#: A schema holding one element of the xs:NCName type our schema's ids derive from.
_NCNAME_SCHEMA = b"""<xs:schema xmlns:xs="http://www.w3.org/2001/XMLSchema">
  <xs:element name="id" type="xs:NCName"/></xs:schema>"""

#: Relative tolerance for a probability given next to a rate and exposure.
_RATE_TOLERANCE = 1e-9

#: Key of a line in the file: (element id or section, part, optional index).
LineKey = tuple


def is_valid_id(text: object) -> bool:
    """True for an id the model format accepts: an XML NCName without '~'.

    An ASCII id is checked here; any other is checked by the XML Schema
    library that checks model files (libxml2), so this rule and the schema
    agree on every character, combining marks and letters of every script
    included (libxml2 uses the character classes of XML 1.0, 4th edition).
    """
    if not isinstance(text, str) or not text or DERIVED in text:
        return False
    if text.isascii():
        return _ASCII_ID.fullmatch(text) is not None
    if text != text.strip() or any(c.isspace() or c in "<&" for c in text):
        return False  # the schema would collapse blanks before it checks
    return _schema_accepts_ncname(text)


@lru_cache(maxsize=4096)
def is_valid_id_char(char: str) -> bool:
    """True when ``char`` may appear after the first character of an id."""
    return is_valid_id("a" + char)


@lru_cache(maxsize=1)
def _ncname_schema() -> etree.XMLSchema:
    return etree.XMLSchema(etree.fromstring(_NCNAME_SCHEMA))


@lru_cache(maxsize=65536)
def _schema_accepts_ncname(text: str) -> bool:
    element = etree.Element("id")
    try:
        element.text = text
    except ValueError:  # a character XML cannot hold at all
        return False
    return bool(_ncname_schema().validate(element))


def _is_number(value: object) -> TypeGuard[int | float]:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _is_probability(value: object) -> bool:
    return _is_number(value) and 0.0 <= value <= 1.0  # NaN fails both comparisons


def _is_cost(value: object) -> bool:
    return _is_number(value) and math.isfinite(value) and value >= 0.0


def validate_model(model: Model, path: str | None = None) -> list[Problem]:
    """Every problem of a model, errors and warnings, in one pass.

    Parameters
    ----------
    model : Model
        The model to check (from a file, an importer or code).
    path : str, optional
        Name used in the problems; defaults to ``model.source`` or ``"<model>"``.

    Returns
    -------
    list of Problem
        Errors (``severity == "error"``) make the model unusable; warnings
        (unreachable events) do not. Lines come from the elements' ``line``.

    Notes
    -----
    Checked: ids (XML NCName without ``~``, unique across basic events,
    gates, checks and symptoms); the top event exists; every gate has
    inputs, a known kind, and the arity of its kind (NOT one input, INHIBIT
    one input and a condition, at-least k with 1 <= k <= n inputs); unlisted
    causes only on OR gates; every reference is defined; the gates form no
    cycle; probabilities, detections and false alarms lie in [0, 1]; a
    failure rate has an exposure time and agrees with the probability
    p = 1 - exp(-rate * exposure); costs are finite and not negative,
    symptoms cost nothing; each check has at least one cause; the mission
    time is given for a mission-time basis; an escalation (format 1.1) has a
    label and a finite cost >= 0. Events and gates not under the
    top event are warnings.

    References
    ----------
    NUREG-0492, chapters IV-VI (gates; the exponential failure law).
    """
    return check_model(model, path or model.source or "<model>", {})


def errors_only(problems: list[Problem]) -> list[Problem]:
    """The problems of severity ``error``."""
    return [p for p in problems if p.severity == "error"]


def warnings_only(problems: list[Problem]) -> list[Problem]:
    """The problems of severity ``warning``."""
    return [p for p in problems if p.severity == "warning"]


def check_model(model: Model, path: str, lines: Mapping[LineKey, int]) -> list[Problem]:
    """:func:`validate_model` with finer line numbers from a file reader.

    ``lines`` maps keys such as ``("top",)``, ``(gate_id, "input", i)``,
    ``(check_id, "cause", i)``, ``(event_id, "probability")`` or
    ``("metadata", "isolation-threshold")`` to the line of that part of the
    file; a missing key falls back to the element's own ``line``.
    """
    return _Checker(model, path, lines).run()


class _Checker:
    def __init__(self, model: Model, path: str, lines: Mapping[LineKey, int]):
        self.model = model
        self.path = path
        self.lines = lines
        self.problems: list[Problem] = []
        self.events = {e.id: e for e in model.basic_events}
        self.gates = {g.id: g for g in model.gates}
        self.checks = {c.id: c for c in tuple(model.checks) + tuple(model.symptoms)}

    # -- reporting -------------------------------------------------------
    def line(self, key: LineKey, fallback: int | None = None) -> int | None:
        return self.lines.get(key, fallback)

    def error(self, line: int | None, message: str) -> None:
        self.problems.append(Problem(self.path, line, message))

    def warning(self, line: int | None, message: str) -> None:
        self.problems.append(Problem(self.path, line, message, "warning"))

    def run(self) -> list[Problem]:
        self.check_metadata()
        self.check_ids()
        self.check_top()
        for gate in self.model.gates:
            self.check_gate(gate)
        for event in self.model.basic_events:
            self.check_event(event)
        for check in self.model.checks:
            self.check_check(check, "check")
        for symptom in self.model.symptoms:
            self.check_check(symptom, "symptom")
        self.check_verification()
        self.check_escalation()
        self.check_cycles()
        self.check_reachability()
        return self.problems

    # -- reference helpers -----------------------------------------------
    def describe_unknown(self, ref: object) -> str:
        if isinstance(ref, str) and ref in self.checks:
            return f"'{ref}' is a check or symptom, not an event or gate; refer to a basic event or gate"
        return f"'{ref}' is not defined; define a basic event or gate with that id, or correct the reference"

    def is_node(self, ref: object) -> bool:
        return isinstance(ref, str) and (ref in self.events or ref in self.gates)

    # -- sections --------------------------------------------------------
    def check_metadata(self) -> None:
        m = self.model
        meta_line = self.line(("metadata",))
        if not isinstance(m.name, str) or not m.name.strip():
            self.error(self.line(("metadata", "name"), meta_line), "the model has no name; write one in <name>")
        if not isinstance(m.cost_unit, str) or not m.cost_unit.strip():
            self.error(
                self.line(("metadata", "cost-unit"), meta_line),
                "the cost unit is empty; write the unit of every cost in <cost-unit> (for example min or EUR)",
            )
        basis_line = self.line(("metadata", "probability-basis"), meta_line)
        if m.probability_basis not in PROBABILITY_BASES:
            self.error(
                basis_line,
                f"probability basis '{m.probability_basis}' is unknown; use one of {', '.join(PROBABILITY_BASES)}",
            )
        elif m.probability_basis == "mission-time":
            if not (_is_number(m.mission_time) and math.isfinite(m.mission_time) and m.mission_time > 0):
                self.error(
                    basis_line,
                    f"mission-time basis needs a mission time above 0 h (got {m.mission_time!r}); "
                    "set mission-time-hours",
                )
        elif m.mission_time is not None:
            self.error(
                basis_line,
                "a mission time is given with the per-demand basis; remove mission-time-hours "
                "or set kind=\"mission-time\"",
            )
        if not (_is_number(m.isolation_threshold) and 0.0 < m.isolation_threshold <= 1.0):
            self.error(
                self.line(("metadata", "isolation-threshold"), meta_line),
                f"isolation threshold {m.isolation_threshold!r} is outside (0, 1]; give a probability such as 0.95",
            )

    def check_ids(self) -> None:
        seen: dict[str, tuple[str, int | None]] = {}
        groups = (
            ("basic event", self.model.basic_events),
            ("gate", self.model.gates),
            ("check", self.model.checks),
            ("symptom", self.model.symptoms),
        )
        for kind, elements in groups:
            for element in elements:
                ident = element.id
                if not is_valid_id(ident):
                    if isinstance(ident, str) and DERIVED in ident:
                        why = f"contains '{DERIVED}', which is reserved for derived ids"
                    else:
                        why = "is not a valid id"
                    self.error(
                        element.line,
                        f"{kind} id {ident!r} {why}; use letters, digits, '-', '_' or '.', "
                        "starting with a letter or '_'",
                    )
                if ident in seen:
                    other_kind, other_line = seen[ident]
                    where = f" at line {other_line}" if other_line else ""
                    self.error(
                        element.line,
                        f"id '{ident}' of this {kind} is already used by a {other_kind}{where}; "
                        "ids must be unique across basic events, gates, checks and symptoms - rename one",
                    )
                else:
                    seen[ident] = (kind, element.line)

    def check_top(self) -> None:
        top = self.model.top
        line = self.line(("top",))
        if not top:
            self.error(
                line,
                "no top event; add <top-event ref=\"...\"> naming the gate (or basic event) of the complaint",
            )
        elif not self.is_node(top):
            self.error(line, f"top event {self.describe_unknown(top)}")

    def check_gate(self, gate) -> None:
        gid = gate.id
        line = gate.line
        if gate.kind not in GATE_KINDS:
            self.error(line, f"gate '{gid}' has unknown kind '{gate.kind}'; use one of {', '.join(GATE_KINDS)}")
            return
        inputs = tuple(gate.inputs)
        if not inputs:
            self.error(line, f"gate '{gid}' has no inputs; add at least one <input ref=\"...\"/>")
        seen: set[str] = set()
        for index, ref in enumerate(inputs):
            ref_line = self.line((gid, "input", index), line)
            if not self.is_node(ref):
                self.error(ref_line, f"gate '{gid}' input {self.describe_unknown(ref)}")
            if ref in seen:
                self.error(ref_line, f"gate '{gid}' lists input '{ref}' twice; list each input once")
            seen.add(ref)
        if gate.kind == "not" and len(inputs) > 1:
            self.error(line, f"NOT gate '{gid}' has {len(inputs)} inputs; a NOT gate takes exactly one")
        if gate.kind == "inhibit":
            if len(inputs) > 1:
                self.error(
                    line,
                    f"INHIBIT gate '{gid}' has {len(inputs)} inputs; it takes exactly one input "
                    "and one <condition ref=\"...\"/>",
                )
            cond_line = self.line((gid, "condition"), line)
            if not gate.condition:
                self.error(line, f"INHIBIT gate '{gid}' has no condition; add <condition ref=\"...\"/>")
            elif not self.is_node(gate.condition):
                self.error(cond_line, f"INHIBIT gate '{gid}' condition {self.describe_unknown(gate.condition)}")
            elif gate.condition in seen:
                self.error(cond_line, f"INHIBIT gate '{gid}' uses '{gate.condition}' as both input and condition")
        elif gate.condition is not None:
            self.error(line, f"gate '{gid}' is {gate.kind.upper()} but has a condition; only INHIBIT gates take one")
        if gate.kind == "atleast":
            k = gate.k
            if not (isinstance(k, int) and not isinstance(k, bool) and 1 <= k <= max(len(inputs), 1)):
                self.error(
                    line,
                    f"at-least gate '{gid}' has k={k!r} with {len(inputs)} inputs; "
                    f"k must be between 1 and {len(inputs)}",
                )
        elif gate.k is not None:
            self.error(line, f"gate '{gid}' is {gate.kind.upper()} but has k={gate.k!r}; only at-least gates take k")
        if gate.unlisted is not None:
            if gate.kind != "or":
                self.error(
                    line,
                    f"gate '{gid}' is {gate.kind.upper()} but has unlisted causes; "
                    "only OR gates take unlisted-causes",
                )
            elif not _is_probability(gate.unlisted):
                self.error(
                    line,
                    f"gate '{gid}' unlisted-causes probability {gate.unlisted!r} is outside [0, 1]; "
                    "give a probability between 0 and 1",
                )

    def check_event(self, event) -> None:
        eid = event.id
        line = event.line
        p_line = self.line((eid, "probability"), line)
        rate_line = self.line((eid, "failure-rate"), line)
        if event.rate is None and event.exposure is not None:
            self.error(rate_line, f"basic event '{eid}' has an exposure time but no failure rate; give per-hour")
        if event.rate is not None:
            rate_ok = _is_number(event.rate) and math.isfinite(event.rate) and event.rate >= 0
            if not rate_ok:
                self.error(
                    rate_line,
                    f"basic event '{eid}' failure rate {event.rate!r} per hour is not a finite number >= 0",
                )
            if event.exposure is None:
                self.error(
                    rate_line,
                    f"basic event '{eid}' has a failure rate but no exposure time; "
                    "add exposure-hours (hours the component was exposed)",
                )
            elif not (_is_number(event.exposure) and math.isfinite(event.exposure) and event.exposure > 0):
                self.error(
                    rate_line,
                    f"basic event '{eid}' exposure time {event.exposure!r} h is not a finite number above 0",
                )
            elif rate_ok and _is_number(event.probability):
                expected = exponential_probability(event.rate, event.exposure)
                if not math.isclose(event.probability, expected, rel_tol=_RATE_TOLERANCE, abs_tol=1e-300):
                    self.error(
                        rate_line,
                        f"basic event '{eid}' probability {event.probability!r} disagrees with its rate and "
                        f"exposure (1 - exp(-rate * t) = {expected!r}); give either a probability or a rate",
                    )
        elif not _is_probability(event.probability):
            self.error(
                p_line,
                f"basic event '{eid}' probability {event.probability!r} is outside [0, 1]; "
                "give a probability between 0 and 1",
            )
        self.check_repair(event)

    def check_repair(self, event) -> None:
        repair = event.repair
        if repair is None:
            return
        line = self.line((event.id, "repair"), event.line)
        if not _is_cost(repair.cost):
            self.error(
                line,
                f"repair of '{event.id}' cost {repair.cost!r} {self.model.cost_unit} is not a finite number >= 0",
            )
        if repair.verify is not None and repair.verify not in self.checks:
            self.error(
                line,
                f"repair of '{event.id}' verify check '{repair.verify}' is not defined; "
                "name a check id, or remove verify to check the top event",
            )

    def check_check(self, check: Check, kind: str) -> None:
        cid = check.id
        line = check.line
        if not check.causes:
            self.error(line, f"{kind} '{cid}' has no cause; add at least one <cause ref=\"...\" detection=\"...\"/>")
        seen: set[str] = set()
        for index, cause in enumerate(check.causes):
            cause_line = self.line((cid, "cause", index), line)
            if not self.is_node(cause.target):
                self.error(cause_line, f"{kind} '{cid}' cause {self.describe_unknown(cause.target)}")
            if cause.target in seen:
                self.error(cause_line, f"{kind} '{cid}' lists cause '{cause.target}' twice; list each cause once")
            seen.add(cause.target)
            if cause.shows:
                self.check_distribution(check, kind, cause.shows, f"cause '{cause.target}'",
                                        lambda j, i=index, at=cause_line: self.line((cid, "shows", i, j), at), cause_line)
            elif not _is_probability(cause.detection):
                self.error(
                    cause_line,
                    f"{kind} '{cid}' detection probability {cause.detection!r} for '{cause.target}' "
                    "is outside [0, 1]; give a probability between 0 and 1",
                )
            elif len(check.outcomes) > 2:
                self.error(
                    cause_line,
                    f"{kind} '{cid}' cause '{cause.target}' gives one detection probability, but the check has "
                    f"{len(check.outcomes) - 1} abnormal outcomes ({', '.join(map(repr, check.outcomes[1:]))}); "
                    "give <shows outcome=\"...\" probability=\"...\"/> for each one the cause can produce",
                )
        if check.leak:
            self.check_distribution(check, kind, check.leak, "false alarm",
                                    lambda j: self.line((cid, "leak", j), line), line)
        elif not _is_probability(check.false_alarm):
            self.error(
                line,
                f"{kind} '{cid}' false-alarm probability {check.false_alarm!r} is outside [0, 1]; "
                "give a probability between 0 and 1",
            )
        elif len(check.outcomes) > 2 and check.false_alarm > 0:
            self.error(
                line,
                f"{kind} '{cid}' has {len(check.outcomes) - 1} abnormal outcomes; give its false alarm as "
                "<false-alarm outcome=\"...\" probability=\"...\"/> per abnormal outcome instead of one number",
            )
        if kind == "symptom":
            if check.cost != 0:
                self.error(line, f"symptom '{cid}' has cost {check.cost!r}; symptoms cost 0 (make it a check instead)")
        elif not _is_cost(check.cost):
            self.error(line, f"check '{cid}' cost {check.cost!r} {self.model.cost_unit} is not a finite number >= 0")
        self.check_check_outcomes(check, kind, self.line((cid, "outcomes"), line))

    def check_check_outcomes(self, check: Check, kind: str, line: int | None) -> None:
        """K >= 2 non-empty names, each once (format 1.1); two outcomes keep the 1.0 wording."""
        outcomes = check.outcomes
        if len(outcomes) <= 2:
            self.check_outcomes(outcomes, line, f"{kind} '{check.id}'")
            return
        if not all(isinstance(o, str) and o.strip() for o in outcomes):
            self.error(line, f"{kind} '{check.id}' has an outcome without a name ({outcomes!r}); name every outcome")
        for name in sorted({o for o in outcomes if outcomes.count(o) > 1}):
            self.error(line, f"{kind} '{check.id}' names the outcome {name!r} twice (its outcomes: "
                             f"{', '.join(map(repr, outcomes))}); give every outcome its own name")

    def check_distribution(self, check: Check, kind: str, pairs, owner: str, line_of, line) -> None:
        """One cause's (or the false alarm's) probabilities over the abnormal outcomes.

        Each must name an abnormal outcome of the check, once, with a
        probability in [0, 1]; together they may not exceed 1 (what is left
        is "not seen").
        """
        cid = check.id
        abnormal = check.outcomes[1:]
        named: set[str] = set()
        total = 0.0
        for j, (name, p) in enumerate(pairs):
            where = line_of(j)
            if name == check.outcomes[0]:
                self.error(where, f"{kind} '{cid}' {owner} gives the normal outcome {name!r}; list only the "
                                  f"abnormal outcomes it produces ({', '.join(map(repr, abnormal))})")
            elif name not in abnormal:
                self.error(where, f"{kind} '{cid}' {owner} gives outcome {name!r}, which the check does not have; "
                                  f"use one of {', '.join(map(repr, abnormal))}")
            if name in named:
                self.error(where, f"{kind} '{cid}' {owner} gives outcome {name!r} twice; give each outcome once")
            named.add(name)
            if not _is_probability(p):
                self.error(where, f"{kind} '{cid}' {owner} probability {p!r} for {name!r} is outside [0, 1]; "
                                  "give a probability between 0 and 1")
            else:
                total += p
        if total > 1.0 + 1e-12:
            self.error(line, f"{kind} '{cid}' {owner} probabilities add up to {total:.6g}, more than 1; "
                             "lower them so that they sum to at most 1 (the rest is \"not seen\")")

    def check_outcomes(self, outcomes, line: int | None, owner: str) -> None:
        ok = (
            isinstance(outcomes, tuple)
            and len(outcomes) == 2
            and all(isinstance(o, str) and o.strip() for o in outcomes)
            and outcomes[0] != outcomes[1]
        )
        if not ok:
            self.error(
                line,
                f"{owner} outcomes {outcomes!r} must be two different, non-empty names (normal first, abnormal second)",
            )

    def check_verification(self) -> None:
        verification = self.model.verification
        if verification is None:
            return
        line = self.line(("verification",), self.line(("top",)))
        if not _is_cost(verification.cost):
            self.error(
                line,
                f"verification cost {verification.cost!r} {self.model.cost_unit} is not a finite number >= 0",
            )
        self.check_outcomes(verification.outcomes, line, "verification")

    def check_escalation(self) -> None:
        """Format 1.1: a label in words and a finite cost, 0 or more, in the model's unit."""
        escalation = self.model.escalation
        if escalation is None:
            return
        line = self.line(("escalation",), self.line(("top",)))
        if not isinstance(escalation.label, str) or not escalation.label.strip():
            self.error(
                self.line(("escalation", "label"), line),
                "the escalation has no label; say in <label> what handing the unit over means "
                "(for example: call the manufacturer's field engineer)",
            )
        if not _is_cost(escalation.cost):
            self.error(
                line,
                f"escalation cost {escalation.cost!r} {self.model.cost_unit} is not a finite number >= 0; "
                "give what handing the unit over costs, in the model's cost unit",
            )
        if not isinstance(escalation.instructions, str):
            self.error(line, f"escalation instructions {escalation.instructions!r} are not text; write them as text")

    def check_cycles(self) -> None:
        graph = nx.DiGraph()
        for gate in self.model.gates:
            for ref in gate.operands:
                if ref in self.gates:
                    graph.add_edge(gate.id, ref)
        for component in nx.strongly_connected_components(graph):
            first = min(component, key=lambda g: (self.gates[g].line or 0, g))
            if len(component) == 1 and not graph.has_edge(first, first):
                continue
            cycle = [edge[0] for edge in nx.find_cycle(graph.subgraph(component), source=first)]
            path = " -> ".join(cycle + [cycle[0]])
            self.error(
                self.gates[first].line,
                f"gates form a cycle ({path}); a gate must not feed itself - remove one of these inputs",
            )

    def check_reachability(self) -> None:
        if not self.is_node(self.model.top):
            return
        reached = {self.model.top}
        stack = [self.model.top]
        while stack:
            gate = self.gates.get(stack.pop())
            if gate is None:
                continue
            for ref in gate.operands:
                if self.is_node(ref) and ref not in reached:
                    reached.add(ref)
                    stack.append(ref)
        for gate in self.model.gates:
            if gate.id not in reached:
                self.warning(
                    gate.line,
                    f"gate '{gate.id}' is not under the top event '{self.model.top}'; "
                    "connect it with an <input ref=\"...\"/> or remove it",
                )
        for event in self.model.basic_events:
            if event.id not in reached:
                self.warning(
                    event.line,
                    f"basic event '{event.id}' is not under the top event '{self.model.top}'; "
                    "connect it with an <input ref=\"...\"/> or remove it",
                )
