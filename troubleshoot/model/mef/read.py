"""Read the fault-tree part of an Open-PSA Model Exchange Format (MEF) file.

:func:`read_mef` turns the fault-tree part of an MEF file into a
:class:`~troubleshoot.model.Model` (gates and basic events; no checks, since a
fault tree has none) and reports, line by line, everything it had to change or
leave out. Expressions are evaluated by :mod:`troubleshoot.model.mef.expressions`;
:mod:`troubleshoot.model.mef.write` writes a Model back to MEF.

What the importer reads
-----------------------
- ``define-fault-tree`` (several allowed, ``define-component`` inside them
  flattened) and top-level ``define-gate`` / ``define-basic-event`` /
  ``define-house-event`` / ``define-parameter`` in ``model-data``;
- formulas ``and``, ``or``, ``atleast`` (``min``), ``not``, ``xor``, ``nand``,
  ``nor``, ``iff``, ``imply``, ``cardinality`` (``min``, ``max``), a single
  reference (a pass-through gate) and nested formulas (each nested formula
  becomes a generated gate);
- references ``gate``, ``basic-event``, ``house-event`` and untyped ``event``;
- expressions ``float``, ``int``, ``bool``, ``parameter``,
  ``system-mission-time`` (also spelt ``mission-time``), ``exponential``
  (lambda, time), ``Weibull``, ``add``, ``sub``, ``mul``, ``div``, ``neg``;
  a random deviate (uniform, normal, lognormal, gamma, beta, histogram) is
  replaced by its mean and reported.

House events with a constant are propagated through the logic and the gates
simplified; a gate that ends constant is removed. ``xor`` is rewritten exactly
with and / or / not. Common-cause groups, substitutions, event trees and the
like are reported and left out. Every gate the importer writes passes
:func:`~troubleshoot.model.validate.validate_model`: repeated operands of an
AND or OR are dropped (both are idempotent) and a repeated operand of an
at-least gate (which counts it twice) goes through a one-input OR copy.

References
----------
Open-PSA Model Exchange Format, version 2.0d, The Open-PSA Initiative, 2008
(the format: fault-tree definitions, formulas, expressions, house events).
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981 (gate semantics).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from graphlib import CycleError, TopologicalSorter
from pathlib import Path

from troubleshoot.errors import ModelError, Problem
from troubleshoot.model import DERIVED, BasicEvent, Gate, Model
from troubleshoot.model.mef.expressions import Expressions, body as _body, children as _children
from troubleshoot.model.mef.expressions import strict_integer, strict_number, tag_of as _tag
from troubleshoot.model.mef.write import ATTR_ID, ATTR_KIND, ATTR_MISSION_TIME, ATTR_TOP, ATTR_UNLISTED_OF
from troubleshoot.model.validate import is_valid_id, is_valid_id_char
from troubleshoot.model.xmlsafe import parse_xml_file

#: Mission time assumed when a file uses ``<system-mission-time/>`` and nobody
#: gives one: a year of operation, 8760 h (the default of the SCRAM analysis
#: tool, from memory; MEF itself leaves the value to the analysis).
DEFAULT_MISSION_TIME_HOURS = 8760.0

#: Largest MEF file read, in bytes (a fault tree of a few thousand gates is ~1 MB).
MAX_MEF_BYTES = 50 * 1024 * 1024

_FORMULA_OPS = ("and", "or", "atleast", "not", "xor", "nand", "nor", "iff", "imply", "cardinality")
_REFERENCE_TAGS = ("gate", "basic-event", "house-event", "event")
_IGNORED_QUIETLY = ("label", "attributes")
_NOT_SUPPORTED = {
    "define-CCF-group": "common-cause failure group",
    "define-substitution": "substitution",
    "define-event-tree": "event tree",
    "define-initiating-event": "initiating event",
    "define-sequence": "event-tree sequence",
    "define-rule": "event-tree rule",
    "define-consequence": "consequence",
    "define-consequence-group": "consequence group",
    "define-alignment": "alignment",
    "define-extern-function": "external function",
    "define-extern-library": "external library",
}


# ---------------------------------------------------------------------------
# XML parsing
# ---------------------------------------------------------------------------


def _label(element) -> str | None:
    for child in _children(element):
        if _tag(child) == "label":
            text = (child.text or "").strip()
            return text or None
    return None


def _attributes(element) -> dict[str, str]:
    found: dict[str, str] = {}
    for child in _children(element):
        if _tag(child) == "attributes":
            for attribute in _children(child):
                if _tag(attribute) == "attribute" and attribute.get("name"):
                    found[attribute.get("name")] = attribute.get("value", "")
    return found


# ---------------------------------------------------------------------------
# Import
# ---------------------------------------------------------------------------


@dataclass
class _Node:
    """A formula after constant propagation: and / or / atleast / not over operands."""

    kind: str
    args: list  # of str (an id) or _Node
    k: int | None = None
    line: int | None = None


@dataclass
class _Reader:
    path: Path
    mission_time: float | None
    notes: list[Problem] = field(default_factory=list)
    errors: list[Problem] = field(default_factory=list)
    gates: dict = field(default_factory=dict)  # MEF name -> (element, tree name)
    basic_events: dict = field(default_factory=dict)  # MEF name -> element
    house_events: dict = field(default_factory=dict)
    parameters: dict = field(default_factory=dict)
    ccf_members: dict = field(default_factory=dict)  # member name -> group element
    tree_attributes: dict = field(default_factory=dict)
    uses_mission_time: bool = False
    _expressions: Expressions | None = None

    # -- reporting ---------------------------------------------------------
    def note(self, line, message):
        self.notes.append(Problem(str(self.path), line, message, "warning"))

    def error(self, line, message):
        self.errors.append(Problem(str(self.path), line, message))

    def stop_if_errors(self):
        if self.errors:
            raise ModelError(self.errors)

    # -- collecting definitions -------------------------------------------
    def collect(self, root):
        if _tag(root) != "opsa-mef":
            self.error(root.sourceline, f"root element is <{_tag(root)}>, expected <opsa-mef>; "
                       "is this an Open-PSA MEF file?")
            self.stop_if_errors()
        for child in _children(root):
            tag = _tag(child)
            if tag == "define-fault-tree":
                name = child.get("name") or Path(self.path).stem
                self.tree_attributes.setdefault(name, _attributes(child))
                self.collect_container(child, name)
            elif tag == "model-data":
                self.collect_container(child, None)
            elif tag in _IGNORED_QUIETLY:
                continue
            elif tag in _NOT_SUPPORTED:
                self.not_supported(child)
            else:
                self.note(child.sourceline, f"<{tag}> is not part of a fault tree; ignored")

    def collect_container(self, container, tree):
        for child in _children(container):
            tag = _tag(child)
            assert tag is not None, "_children keeps elements only"
            name = child.get("name")
            if tag in _IGNORED_QUIETLY:
                continue
            if tag == "define-component":
                self.collect_container(child, tree)
                continue
            if tag in _NOT_SUPPORTED:
                self.not_supported(child)
                continue
            table = {
                "define-gate": self.gates,
                "define-basic-event": self.basic_events,
                "define-house-event": self.house_events,
                "define-parameter": self.parameters,
            }.get(tag)
            if table is None:
                self.note(child.sourceline, f"<{tag}> is not supported in a fault tree; ignored")
                continue
            if not name:
                self.error(child.sourceline, f"<{tag}> has no name attribute; give it one")
                continue
            if name in table:
                earlier = table[name][0] if tag == "define-gate" else table[name]
                self.error(child.sourceline, f"{tag[7:]} '{name}' is defined twice (first at line "
                           f"{earlier.sourceline}); remove one definition")
                continue
            table[name] = (child, tree) if tag == "define-gate" else child

    def not_supported(self, element):
        tag = _tag(element)
        assert tag is not None, "called on elements of _children only"
        what = _NOT_SUPPORTED[tag]
        name = element.get("name")
        named = f" '{name}'" if name else ""
        if tag == "define-CCF-group":
            members = []
            for child in _children(element):
                if _tag(child) == "members":
                    members = [m.get("name") for m in _children(child) if m.get("name")]
            for member in members:
                self.ccf_members.setdefault(member, element)
            self.note(element.sourceline, f"{what}{named} is not supported: the common-cause "
                      "failure is left out and its members are independent basic events "
                      "(a member with no definition of its own takes the group's distribution)")
        else:
            self.note(element.sourceline, f"{what}{named} is not supported; ignored")

    # -- expressions ---------------------------------------------------------
    @property
    def expressions(self) -> Expressions:
        """The evaluator of this file's expressions (parameters memoised)."""
        if self._expressions is None:
            self._expressions = Expressions(self.parameters, self.mission_time_value, self.error, self.note)
        return self._expressions

    def mission_time_value(self):
        self.uses_mission_time = True
        return self.mission_time

    def evaluate(self, element):
        """Number of an MEF expression, or None after reporting an error."""
        return self.expressions.evaluate(element)

    def probability_law(self, element):
        """(probability, rate, exposure) of a basic event's expression, or None after an error."""
        return self.expressions.probability_law(element)

    def house_value(self, name, line):
        element = self.house_events[name]
        body = _body(element)
        if not body:
            self.note(element.sourceline, f"house event '{name}' has no value; MEF takes it as false")
            return False
        constant = body[0]
        text = (constant.get("value") or "").strip().lower()
        if _tag(constant) not in ("constant", "bool") or text not in ("true", "false"):
            self.error(constant.sourceline, f"house event '{name}' needs <constant value=\"true\"/> "
                       "or \"false\"")
            return False
        return text == "true"


