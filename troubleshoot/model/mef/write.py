"""Write the fault-tree part of a Model as an Open-PSA MEF file.

Gates keep their kinds; an INHIBIT gate is written as an AND of its input and
condition, an OR gate's unlisted causes as an extra basic event under it, and
a basic event with a rate and an exposure as an exponential law. Extra
``troubleshoot-*`` attributes let :func:`troubleshoot.model.mef.read.read_mef`
restore the model exactly; other tools see ordinary MEF.

References
----------
Open-PSA Model Exchange Format, version 2.0d, The Open-PSA Initiative, 2008.
"""

from __future__ import annotations

import re
from xml.sax.saxutils import escape, quoteattr

from troubleshoot.model import DERIVED, BasicEvent, Model

#: Attributes our exporter writes so that an import of the export restores our
#: own constructs exactly; other tools see ordinary MEF with extra attributes.
ATTR_ID = "troubleshoot-id"
ATTR_KIND = "troubleshoot-kind"
ATTR_UNLISTED_OF = "troubleshoot-unlisted-of"
ATTR_TOP = "troubleshoot-top"
ATTR_MISSION_TIME = "troubleshoot-mission-time-hours"


def _mef_name(identifier: str) -> str:
    """An MEF identifier: no dots (they are MEF paths), no leading, trailing or double dash."""
    name = re.sub(r"[^\w-]", "_", identifier)
    name = re.sub(r"--+", lambda m: "_" * len(m.group()), name)
    if name.startswith("-"):
        name = "_" + name[1:]
    if name.endswith("-"):
        name = name[:-1] + "_"
    if not name or not re.match(r"[^\W\d]", name[0]):
        name = "_" + name
    return name


