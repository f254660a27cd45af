"""The XML model format: read a model file into a :class:`Model`, write one back.

The format is documented element by element in ``faulttrees/FORMAT.md`` and
fixed by the XML Schema ``troubleshoot/model/schema/model-1.1.xsd`` (which
also reads every file of version 1.0). Reading goes
through the hardened parser of :mod:`troubleshoot.model.xmlsafe`, then the schema,
then the semantic checks of :mod:`troubleshoot.model.validate`; every problem found
is reported in one :class:`~troubleshoot.errors.ModelError`, each with its
file, line and fix.

References
----------
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981 (gates, basic events, top
event; the exponential failure law p = 1 - exp(-rate * t)).
W3C, *XML Schema Part 1: Structures*, 2004.
"""

from __future__ import annotations

import math
import os
import textwrap
from functools import lru_cache
from typing import overload
from importlib import resources
from pathlib import Path

from lxml import etree

from troubleshoot.errors import ModelError, Problem
from troubleshoot.model import (
    FORMAT_VERSION,
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
)
from troubleshoot.model.validate import (
    check_model,
    errors_only,
    validate_model,
    warnings_only,
)
from troubleshoot.model.xmlsafe import DEFAULT_MAX_BYTES, parse_xml_file, validation_problems

ROOT_TAG = "troubleshooting-model"
SCHEMA_FILE = f"model-{FORMAT_VERSION}.xsd"

#: Element name of each gate kind in the file, and back.
GATE_TAGS = {
    "and": "and-gate",
    "or": "or-gate",
    "atleast": "atleast-gate",
    "not": "not-gate",
    "inhibit": "inhibit-gate",
}
_KIND_OF_TAG = {tag: kind for kind, tag in GATE_TAGS.items()}


@lru_cache(maxsize=1)
def model_schema() -> etree.XMLSchema:
    """The XML Schema of the current format version, parsed once."""
    try:
        text = (resources.files("troubleshoot.model.schema") / SCHEMA_FILE).read_bytes()
    except (ModuleNotFoundError, FileNotFoundError):  # source tree without install
        text = (Path(__file__).resolve().parent / "schema" / SCHEMA_FILE).read_bytes()
    return etree.XMLSchema(etree.fromstring(text))


def schema_path() -> Path:
    """Where the XML Schema file of the model format lives."""
    return Path(__file__).resolve().parent / "schema" / SCHEMA_FILE


def load_model(path: str | os.PathLike) -> Model:
    """Read, validate and return the Model in an XML model file.

    Parameters
    ----------
    path : str or path-like
        The model file.

    Returns
    -------
    Model
        Immutable and validated, with ``source`` set to ``path`` and the
        ``line`` of every gate, basic event, check and symptom set.

    Raises
    ------
    ModelError
        Listing every problem found in one pass (not XML, schema violations,
        unknown references, duplicate ids, cycles, values out of range...),
        each with file, line and what to fix. Warnings (such as an event not
        under the top event) do not raise; see :func:`load_model_with_warnings`.
    """
    model, _warnings = load_model_with_warnings(path)
    return model


def load_model_with_warnings(path: str | os.PathLike) -> tuple[Model, list[Problem]]:
    """Like :func:`load_model`, also returning the warnings (severity ``warning``)."""
    name = str(path)
    root = parse_xml_file(path, max_bytes=DEFAULT_MAX_BYTES)
    problems = _root_problems(root, name)
    if problems:
        raise ModelError(problems)
    schema_found = validation_problems(model_schema(), root, name, _SCHEMA_HINTS)
    placed, covered = _escalation_placement(root, name)
    if placed:
        # Our sentence says where <escalation> belongs; the schema's says less.
        schema_found = [p for p in schema_found if p.line not in covered] + placed
    builder = _Builder(root, name)
    model = builder.build()
    semantic = builder.problems + check_model(model, name, builder.lines)
    if schema_found:
        # A broken element is also seen, less clearly, by the semantic checks
        # (placeholder values); the schema's sentence is the one to keep.
        schema_lines = {p.line for p in schema_found}
        semantic = [p for p in semantic if p.line not in schema_lines]
    problems = sorted(schema_found + semantic, key=lambda p: (p.line or 0))
    if errors_only(problems):
        raise ModelError(problems)
    return model, warnings_only(problems)