def _legal_id(name: str) -> str:
    """An id our format accepts: each character our id rule refuses becomes '_'."""
    cleaned = "".join(c if c != DERIVED and is_valid_id_char(c) else "_" for c in name)
    if not cleaned or not is_valid_id(cleaned[0]):
        cleaned = "_" + cleaned
    return cleaned


class _Ids:
    """Allocates unique ids; reports every MEF name that had to change."""

    def __init__(self, reader: _Reader):
        self.reader = reader
        self.taken: set[str] = set()
        self.by_key: dict[tuple[str, str], str] = {}

    def assign(self, key, preferred, line, what):
        base = preferred if is_valid_id(preferred) else _legal_id(preferred)
        new = self.unique(base)
        self.by_key[key] = new
        if new != preferred and key[1] == preferred:
            self.reader.note(line, f"{what} name '{preferred}' is not a usable id here; renamed '{new}'")
        return new

    def unique(self, base):
        new, counter = base, 2
        while new in self.taken:
            new = f"{base}_{counter}"
            counter += 1
        self.taken.add(new)
        return new


def read_mef(path, top: str | None = None, *, mission_time: float | None = None) -> tuple[Model, list[Problem]]:
    """Read the fault-tree part of an Open-PSA MEF file as a Model.

    Parameters
    ----------
    path : str or Path
        The MEF file.
    top : str, optional
        MEF name of the top gate. Default: the gate no other gate refers to;
        when there are several, the import refuses and lists them.
    mission_time : float, optional
        Hours taken for ``<system-mission-time/>``; default the value our
        own export recorded, else :data:`DEFAULT_MISSION_TIME_HOURS` (reported).

    Returns
    -------
    model : Model
        The fault tree: gates, basic events, no checks; ``cost_unit`` ``min``.
    report : list of Problem
        Warnings, each with its line: constructs not supported and what was
        done with them, renamed ids, house events propagated, xor expansions.

    Raises
    ------
    ModelError
        The file cannot be read as a fault tree; every problem found, with
        file and line.

    References
    ----------
    Open-PSA Model Exchange Format 2.0d, sections on fault-tree definitions,
    Boolean formulas and expressions.
    """
    path = Path(path)
    root = parse_xml_file(path, max_bytes=MAX_MEF_BYTES)
    reader = _Reader(path=path, mission_time=mission_time)
    reader.collect(root)
    reader.stop_if_errors()
    if not reader.gates:
        reader.error(root.sourceline, "the file defines no gate, so there is no fault tree to import")
        reader.stop_if_errors()
    recorded = {}
    for attributes in reader.tree_attributes.values():
        recorded.update(attributes)
    if reader.mission_time is None and ATTR_MISSION_TIME in recorded:
        reader.mission_time = strict_number(recorded[ATTR_MISSION_TIME])
    assumed_mission_time = reader.mission_time is None
    if assumed_mission_time:
        reader.mission_time = DEFAULT_MISSION_TIME_HOURS

    gate_refs = {name: _references(element) for name, (element, _) in reader.gates.items()}
    for refs in gate_refs.values():
        for kind, ref, line in refs:
            _resolve(reader, kind, ref, line)
    reader.stop_if_errors()
    top_name = _choose_top(reader, gate_refs, top, recorded.get(ATTR_TOP))
    reader.stop_if_errors()

    # Gates reachable from the top, children before parents (cycles refused).
    reachable: dict[str, None] = {}
    stack = [top_name]
    while stack:
        name = stack.pop()
        if name in reachable:
            continue
        reachable[name] = None
        stack.extend(ref for kind, ref, _ in gate_refs[name] if _resolve(reader, kind, ref, None) == "gate")
    try:
        order = list(
            TopologicalSorter(
                {n: {r for k, r, _ in gate_refs[n] if _resolve(reader, k, r, None) == "gate"} for n in reachable}
            ).static_order()
        )
    except CycleError as exc:
        cycle = " -> ".join(exc.args[1])
        reader.error(reader.gates[exc.args[1][0]][0].sourceline,
                     f"gates refer to each other in a cycle ({cycle}); a fault tree has no cycles")
        reader.stop_if_errors()
    dropped = [n for n in reader.gates if n not in reachable]
    if dropped:
        shown = ", ".join(sorted(dropped)[:10]) + (" ..." if len(dropped) > 10 else "")
        reader.note(None, f"{len(dropped)} gate(s) not under the top gate '{top_name}' are left out: {shown}")

    # Ids of every MEF-named element under the top, in file order.
    ids = _Ids(reader)
    file_order = [n for n in reader.gates if n in reachable]
    used_events: dict[str, None] = {}
    for name in file_order:
        for kind, ref, _ in gate_refs[name]:
            if _resolve(reader, kind, ref, None) == "basic-event":
                used_events[ref] = None
    for name in file_order:
        element = reader.gates[name][0]
        ids.assign(("gate", name), _attributes(element).get(ATTR_ID, name), element.sourceline, "gate")
    for name in used_events:
        element = reader.basic_events.get(name)
        if element is None:
            element = reader.ccf_members[name]
        attrs = _attributes(element) if _tag(element) == "define-basic-event" else {}
        ids.assign(("basic-event", name), attrs.get(ATTR_ID, name), element.sourceline, "basic event")

    builder = _Builder(reader, ids)
    for name in order:
        builder.build_gate(name)
    reader.stop_if_errors()

    top_id = ids.by_key[("gate", top_name)]
    if top_name in builder.constant:
        value = "true (the unit always fails)" if builder.constant[top_name] else "false (it never fails)"
        reader.error(reader.gates[top_name][0].sourceline,
                     f"with the house events applied, the top gate '{top_name}' is always {value}; "
                     "nothing is left to diagnose: change a house event or choose another --top")
        reader.stop_if_errors()

    # Gates in file order, each preceded by the gates generated for its formula.
    gates_out = []
    for name in file_order:
        gates_out += [builder.gates[g] for g in builder.owned.get(name, ())]
    # Events in file order: only those still referenced after constant propagation.
    unlisted_events = {e for e in builder.absorbed_unlisted}
    referenced: dict[str, None] = {}
    for gate in gates_out:
        for operand in gate.operands:
            referenced[operand] = None
    events_out = []
    event_lines = {}
    defined_order = [n for n in reader.basic_events if n in used_events]
    defined_order += [n for n in used_events if n not in reader.basic_events]
    for name in defined_order:
        event_id = ids.by_key[("basic-event", name)]
        if event_id not in referenced:
            if name not in unlisted_events:
                definition = reader.basic_events.get(name)
                reader.note(definition.sourceline if definition is not None else None,
                            f"basic event '{name}' no longer takes part once house events are applied; left out")
            continue
        event = _basic_event(reader, name, event_id)
        if event is not None:
            events_out.append(event)
            event_lines[event_id] = event.line
    reader.stop_if_errors()
    gates_out = _drop_unreachable(reader, top_id, gates_out)
    unused = [n for n in reader.basic_events if n not in used_events]
    if unused:
        shown = ", ".join(unused[:10]) + (" ..." if len(unused) > 10 else "")
        reader.note(None, f"{len(unused)} basic event(s) not under the top gate '{top_name}' are left "
                    f"out: {shown}")

    tree_name = reader.gates[top_name][1] or root.get("name") or path.stem
    if reader.uses_mission_time and assumed_mission_time:
        reader.note(None, f"the file uses the mission time, which MEF leaves to the analysis; "
                    f"{DEFAULT_MISSION_TIME_HOURS:g} h assumed (give another with --mission-time)")
    mission = reader.uses_mission_time or ATTR_MISSION_TIME in recorded
    top_gate = next(g for g in gates_out if g.id == top_id)
    model = Model(
        name=tree_name,
        top=top_id,
        gates=tuple(gates_out),
        basic_events=tuple(events_out),
        description=f"Fault tree '{tree_name}' imported from the Open-PSA MEF file {path.name}.",
        cost_unit="min",
        probability_basis="mission-time" if mission else "per-demand",
        mission_time=reader.mission_time if mission else None,
        top_label=top_gate.label,
        source=str(path),
    )
    return model, reader.notes


