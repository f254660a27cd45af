"""What the checks of a model can see: warnings for the model's author.

A diagnosis can only tell faults apart that some check or symptom responds
to differently. This module reads the model (no inference) and finds what
will make the technician's sessions end badly whatever they do:

- a basic event no check or symptom responds to (nothing can ever confirm or
  rule it out: it is only ever found by repairing it);
- a group of basic events every check and symptom responds to the same way
  (the same causes reached, the same chance of an abnormal reading when that
  event alone has failed): a diagnosis can never separate them and will end
  with them as an ambiguity group;
- a false alarm of 0 on a check with several causes: one abnormal reading is
  then taken as proof that one of the causes has occurred, although a real
  instrument or a real technician errs now and then;
- a repair whose verifying check does not respond to the repaired event (the
  verification says nothing about that repair);
- a model with no checks (only the symptoms and the repair order are left).

Each warning is a :class:`~troubleshoot.errors.Problem` of severity
``warning`` with the model file and the line of the element concerned.

Notes
-----
"Responds to" is read from the structure: a check responds to a basic event
when the event is in the fault tree below one of the check's causes. Two
events are told apart by no check when, for every check and symptom, they
reach the same causes and give the same probability of an abnormal reading
when each alone has failed (the gates evaluated on single-fault states as in
NUREG-0492, the check's noisy-OR with its false alarm).

References
----------
W. E. Vesely et al., *Fault Tree Handbook*, NUREG-0492, 1981 (gate logic).
J. Pearl, *Probabilistic Reasoning in Intelligent Systems*, 1988 (noisy-OR).
"""

from __future__ import annotations

import numpy as np

from troubleshoot.errors import Problem
from troubleshoot.model import Model, unlisted_id
from troubleshoot.model.gates import gate_values

#: Probabilities of an abnormal reading equal to this many decimals count as the same response.
SAME_RESPONSE_DIGITS = 12


def support(model: Model) -> dict[str, frozenset[str]]:
    """Every gate and basic event id -> the basic events below it (itself, for an event).

    Walks the gates without recursion (a deep tree is no problem).
    """
    out: dict[str, frozenset[str]] = {e.id: frozenset((e.id,)) for e in model.basic_events}
    for g in model.gates:
        if g.unlisted is not None:
            out.setdefault(unlisted_id(g.id), frozenset())
    pending = [g.id for g in model.gates]
    while pending:
        gid = pending[-1]
        if gid in out:
            pending.pop()
            continue
        gate = model.gate_by_id[gid]
        inputs = list(gate.inputs) + ([gate.condition] if gate.condition else [])
        missing = [x for x in inputs if x not in out and x in model.gate_by_id]
        if missing:
            pending.extend(missing)
            continue
        below: set[str] = set()
        for x in inputs:
            below |= out.get(x, frozenset())
        out[gid] = frozenset(below)
        pending.pop()
    return out


def single_fault_response(model: Model) -> tuple[list[str], np.ndarray]:
    """P(abnormal reading) of every check and symptom when exactly one basic event has failed.

    Returns
    -------
    events : list of str
        Basic event ids, in model order (row ``i`` of the array); the last row
        of the array is the state with nothing failed.
    response : ndarray, shape (events + 1, checks and symptoms)
        Columns in the order ``model.checks + model.symptoms``.
    """
    events = [e.id for e in model.basic_events]
    n = len(events)
    roots = {}
    for i, h in enumerate(model.hypotheses):
        row = np.zeros(n + 1, dtype=bool)
        if i < n:
            row[i] = True
        roots[h] = row
    value = gate_values(model, roots)
    checks = model.checks + model.symptoms
    response = np.empty((n + 1, len(checks)))
    for j, check in enumerate(checks):
        p_normal = np.full(n + 1, 1.0 - check.false_alarm)
        for cause in check.causes:
            p_normal = p_normal * np.where(value[cause.target], 1.0 - cause.detection, 1.0)
        response[:, j] = 1.0 - p_normal
    return events, response


def _where(model: Model) -> str:
    return model.source or model.name


def observability_warnings(model: Model) -> list[Problem]:
    """Warnings for the model's author: what no check can see or tell apart, and risky figures.

    Parameters
    ----------
    model : Model

    Returns
    -------
    list of Problem
        Severity ``warning``, with the model's file and the element's line,
        in the order: no checks, events nothing responds to, groups no check
        tells apart, false alarms of 0, verifications that do not respond.

    Examples
    --------
    >>> from troubleshoot.model.demos import demo_path
    >>> from troubleshoot.model.xmlfile import load_model
    >>> [w.message for w in observability_warnings(load_model(demo_path("rooftop")))]  # doctest: +SKIP
    """
    path = _where(model)
    out: list[Problem] = []
    checks = model.checks + model.symptoms
    top_line = model.gate_by_id[model.top].line if model.top in model.gate_by_id else None
    if not model.checks:
        out.append(Problem(path, top_line, "the model has no checks: a diagnosis can use only the symptoms and "
                           "then repair by probability; add <check> elements for the tests a technician can "
                           "make", "warning"))
    below = support(model)
    seen_by: dict[str, list[tuple[str, str]]] = {e.id: [] for e in model.basic_events}
    for check in checks:
        for cause in check.causes:
            for e in below.get(cause.target, frozenset()):
                if e in seen_by:
                    seen_by[e].append((check.id, cause.target))
    for event in model.basic_events if checks else ():  # with nothing to observe, the warning above says it
        if not seen_by[event.id]:
            out.append(Problem(path, event.line, f"basic event '{event.id}' ({event.label}): no check or "
                               "symptom responds to it, so a diagnosis can never confirm or rule it out; add "
                               "a check with it (or a gate above it) as a cause", "warning"))
    if model.basic_events and checks:
        events, response = single_fault_response(model)
        groups: dict[tuple, list[str]] = {}
        for i, e in enumerate(events):
            if not seen_by[e]:
                continue
            key = (frozenset(seen_by[e]), tuple(np.round(response[i], SAME_RESPONSE_DIGITS)))
            groups.setdefault(key, []).append(e)
        for members in groups.values():
            if len(members) < 2:
                continue
            first = model.event_by_id[members[0]]
            names = ", ".join(f"'{m}'" for m in members)
            out.append(Problem(path, first.line, f"basic events {names}: every check and symptom responds to "
                               "them the same way, so no check can tell them apart and a diagnosis will end "
                               "with them as an ambiguity group; add a check that reads one of them and not "
                               "the others", "warning"))
    for check in checks:
        if len(check.causes) > 1 and check.false_alarm == 0.0:
            out.append(Problem(path, check.line, f"check '{check.id}' ({check.label}) has {len(check.causes)} "
                               "causes and a false alarm of 0: one abnormal reading will be taken as proof that "
                               "one of them has occurred; give the chance of an abnormal reading with none of "
                               "them (false-alarm=\"0.01\", say)", "warning"))
    for event in model.basic_events:
        repair = event.repair
        if repair is None or repair.verify is None or repair.verify not in model.check_by_id:
            continue
        if not any(c == repair.verify for c, _ in seen_by[event.id]):
            verify = model.check_by_id[repair.verify]
            out.append(Problem(path, event.line, f"the repair of '{event.id}' is verified by check "
                               f"'{verify.id}' ({verify.label}), which does not respond to '{event.id}': the "
                               "verification says nothing about that repair; name a check that has it (or a "
                               "gate above it) as a cause", "warning"))
    return out