def _root_problems(root: etree._Element, name: str) -> list[Problem]:
    if root.tag != ROOT_TAG:
        hint = ""
        if isinstance(root.tag, str) and root.tag.endswith("opsa-mef"):
            hint = " This looks like an Open-PSA MEF file: read it with 'troubleshoot import-mef'."
        return [
            Problem(
                name,
                root.sourceline,
                f"the root element is <{root.tag}>, not <{ROOT_TAG}>; a model file starts with "
                f"<{ROOT_TAG} format-version=\"{FORMAT_VERSION}\">.{hint}",
            )
        ]
    version = root.get("format-version")
    if version is None:
        return [
            Problem(
                name,
                root.sourceline,
                f"<{ROOT_TAG}> has no format-version; add format-version=\"{FORMAT_VERSION}\"",
            )
        ]
    if version.strip() not in READ_VERSIONS:
        return [
            Problem(
                name,
                root.sourceline,
                f"format version {version!r} is not supported; this troubleshoot reads versions "
                f"{', '.join(READ_VERSIONS)} (upgrade troubleshoot, or write format-version=\"{FORMAT_VERSION}\")",
            )
        ]
    if version.strip() == "1.0":
        # The elements of version 1.1 say something a 1.0 file cannot.
        for tag in ("abnormal", "shows", "false-alarm", "escalation"):
            for element in root.iter(tag):
                return [Problem(name, element.sourceline,
                                f"<{tag}> belongs to format version 1.1; write format-version=\"1.1\" "
                                f"on <{ROOT_TAG}>")]
    return []


def _escalation_placement(root: etree._Element, name: str) -> tuple[list[Problem], set[int | None]]:
    """<escalation> elements out of place, or more than one: where each belongs.

    Returns the problems and the lines whose schema messages they replace.
    """
    problems = []
    covered: set[int | None] = set()
    first: int | None = None
    for element in root.iter("escalation"):
        parent = element.getparent()
        if parent is None or parent.tag != "top-event" or parent.getparent() is not root:
            where = f"inside <{parent.tag}>" if parent is not None else "at the root"
            problems.append(Problem(name, element.sourceline,
                                    f"<escalation> is {where}; it belongs inside <top-event>, after <label> and "
                                    "<verification>: move it there"))
        elif first is None:
            first = element.sourceline
            after = [s for s in element.itersiblings() if isinstance(s.tag, str) and s.tag != "escalation"]
            if after:
                problems.append(Problem(name, element.sourceline,
                                        f"<escalation> comes before <{after[0].tag}>; it is the last element "
                                        "inside <top-event>, after <label> and <verification>: move it down"))
                # The schema then finds the later elements out of place: one sentence is enough.
                covered.update(s.sourceline for s in after)
        else:
            problems.append(Problem(name, element.sourceline,
                                    f"a second <escalation> (the first is at line {first}); a model gives at most "
                                    "one way to hand the unit over: keep one"))
    covered.update(p.line for p in problems)
    return problems, covered


#: Extra words for schema messages about our elements.
_SCHEMA_HINTS = {
    "id": "an id: letters, digits, '-', '_' or '.', starting with a letter or '_' (no spaces, ':' or '~')",
    "xs:NCName": "an id: letters, digits, '-', '_' or '.', starting with a letter or '_' (no spaces, ':' or '~')",
    "number": "a number (such as 0.02 or 1e-5)",
    "xs:double": "a number (such as 0.02 or 1e-5)",
    "finite-cost": "a number, 0 or more (such as 30 or 2.5)",
    "xs:integer": "a whole number",
}


def _usable_law(rate: float | None, exposure: float | None) -> bool:
    """A rate and an exposure the exponential law can take: finite, rate >= 0, exposure > 0."""
    return (rate is not None and exposure is not None and math.isfinite(rate) and math.isfinite(exposure)
            and rate >= 0 and exposure > 0)


def _clean_text(raw: str | None) -> str:
    """Text of an element as written, without the indentation of the file.

    The first line is stripped; the following lines lose their common
    indentation; surrounding blank lines go. ``save_model`` writes text so
    that this gives it back unchanged.
    """
    if not raw:
        return ""
    first, _, rest = raw.partition("\n")
    lines = [first.strip()] + textwrap.dedent(rest).split("\n") if rest else [first.strip()]
    return "\n".join(line.rstrip() for line in lines).strip()