def _references(element):
    """(kind, name, line) of every reference in a define-gate's formula."""
    found = []
    for node in element.iter():
        tag = _tag(node)
        if tag in _REFERENCE_TAGS and node is not element and node.get("name") is not None:
            found.append((tag, node.get("name"), node.sourceline))
    return found


def _resolve(reader: _Reader, kind, name, line):
    """Which definition a reference means: gate, basic-event or house-event."""
    tables = {
        "gate": reader.gates,
        "basic-event": reader.basic_events,
        "house-event": reader.house_events,
    }
    if kind == "basic-event" and name not in reader.basic_events and name in reader.ccf_members:
        return "basic-event"
    if kind != "event":
        if name in tables[kind]:
            return kind
        if line is not None:
            reader.error(line, f"{kind} '{name}' is referenced but not defined; add a define-{kind}")
        return None
    matches = [k for k, table in tables.items() if name in table]
    if name in reader.ccf_members and "basic-event" not in matches:
        matches.append("basic-event")
    if len(matches) == 1:
        return matches[0]
    if line is not None:
        if not matches:
            reader.error(line, f"event '{name}' is referenced but not defined as a gate, basic "
                         "event or house event; define it")
        else:
            reader.error(line, f"event '{name}' is ambiguous ({' and '.join(matches)} both use the "
                         "name); reference it as <gate>, <basic-event> or <house-event>")
    return None