def write_mef(model: Model, path) -> None:
    """Write the fault-tree part of a Model as an Open-PSA MEF file.

    Gates keep their kinds; an INHIBIT gate is written as an AND of its input
    and condition, an OR gate's unlisted causes as an extra basic event under
    it, and a basic event with a rate and an exposure as an exponential law.
    Checks and symptoms have no place in an MEF fault tree and are left out
    (a comment in the file says so), as are costs, repairs, the verification
    and the escalation (MEF has no element for them). Extra
    ``troubleshoot-*`` attributes let :func:`read_mef` restore the fault tree
    exactly.

    Parameters
    ----------
    model : Model
        Any model.
    path : str or Path
        The file to write (UTF-8).

    References
    ----------
    Open-PSA Model Exchange Format 2.0d (fault-tree definition, expressions).
    """
    names: dict[str, str] = {}
    taken: set[str] = set()

    def allocate(identifier):
        base = _mef_name(identifier)
        name, counter = base, 2
        while name in taken:
            name = f"{base}_{counter}"
            counter += 1
        taken.add(name)
        return name

    for gate in model.gates:
        names[gate.id] = allocate(gate.id)
    for event in model.basic_events:
        names[event.id] = allocate(event.id)
    unlisted_names = {g.id: allocate(f"{g.id}_unlisted") for g in model.gates if g.unlisted is not None}
    tree_name = _mef_name(model.name or "fault-tree")

    def attributes(pairs, indent):
        pairs = [(k, v) for k, v in pairs if v is not None]
        if not pairs:
            return []
        inner = [f'{indent}  <attribute name={quoteattr(k)} value={quoteattr(str(v))}/>' for k, v in pairs]
        return [f"{indent}<attributes>", *inner, f"{indent}</attributes>"]

    def ref(operand):
        tag = "gate" if operand in model.gate_by_id else "basic-event"
        return f'<{tag} name={quoteattr(names[operand])}/>'

    lines = ['<?xml version="1.0" encoding="UTF-8"?>']
    omitted = len(model.checks) + len(model.symptoms)
    lines.append("<!-- Fault tree of the model " + _comment_text(model.name) + ". Checks and symptoms "
                 "are not part of an MEF fault tree and are not written"
                 + (f" ({len(model.checks)} check(s), {len(model.symptoms)} symptom(s) left out)" if omitted else "")
                 + "; nor are costs, repairs, the verification and the escalation. An INHIBIT gate is written "
                 "as an AND of its input and "
                 "condition; unlisted causes of an OR gate as an extra basic event under it. "
                 "Attributes named troubleshoot-* let the same program read the model back exactly. -->")
    lines.append("<opsa-mef>")
    lines.append(f"  <define-fault-tree name={quoteattr(tree_name)}>")
    if model.name:
        lines.append(f"    <label>{escape(model.name)}</label>")
    top_name = names.get(model.top)
    lines += attributes(
        [(ATTR_TOP, top_name if model.top in model.gate_by_id else None),
         (ATTR_MISSION_TIME, repr(model.mission_time) if model.probability_basis == "mission-time"
          and model.mission_time is not None else None)],
        "    ",
    )
    for gate in model.gates:
        lines.append(f"    <define-gate name={quoteattr(names[gate.id])}>")
        lines.append(f"      <label>{escape(gate.label)}</label>")
        lines += attributes([(ATTR_ID, gate.id if names[gate.id] != gate.id else None),
                             (ATTR_KIND, "inhibit" if gate.kind == "inhibit" else None)], "      ")
        operands = [ref(x) for x in gate.inputs]
        if gate.kind == "inhibit":
            operands.append(ref(gate.condition))
        if gate.unlisted is not None and gate.kind == "or":
            operands.append(f'<basic-event name={quoteattr(unlisted_names[gate.id])}/>')
        if gate.kind == "atleast":
            opening, closing = f'<atleast min="{gate.k}">', "</atleast>"
        elif gate.kind == "not":
            opening, closing = "<not>", "</not>"
        elif gate.kind == "or":
            opening, closing = "<or>", "</or>"
        else:  # and, inhibit
            opening, closing = "<and>", "</and>"
        lines.append(f"      {opening}")
        lines += [f"        {o}" for o in operands]
        lines.append(f"      {closing}")
        lines.append("    </define-gate>")
    if model.top in model.event_by_id:
        # A trivial tree (the top is a basic event): MEF needs a gate above it.
        lines.append(f"    <define-gate name={quoteattr(allocate(model.top + '_top'))}>")
        lines.append(f"      {ref(model.top)}")
        lines.append("    </define-gate>")
    lines.append("  </define-fault-tree>")
    lines.append("  <model-data>")
    for event in model.basic_events:
        lines.append(f"    <define-basic-event name={quoteattr(names[event.id])}>")
        lines.append(f"      <label>{escape(event.label)}</label>")
        lines += attributes([(ATTR_ID, event.id if names[event.id] != event.id else None)], "      ")
        lines.append(f"      {_law(event, model)}")
        lines.append("    </define-basic-event>")
    for gate in model.gates:
        if gate.id in unlisted_names:
            lines.append(f"    <define-basic-event name={quoteattr(unlisted_names[gate.id])}>")
            lines.append(f"      <label>{escape(model.label_of(gate.id + DERIVED + 'unlisted'))}</label>")
            lines += attributes([(ATTR_UNLISTED_OF, names[gate.id])], "      ")
            lines.append(f'      <float value="{gate.unlisted!r}"/>')
            lines.append("    </define-basic-event>")
    lines.append("  </model-data>")
    lines.append("</opsa-mef>")
    from troubleshoot.files import write_output

    write_output(path, ("\n".join(lines) + "\n").encode("utf-8"), "MEF file")


def _law(event: BasicEvent, model: Model) -> str:
    """MEF expression of a basic event: an exponential law when it has a rate and exposure."""
    exposure = event.exposure
    if exposure is None and model.probability_basis == "mission-time":
        exposure = model.mission_time
    if event.rate is None or exposure is None:
        return f'<float value="{event.probability!r}"/>'
    if model.probability_basis == "mission-time" and exposure == model.mission_time:
        time = "<system-mission-time/>"
    else:
        time = f'<float value="{exposure!r}"/>'
    return f'<exponential><float value="{event.rate!r}"/>{time}</exponential>'


def _comment_text(text: str) -> str:
    return "'" + (text or "").replace("--", "- -").rstrip("-") + "'"