class _Builder:
    """Turns a schema-checked tree into a Model, tolerating broken parts.

    A broken part (already reported by the schema) gets a harmless
    placeholder so that the semantic checks still see the rest of the file.
    """

    def __init__(self, root: etree._Element, name: str):
        self.root = root
        self.name = name
        self.problems: list[Problem] = []
        self.lines: dict[tuple, int] = {}

    # -- small readers ---------------------------------------------------
    def error(self, line: int | None, message: str) -> None:
        self.problems.append(Problem(self.name, line, message))

    @staticmethod
    def children(element: etree._Element, tag: str | None = None) -> list[etree._Element]:
        return [c for c in element.iterchildren(etree.Element) if tag is None or c.tag == tag]

    def child(self, element: etree._Element, tag: str) -> etree._Element | None:
        found = self.children(element, tag)
        return found[0] if found else None

    def text(self, element: etree._Element | None) -> str:
        if element is None:
            return ""
        return _clean_text("".join(element.xpath("text()")))

    def child_text(self, element: etree._Element, tag: str) -> str:
        return self.text(self.child(element, tag))

    @overload
    def number(self, raw: str | None, line: int | None, what: str, default: float) -> float: ...

    @overload
    def number(self, raw: str | None, line: int | None, what: str, default: None) -> float | None: ...

    def number(self, raw: str | None, line: int | None, what: str, default: float | None) -> float | None:
        if raw is None:
            return default
        try:
            return float(raw.strip())
        except ValueError:
            self.error(line, f"{what} {raw!r} is not a number; write a number such as 0.02 or 1e-5")
            return default

    def integer(self, raw: str | None, line: int | None, what: str) -> int | None:
        if raw is None:
            return None
        try:
            return int(raw.strip())
        except ValueError:
            self.error(line, f"{what} {raw!r} is not a whole number")
            return None

    def ident(self, element: etree._Element) -> str:
        value = element.get("id")
        return value.strip() if value is not None else f"missing-id-at-line-{element.sourceline}"

    # -- sections --------------------------------------------------------
    def build(self) -> Model:
        root = self.root
        meta = self.child(root, "metadata")
        fields = self.metadata(meta) if meta is not None else {"name": ""}
        top_element = self.child(root, "top-event")
        top, top_label, verification = self.top_event(top_element)
        escalation = self.escalation(top_element)
        gates: list[Gate] = []
        events: list[BasicEvent] = []
        tree = self.child(root, "fault-tree")
        for element in self.children(tree) if tree is not None else []:
            if element.tag == "basic-event":
                events.append(self.basic_event(element))
            elif element.tag in _KIND_OF_TAG:
                gates.append(self.gate(element))
        checks_element = self.child(root, "checks")
        symptoms_element = self.child(root, "symptoms")
        checks = [self.check(e, symptom=False) for e in self.children(checks_element, "check")] if (
            checks_element is not None
        ) else []
        symptoms = [self.check(e, symptom=True) for e in self.children(symptoms_element, "symptom")] if (
            symptoms_element is not None
        ) else []
        return Model(
            top=top,
            gates=tuple(gates),
            basic_events=tuple(events),
            checks=tuple(checks),
            symptoms=tuple(symptoms),
            top_label=top_label,
            verification=verification,
            escalation=escalation,
            source=self.name,
            **fields,
        )

    def metadata(self, meta: etree._Element) -> dict:
        self.lines[("metadata",)] = meta.sourceline
        for part in self.children(meta):
            self.lines[("metadata", part.tag)] = part.sourceline
        fields: dict = {
            "name": self.child_text(meta, "name"),
            "equipment": self.child_text(meta, "equipment"),
            "author": self.child_text(meta, "author"),
            "description": self.child_text(meta, "description"),
        }
        unit = self.child(meta, "cost-unit")
        if unit is not None:
            fields["cost_unit"] = self.text(unit)
        basis = self.child(meta, "probability-basis")
        if basis is not None:
            fields["probability_basis"] = (basis.get("kind") or "").strip()
            fields["mission_time"] = self.number(
                basis.get("mission-time-hours"), basis.sourceline, "mission time", None
            )
        threshold = self.child(meta, "isolation-threshold")
        if threshold is not None:
            fields["isolation_threshold"] = self.number(
                self.text(threshold), threshold.sourceline, "isolation threshold", 0.95
            )
        return fields

    def top_event(self, element: etree._Element | None) -> tuple[str, str, Verification | None]:
        if element is None:
            # Point a missing top event at the root element, where it belongs.
            self.lines[("top",)] = self.root.sourceline
            return "", "", None
        self.lines[("top",)] = element.sourceline
        verification = None
        found = self.child(element, "verification")
        if found is not None:
            self.lines[("verification",)] = found.sourceline
            outcomes = self.child(found, "outcomes")
            verification = Verification(
                label=self.child_text(found, "label"),
                cost=self.number(found.get("cost"), found.sourceline, "verification cost", 0.0),
                instructions=self.child_text(found, "instructions"),
                outcomes=self.outcomes(outcomes) if outcomes is not None else ("works", "still fails"),
            )
        return (element.get("ref") or "").strip(), self.child_text(element, "label"), verification

    def escalation(self, top: etree._Element | None) -> Escalation | None:
        """The first <escalation> under the top event (format 1.1), or None."""
        found = self.child(top, "escalation") if top is not None else None
        if found is None:
            return None
        self.lines[("escalation",)] = found.sourceline
        label = self.child(found, "label")
        if label is not None:
            self.lines[("escalation", "label")] = label.sourceline
        return Escalation(
            label=self.text(label),
            cost=self.number(found.get("cost"), found.sourceline, "escalation cost", 0.0),
            instructions=self.child_text(found, "instructions"),
        )

    def refs(self, owner: str, element: etree._Element, tag: str) -> tuple[str, ...]:
        refs = []
        for index, ref in enumerate(self.children(element, tag)):
            self.lines[(owner, tag, index)] = ref.sourceline
            refs.append((ref.get("ref") or "").strip())
        return tuple(refs)

    def gate(self, element: etree._Element) -> Gate:
        gid = self.ident(element)
        kind = _KIND_OF_TAG[element.tag]
        condition = None
        found = self.child(element, "condition")
        if found is not None:
            self.lines[(gid, "condition")] = found.sourceline
            condition = (found.get("ref") or "").strip()
        return Gate(
            id=gid,
            label=self.child_text(element, "label"),
            kind=kind,
            inputs=self.refs(gid, element, "input"),
            k=self.integer(element.get("k"), element.sourceline, f"gate '{gid}' k")
            if kind == "atleast" else None,
            condition=condition,
            unlisted=self.number(element.get("unlisted-causes"), element.sourceline, f"gate '{gid}' unlisted-causes", None)
            if kind == "or" else None,
            description=self.child_text(element, "description"),
            line=element.sourceline,
        )

    def basic_event(self, element: etree._Element) -> BasicEvent:
        eid = self.ident(element)
        line = element.sourceline
        probability: float = 0.0
        rate = exposure = None
        p_element = self.child(element, "probability")
        rate_element = self.child(element, "failure-rate")
        if p_element is not None:
            self.lines[(eid, "probability")] = p_element.sourceline
            probability = self.number(self.text(p_element), p_element.sourceline, f"basic event '{eid}' probability", 0.0)
        elif rate_element is not None:
            rate_line = rate_element.sourceline
            self.lines[(eid, "failure-rate")] = rate_line
            rate = self.number(rate_element.get("per-hour"), rate_line, f"basic event '{eid}' failure rate", 0.0)
            exposure = self.number(rate_element.get("exposure-hours"), rate_line, f"basic event '{eid}' exposure", None)
            # Values are checked before any arithmetic: a negative rate would
            # overflow exp(); the validator reports it with its line.
            if exposure is not None and _usable_law(rate, exposure):
                probability = exponential_probability(rate, exposure)
        else:
            self.error(
                line,
                f"basic event '{eid}' has neither <probability> nor <failure-rate>; give one of them",
            )
        repair = None
        found = self.child(element, "repair")
        if found is not None:
            self.lines[(eid, "repair")] = found.sourceline
            verify = found.get("verify")
            repair = Repair(
                label=self.child_text(found, "label"),
                cost=self.number(found.get("cost"), found.sourceline, f"repair of '{eid}' cost", 0.0),
                verify=verify.strip() if verify is not None else None,
            )
        return BasicEvent(
            id=eid,
            label=self.child_text(element, "label"),
            probability=probability,
            description=self.child_text(element, "description"),
            rate=rate,
            exposure=exposure,
            repair=repair,
            line=line,
        )

    def outcomes(self, element: etree._Element) -> tuple[str, str]:
        return (_clean_text(element.get("normal")), _clean_text(element.get("abnormal")))

    def check_outcomes(self, cid: str, element: etree._Element | None) -> tuple[str, ...]:
        """Normal first, then the abnormal outcomes weakest first (an attribute or elements)."""
        if element is None:
            return ("", "")
        self.lines[(cid, "outcomes")] = element.sourceline
        listed = self.children(element, "abnormal")
        attribute = element.get("abnormal")
        if attribute is not None and listed:
            self.error(element.sourceline, f"check '{cid}' gives its abnormal outcome both as abnormal=\"...\" "
                                           "and as <abnormal> elements; keep one form")
        if attribute is not None or not listed:
            return self.outcomes(element)
        for j, item in enumerate(listed):
            self.lines[(cid, "outcome", j + 1)] = item.sourceline
        return (_clean_text(element.get("normal")),) + tuple(_clean_text(a.get("name")) for a in listed)

    def gives(self, cid: str, elements: list, key: tuple, what: str) -> tuple[tuple[str, float], ...]:
        """(outcome, probability) pairs of <shows> or <false-alarm> elements."""
        out: list[tuple[str, float]] = []
        for j, item in enumerate(elements):
            self.lines[key + (j,)] = item.sourceline
            p = self.number(item.get("probability"), item.sourceline, f"'{cid}' {what}", 0.0)
            out.append((_clean_text(item.get("outcome")), 0.0 if p is None else p))
        return tuple(out)

    def check(self, element: etree._Element, symptom: bool) -> Check:
        cid = self.ident(element)
        line = element.sourceline
        causes = []
        for index, cause in enumerate(self.children(element, "cause")):
            self.lines[(cid, "cause", index)] = cause.sourceline
            shows = self.gives(cid, self.children(cause, "shows"), (cid, "shows", index),
                               f"cause '{cause.get('ref')}' probability")
            if shows and cause.get("detection") is not None:
                self.error(cause.sourceline, f"cause '{cause.get('ref')}' of '{cid}' has both detection=\"...\" "
                                             "and <shows> elements; keep one form")
            elif not shows and cause.get("detection") is None:
                self.error(cause.sourceline, f"cause '{cause.get('ref')}' of '{cid}' says neither how often it "
                                             "shows: add detection=\"...\" (two outcomes) or <shows outcome=\"...\" "
                                             "probability=\"...\"/> per abnormal outcome")
            causes.append(
                Cause(
                    target=(cause.get("ref") or "").strip(),
                    detection=self.number(cause.get("detection"), cause.sourceline, f"'{cid}' detection", 0.0),
                    shows=shows,
                )
            )
        outcomes = self.check_outcomes(cid, self.child(element, "outcomes"))
        leak = self.gives(cid, self.children(element, "false-alarm"), (cid, "leak"), "false-alarm probability")
        if leak and element.get("false-alarm") is not None:
            self.error(line, f"'{cid}' has both a false-alarm=\"...\" attribute and <false-alarm> elements; "
                             "keep one form")
        caution = self.child(element, "caution")
        return Check(
            id=cid,
            label=self.child_text(element, "label"),
            cost=0.0 if symptom else self.number(element.get("cost"), line, f"check '{cid}' cost", 0.0),
            outcomes=outcomes,
            causes=tuple(causes),
            false_alarm=self.number(element.get("false-alarm"), line, f"'{cid}' false-alarm", 0.0),
            leak=leak,
            instructions=self.child_text(element, "instructions"),
            caution=self.text(caution) if caution is not None else None,
            line=line,
        )