def _choose_top(reader: _Reader, gate_refs, top, recorded_top):
    referenced = {ref for refs in gate_refs.values() for kind, ref, _ in refs
                  if _resolve(reader, kind, ref, None) == "gate"}
    roots = [n for n in reader.gates if n not in referenced]
    if top is not None:
        if top in reader.gates:
            return top
        by_own_id = [n for n, (e, _) in reader.gates.items() if _attributes(e).get(ATTR_ID) == top]
        if by_own_id:
            return by_own_id[0]
        reader.error(None, f"--top '{top}' is not a gate of this file; gates no other gate refers "
                     f"to: {', '.join(roots) or 'none'}")
        return None
    if recorded_top is not None and recorded_top in reader.gates:
        return recorded_top
    if len(roots) == 1:
        return roots[0]
    if not roots:
        reader.error(None, "every gate is referenced by another gate, so there is no top gate; "
                     "choose one with --top")
    else:
        reader.error(None, f"{len(roots)} gates are referenced by no other gate "
                     f"({', '.join(roots)}); choose the top event with --top GATE")
    return None


class _Builder:
    """Turns define-gate formulas into our gates, propagating house-event constants."""

    def __init__(self, reader: _Reader, ids: _Ids):
        self.reader = reader
        self.ids = ids
        self.constant: dict[str, bool] = {}  # MEF gate name -> constant value
        self.gates: dict[str, Gate] = {}  # our gate id -> Gate
        self.owned: dict[str, list[str]] = {}  # MEF gate name -> its gates, generated first
        self.generated: dict[tuple, str] = {}  # structure -> generated gate id (shared)
        self.absorbed_unlisted: set[str] = set()
        self.house_used: dict[str, bool] = {}
        self._changed = False
        self._labels: dict[str, str] = {}
        self._event_name_by_id: dict[str, str] | None = None

    # -- simplification ------------------------------------------------------
    def simplify(self, element):
        """bool, an operand id, or a _Node, for one formula element."""
        reader = self.reader
        tag = _tag(element)
        line = element.sourceline
        if tag in _REFERENCE_TAGS:
            name = element.get("name")
            kind = _resolve(reader, tag, name, line)
            if kind == "house-event":
                if name not in self.house_used:
                    value = reader.house_value(name, line)
                    self.house_used[name] = value
                    reader.note(line, f"house event '{name}' is {str(value).lower()}: the constant is "
                                "propagated through the logic and the gates above it simplified")
                self._changed = True
                return self.house_used[name]
            if kind == "gate":
                if name in self.constant:
                    self._changed = True
                    return self.constant[name]
                return self.ids.by_key[("gate", name)]
            if kind == "basic-event":
                return self.ids.by_key[("basic-event", name)]
            return False
        if tag in ("constant", "bool"):
            self._changed = True
            return (element.get("value") or "").strip().lower() == "true"
        if tag not in _FORMULA_OPS:
            reader.error(line, f"<{tag}> is not a Boolean formula this importer knows; use and, or, "
                         "atleast, not, xor, nand, nor or a reference")
            return False
        args = [self.simplify(child) for child in _body(element)]
        if tag in ("not", "iff", "imply") and len(args) != {"not": 1, "iff": 2, "imply": 2}[tag]:
            reader.error(line, f"<{tag}> takes {1 if tag == 'not' else 2} argument(s), found {len(args)}")
            return False
        if not args:
            reader.error(line, f"<{tag}> has no arguments")
            return False
        if tag == "and":
            return self.make_and(args, line)
        if tag == "or":
            return self.make_or(args, line)
        if tag == "not":
            return self.make_not(args[0], line)
        if tag == "nand":
            return self.make_not(self.make_and(args, line), line)
        if tag == "nor":
            return self.make_not(self.make_or(args, line), line)
        if tag == "atleast":
            k = _int_attribute(reader, element, "min")
            return False if k is None else self.make_atleast(k, args, line)
        if tag == "xor":
            return self.make_xor(args, line)
        if tag == "iff":
            return self.make_not(self.make_xor(args, line), line)
        if tag == "imply":
            return self.make_or([self.make_not(args[0], line), args[1]], line)
        low = _int_attribute(reader, element, "min")
        high = _int_attribute(reader, element, "max")
        if low is None or high is None:
            return False
        return self.make_and([self.make_atleast(low, args, line),
                              self.make_not(self.make_atleast(high + 1, args, line), line)], line)

    def make_and(self, args, line):
        if any(a is False for a in args):
            return False
        rest = _dedupe(a for a in args if a is not True)
        if not rest:
            return True
        return rest[0] if len(rest) == 1 else _Node("and", rest, None, line)

    def make_or(self, args, line):
        if any(a is True for a in args):
            return True
        rest = _dedupe(a for a in args if a is not False)
        if not rest:
            return False
        return rest[0] if len(rest) == 1 else _Node("or", rest, None, line)

    def make_not(self, arg, line):
        if isinstance(arg, bool):
            return not arg
        if isinstance(arg, _Node) and arg.kind == "not":
            return arg.args[0]
        return _Node("not", [arg], None, line)

    def make_atleast(self, k, args, line):
        rest = [a for a in args if not isinstance(a, bool)]
        k_left = k - sum(1 for a in args if a is True)
        if k_left <= 0:
            return True
        if k_left > len(rest):
            return False
        if len(rest) == len(args):
            return _Node("atleast", rest, k_left, line)  # no constant involved: keep the voting gate
        if k_left == len(rest):
            return self.make_and(rest, line)
        if k_left == 1:
            return self.make_or(rest, line)
        return _Node("atleast", rest, k_left, line)

    def make_xor(self, args, line):
        flip = sum(1 for a in args if a is True) % 2 == 1
        rest = [a for a in args if not isinstance(a, bool)]
        if not rest:
            return flip
        result = rest[0]
        for other in rest[1:]:
            # xor(a, b) = or(and(a, not b), and(not a, b)); operands become ids
            # first so each is shared by both branches, not copied.
            a, b = self.materialize(result, None), self.materialize(other, None)
            result = _Node("or", [_Node("and", [a, self.make_not(b, line)], None, line),
                                  _Node("and", [self.make_not(a, line), b], None, line)], None, line)
            self._xor_expanded = True
        return self.make_not(result, line) if flip else result

    # -- gate creation -------------------------------------------------------
    def materialize(self, node, owner):
        """Operand id for a simplified formula; a _Node becomes a generated gate."""
        if isinstance(node, str):
            return node
        inputs = self._distinct(node.kind, tuple(self.materialize(a, None) for a in node.args), node.line)
        if node.kind in ("and", "or") and len(inputs) == 1:
            return inputs[0]  # x and x, x or x: x itself
        key = (node.kind, inputs, node.k)
        if key in self.generated:
            return self.generated[key]
        base = f"not_{inputs[0]}" if node.kind == "not" else f"{self._owner_id}_{node.kind}"
        gate_id = self.ids.unique(base)
        if node.kind == "not":
            label = f"not: {self._labels.get(inputs[0], inputs[0])}"
        else:
            label = f"{self._owner_label}: {node.kind} part"
        self._labels[gate_id] = label
        self.generated[key] = gate_id
        self.gates[gate_id] = Gate(gate_id, label, node.kind, inputs, node.k, line=node.line)
        self.owned.setdefault(self._owner_name, []).append(gate_id)
        self._generated_count += 1
        return gate_id

    def _distinct(self, kind, inputs, line):
        """Inputs with no operand listed twice, the same function kept.

        AND and OR are idempotent, so a repeat is dropped; an at-least gate
        counts a repeated operand once per listing, so each repeat reads a
        one-input OR copy of it (which the validator accepts).
        """
        if kind in ("and", "or"):
            return tuple(dict.fromkeys(inputs))
        if kind != "atleast" or len(set(inputs)) == len(inputs):
            return inputs
        seen: dict[str, int] = {}
        out = []
        for operand in inputs:
            repeat = seen.get(operand, 0)
            seen[operand] = repeat + 1
            out.append(operand if repeat == 0 else self._copy(operand, repeat, line))
        return tuple(out)

    def _copy(self, operand, repeat, line):
        """A one-input OR gate passing ``operand`` through (its ``repeat``-th listing)."""
        key = ("copy", operand, repeat)
        if key in self.generated:
            return self.generated[key]
        gate_id = self.ids.unique(f"{operand}_copy{repeat}")
        label = f"copy of {self._labels.get(operand, operand)} (listed {repeat + 1} times)"
        self._labels[gate_id] = label
        self.generated[key] = gate_id
        self.gates[gate_id] = Gate(gate_id, label, "or", (operand,), line=line)
        self.owned.setdefault(self._owner_name, []).append(gate_id)
        self._generated_count += 1
        return gate_id

    def build_gate(self, name):
        reader = self.reader
        element, _tree = reader.gates[name]
        gate_id = self.ids.by_key[("gate", name)]
        attrs = _attributes(element)
        label = _label(element) or name
        self._labels[gate_id] = label
        body = _body(element)
        if len(body) != 1:
            reader.error(element.sourceline, f"gate '{name}' needs exactly one formula, found {len(body)}")
            return
        self._changed = False
        self._xor_expanded = False
        self._generated_count = 0
        self._owner_id, self._owner_label, self._owner_name = gate_id, label, name
        result = self.simplify(body[0])
        if isinstance(result, bool):
            self.constant[name] = result
            reader.note(element.sourceline, f"gate '{name}' is always {str(result).lower()} once house "
                        "events are applied; removed, and the gates above it simplified")
            return
        if isinstance(result, str):
            # A pass-through: a one-input OR is the identity (a one-input AND stays AND).
            first = _tag(body[0])
            kind = first if first in ("and", "or") and not self._changed else "or"
            inputs: tuple[str, ...] = (result,)
            k = None
            if self._changed:
                reader.note(element.sourceline, f"gate '{name}' reduces to its single input '{result}' "
                            "once house events are applied; kept as a one-input OR gate")
        else:
            kind, k = result.kind, result.k
            inputs = self._distinct(kind, tuple(self.materialize(a, None) for a in result.args), result.line)
            if self._changed:
                shape = f"at least {k} of {len(inputs)}" if kind == "atleast" else f"{kind.upper()} of {len(inputs)}"
                reader.note(element.sourceline, f"gate '{name}' simplified by house events to {shape} inputs")
        if self._xor_expanded:
            reader.note(element.sourceline, f"gate '{name}': xor has no gate of its own here and is "
                        "expressed exactly as or(and(a, not b), and(not a, b)), chained for more inputs "
                        f"({self._generated_count} gate(s) generated)")
        condition: str | None = None
        unlisted = None
        if attrs.get(ATTR_KIND) == "inhibit" and kind == "and" and len(inputs) == 2:
            condition = inputs[1]
            kind, inputs = "inhibit", inputs[:1]
        if kind == "or":
            kept = []
            for operand in inputs:
                event_name = self._unlisted_event(operand, name)
                if event_name is not None and unlisted is None:
                    law = reader.probability_law(_body(reader.basic_events[event_name])[0])
                    if law is not None:
                        unlisted = law[0]
                        self.absorbed_unlisted.add(event_name)
                        continue
                kept.append(operand)
            if kept:
                inputs = tuple(kept)
            else:
                unlisted = None
        self.gates[gate_id] = Gate(gate_id, label, kind, inputs, k, condition, unlisted, line=element.sourceline)
        self.owned.setdefault(name, []).append(gate_id)

    def _unlisted_event(self, operand, gate_name):
        """MEF name of the basic event our exporter wrote for this gate's unlisted causes."""
        if self._event_name_by_id is None:
            self._event_name_by_id = {
                our_id: name for (kind, name), our_id in self.ids.by_key.items() if kind == "basic-event"
            }
        name = self._event_name_by_id.get(operand)
        if name is None or name not in self.reader.basic_events:
            return None
        element = self.reader.basic_events[name]
        if _attributes(element).get(ATTR_UNLISTED_OF) == gate_name and len(_body(element)) == 1:
            return name
        return None