# ---------------------------------------------------------------------------
# Writing


def _number(value: float) -> str:
    """repr of the float: the shortest text that reads back to the same float."""
    return repr(float(value))


def _sub(parent: etree._Element, tag: str, text: str | None = None, **attributes: str) -> etree._Element:
    element = etree.SubElement(parent, tag, {k.replace("_", "-"): v for k, v in attributes.items()})
    if text is not None:
        element.text = text
    return element


def model_to_tree(model: Model) -> etree._Element:
    """The XML element tree of a model, in the model format."""
    root = etree.Element(ROOT_TAG, {"format-version": FORMAT_VERSION})
    meta = _sub(root, "metadata")
    _sub(meta, "name", model.name)
    if model.equipment:
        _sub(meta, "equipment", model.equipment)
    if model.author:
        _sub(meta, "author", model.author)
    _sub(meta, "cost-unit", model.cost_unit)
    basis = _sub(meta, "probability-basis", kind=model.probability_basis)
    if model.mission_time is not None:
        basis.set("mission-time-hours", _number(model.mission_time))
    _sub(meta, "isolation-threshold", _number(model.isolation_threshold))
    if model.description:
        _sub(meta, "description", model.description)

    top = _sub(root, "top-event", ref=model.top)
    if model.top_label:
        _sub(top, "label", model.top_label)
    if model.verification is not None:
        v = model.verification
        element = _sub(top, "verification", cost=_number(v.cost))
        _sub(element, "label", v.label)
        if v.instructions:
            _sub(element, "instructions", v.instructions)
        _sub(element, "outcomes", normal=v.outcomes[0], abnormal=v.outcomes[1])
    if model.escalation is not None:
        e = model.escalation
        element = _sub(top, "escalation", cost=_number(e.cost))
        _sub(element, "label", e.label)
        if e.instructions:
            _sub(element, "instructions", e.instructions)

    tree = _sub(root, "fault-tree")
    for gate in model.gates:
        element = _sub(tree, GATE_TAGS[gate.kind], id=gate.id)
        if gate.kind == "atleast" and gate.k is not None:  # a missing k is the validator's to report
            element.set("k", str(int(gate.k)))
        if gate.kind == "or" and gate.unlisted is not None:
            element.set("unlisted-causes", _number(gate.unlisted))
        _sub(element, "label", gate.label)
        if gate.description:
            _sub(element, "description", gate.description)
        for ref in gate.inputs:
            _sub(element, "input", ref=ref)
        if gate.condition is not None:
            _sub(element, "condition", ref=gate.condition)
    for event in model.basic_events:
        element = _sub(tree, "basic-event", id=event.id)
        _sub(element, "label", event.label)
        if event.description:
            _sub(element, "description", event.description)
        if event.rate is not None:
            law = _sub(element, "failure-rate", per_hour=_number(event.rate))
            if event.exposure is not None:  # a missing exposure is the validator's to report
                law.set("exposure-hours", _number(event.exposure))
        else:
            _sub(element, "probability", _number(event.probability))
        if event.repair is not None:
            repair = _sub(element, "repair", cost=_number(event.repair.cost))
            if event.repair.verify is not None:
                repair.set("verify", event.repair.verify)
            _sub(repair, "label", event.repair.label)

    for section, tag, items in (("checks", "check", model.checks), ("symptoms", "symptom", model.symptoms)):
        if not items:
            continue
        container = _sub(root, section)
        for check in items:
            element = _sub(container, tag, id=check.id)
            if tag == "check":
                element.set("cost", _number(check.cost))
            if not check.leak:
                element.set("false-alarm", _number(check.false_alarm))
            _sub(element, "label", check.label)
            if check.instructions:
                _sub(element, "instructions", check.instructions)
            if check.caution is not None:
                _sub(element, "caution", check.caution)
            if len(check.outcomes) == 2:
                _sub(element, "outcomes", normal=check.outcomes[0], abnormal=check.outcomes[1])
            else:  # format 1.1: the abnormal outcomes, weakest first
                outcomes = _sub(element, "outcomes", normal=check.outcomes[0])
                for name in check.outcomes[1:]:
                    _sub(outcomes, "abnormal", name=name)
            for name, p in check.leak:
                _sub(element, "false-alarm", outcome=name, probability=_number(p))
            for cause in check.causes:
                if cause.shows:
                    item = _sub(element, "cause", ref=cause.target)
                    for name, p in cause.shows:
                        _sub(item, "shows", outcome=name, probability=_number(p))
                else:
                    _sub(element, "cause", ref=cause.target, detection=_number(cause.detection))
    return root


def save_model(model: Model, path: str | os.PathLike) -> None:
    """Write a model in the XML model format; :func:`load_model` of the file gives an equal Model.

    Parameters
    ----------
    model : Model
        A valid model (warnings allowed).
    path : str or path-like
        The file to write; replaced atomically, so a failure leaves any
        previous file as it was.

    Raises
    ------
    ModelError
        If the model has errors (the file is not written), or holds text
        that XML cannot carry (control characters).

    Notes
    -----
    Floats are written with ``repr`` so they read back exactly. A basic event
    with a failure rate is written with its rate and exposure; its
    probability is derived again on reading.
    """
    name = str(path)
    errors = errors_only(validate_model(model, model.source or name))
    if errors:
        raise ModelError(errors)
    try:
        root = model_to_tree(model)
    except ValueError as exc:  # lxml refuses control characters
        raise ModelError([Problem(name, None, f"the model holds text XML cannot carry ({exc}); remove control characters")]) from None
    data = b'<?xml version="1.0" encoding="UTF-8"?>\n' + etree.tostring(root, encoding="UTF-8", pretty_print=True)
    from troubleshoot.errors import OutputError
    from troubleshoot.files import write_output

    try:
        write_output(path, data, "model file")
    except OutputError as exc:
        message = str(exc)
        if message.startswith(name + ": "):
            message = message[len(name) + 2:]
        raise ModelError([Problem(name, None, message)]) from None