def _dedupe(items):
    """Items in order without repeated ids (and/or are idempotent); nested formulas kept."""
    seen, kept = set(), []
    for item in items:
        if isinstance(item, str):
            if item in seen:
                continue
            seen.add(item)
        kept.append(item)
    return kept


def _int_attribute(reader: _Reader, element, name):
    text = element.get(name)
    value = strict_integer(text)
    if value is None:
        reader.error(element.sourceline, f"<{_tag(element)}> needs an integer {name}=\"...\" attribute "
                     f"in ASCII digits, found {text!r}")
    return value


def _basic_event(reader: _Reader, name, event_id):
    element = reader.basic_events.get(name)
    if element is None:
        group = reader.ccf_members[name]
        distribution = [c for c in _children(group) if _tag(c) == "distribution"]
        body = _body(distribution[0]) if distribution else []
        if len(body) != 1:
            reader.error(group.sourceline, f"basic event '{name}' has no definition and its common-cause "
                         "group gives no distribution; define the basic event")
            return None
        law = reader.probability_law(body[0])
        label = name
    else:
        body = _body(element)
        if len(body) != 1:
            reader.error(element.sourceline, f"basic event '{name}' needs one probability expression, "
                         f"found {len(body)}; add e.g. <float value=\"0.001\"/>")
            return None
        law = reader.probability_law(body[0])
        label = _label(element) or name
    if law is None:
        return None
    probability, rate, exposure = law
    if not 0.0 <= probability <= 1.0:
        reader.error((element if element is not None else reader.ccf_members[name]).sourceline,
                     f"basic event '{name}' has probability {probability:g}, outside [0, 1]")
        return None
    line = (element if element is not None else reader.ccf_members[name]).sourceline
    return BasicEvent(event_id, label, probability, rate=rate, exposure=exposure, line=line)


def _drop_unreachable(reader: _Reader, top_id, gates):
    by_id = {g.id: g for g in gates}
    seen, stack = set(), [top_id]
    while stack:
        node = stack.pop()
        if node in seen or node not in by_id:
            continue
        seen.add(node)
        stack.extend(by_id[node].operands)
    kept = [g for g in gates if g.id in seen]
    for gate in gates:
        if gate.id not in seen:
            reader.note(gate.line, f"gate '{gate.id}' no longer takes part once house events are applied; "
                        "left out")
    return kept


