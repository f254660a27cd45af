"""Hypothesis strategies for random valid models, shared by the test suite.

``models()`` draws small valid :class:`~troubleshoot.model.Model` objects:
every gate kind (AND, OR, at-least-k, NOT, INHIBIT), events and gates feeding
several gates (repeated events), OR gates with unlisted causes, checks with
several causes and two to four outcomes (format 1.0 and 1.1 forms), symptoms,
repairs (some verified by a check), an escalation (format 1.1) or none, rates with
exposure times, and text that needs escaping in XML. Every event and gate
lies under the top event, so a drawn model has no warnings either.
"""

from __future__ import annotations

from hypothesis import strategies as st

from troubleshoot.model import (
    GATE_KINDS,
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

# Letters, digits, punctuation (XML's & < > " ' included), symbols and spaces;
# no control characters (XML cannot carry them) and no line breaks.
_CHARS = st.characters(categories=("L", "N", "P", "S", "Zs"), exclude_characters="\r\n\t\x85\u2028\u2029")


def one_line(min_size: int = 1, max_size: int = 20) -> st.SearchStrategy[str]:
    """A line of text without surrounding white space (the loader strips it)."""
    return st.text(_CHARS, min_size=min_size, max_size=max_size).map(str.strip).filter(
        lambda s: len(s) >= min_size
    )


def paragraph() -> st.SearchStrategy[str]:
    """Empty, one line, or a few lines (instructions, descriptions)."""
    return st.one_of(st.just(""), st.lists(one_line(), min_size=1, max_size=3).map("\n".join))


probabilities = st.floats(min_value=0.0, max_value=1.0)
costs = st.floats(min_value=0.0, max_value=1e4)
# An id part after the index: starts with a separator so "e1" + "0" never reads as "e10".
_suffix = st.from_regex(r"([._\-][A-Za-z0-9é]{0,3})?", fullmatch=True)


def _id(draw, prefix: str, index: int) -> str:
    return f"{prefix}{index}{draw(_suffix)}"


@st.composite
def outcome_pairs(draw) -> tuple[str, str]:
    normal = draw(one_line(max_size=12))
    abnormal = draw(one_line(max_size=12).filter(lambda s: s != normal))
    return (normal, abnormal)


@st.composite
def outcome_lists(draw, max_outcomes: int = 4) -> tuple[str, ...]:
    """K = 2..max_outcomes different names, the normal one first (format 1.1)."""
    return tuple(draw(st.lists(one_line(max_size=12), min_size=2, max_size=max_outcomes, unique=True)))


@st.composite
def distributions(draw, abnormal: tuple[str, ...]) -> tuple[tuple[str, float], ...]:
    """(abnormal outcome, probability) pairs, each outcome at most once, summing to at most 1."""
    names = draw(st.lists(st.sampled_from(abnormal), min_size=1, max_size=len(abnormal), unique=True))
    ps = [draw(probabilities) for _ in names]
    total = sum(ps)
    if total > 1.0:
        ps = [p / total * (1.0 - 1e-9) for p in ps]
    return tuple(zip(names, ps))


@st.composite
def models(draw, max_events: int = 6, max_gates: int = 5, max_checks: int = 4, max_symptoms: int = 2) -> Model:
    """A random valid Model (see the module docstring for what it covers)."""
    n_checks = draw(st.integers(0, max_checks))
    n_symptoms = draw(st.integers(0, max_symptoms))
    check_ids = [_id(draw, "c", i) for i in range(n_checks)]
    symptom_ids = [_id(draw, "s", i) for i in range(n_symptoms)]

    events = []
    for i in range(draw(st.integers(1, max_events))):
        rate = exposure = None
        if draw(st.booleans()):
            rate = draw(st.floats(min_value=0.0, max_value=1e-2))
            exposure = draw(st.floats(min_value=1e-3, max_value=1e5))
            probability = exponential_probability(rate, exposure)
        else:
            probability = draw(probabilities)
        repair = None
        if draw(st.booleans()):
            verify = draw(st.none() | st.sampled_from(check_ids)) if check_ids else None
            repair = Repair(label=draw(one_line()), cost=draw(costs), verify=verify)
        events.append(
            BasicEvent(
                id=_id(draw, "e", i),
                label=draw(one_line()),
                probability=probability,
                description=draw(paragraph()),
                rate=rate,
                exposure=exposure,
                repair=repair,
            )
        )

    nodes = [e.id for e in events]
    gates: list[Gate] = []
    n_gates = draw(st.integers(0, max_gates))
    for j in range(n_gates + 1):
        gid = _id(draw, "g", j)
        is_top = j == n_gates
        if is_top:
            # The top gate collects every node nothing else reads, so all are reachable.
            read = {ref for g in gates for ref in g.operands}
            inputs = [n for n in nodes if n not in read]
            kind = draw(st.sampled_from(("or", "and", "atleast")))
        else:
            kind = draw(st.sampled_from(GATE_KINDS))
            if kind == "inhibit" and len(nodes) < 2:
                kind = "and"
            if kind == "not":
                inputs = [draw(st.sampled_from(nodes))]
            elif kind == "inhibit":
                inputs = draw(st.lists(st.sampled_from(nodes), min_size=2, max_size=2, unique=True))
            else:
                inputs = draw(st.lists(st.sampled_from(nodes), min_size=1, max_size=min(4, len(nodes)), unique=True))
        condition = None
        if kind == "inhibit":
            inputs, condition = inputs[:1], inputs[1]
        gates.append(
            Gate(
                id=gid,
                label=draw(one_line()),
                kind=kind,
                inputs=tuple(inputs),
                k=draw(st.integers(1, len(inputs))) if kind == "atleast" else None,
                condition=condition,
                unlisted=draw(st.none() | probabilities) if kind == "or" else None,
                description=draw(paragraph()),
            )
        )
        nodes.append(gid)

    def check(cid: str, cost: float) -> Check:
        targets = draw(st.lists(st.sampled_from(nodes), min_size=1, max_size=3, unique=True))
        if draw(st.booleans()):  # format 1.0: two outcomes, one number per cause
            outcomes = draw(outcome_pairs())
            causes = tuple(Cause(t, draw(probabilities)) for t in targets)
            false_alarm, leak = draw(st.floats(min_value=0.0, max_value=0.5)), ()
        else:  # format 1.1: K outcomes, a distribution per cause and for the false alarm
            outcomes = draw(outcome_lists())
            causes = tuple(Cause(t, shows=draw(distributions(outcomes[1:]))) for t in targets)
            false_alarm, leak = 0.0, draw(st.just(()) | distributions(outcomes[1:]))
        return Check(
            id=cid,
            label=draw(one_line()),
            cost=cost,
            outcomes=outcomes,
            causes=causes,
            false_alarm=false_alarm,
            leak=leak,
            instructions=draw(paragraph()),
            caution=draw(st.none() | one_line()),
        )

    checks = tuple(check(cid, draw(costs)) for cid in check_ids)
    symptoms = tuple(check(sid, 0.0) for sid in symptom_ids)
    mission = draw(st.booleans())
    verification = draw(
        st.none()
        | st.builds(Verification, label=one_line(), cost=costs, instructions=paragraph(), outcomes=outcome_pairs())
    )
    return Model(
        name=draw(one_line()),
        top=gates[-1].id,
        gates=tuple(gates),
        basic_events=tuple(events),
        checks=checks,
        symptoms=symptoms,
        equipment=draw(st.just("") | one_line()),
        author=draw(st.just("") | one_line()),
        description=draw(paragraph()),
        cost_unit=draw(st.sampled_from(("min", "EUR", "h")) | one_line(max_size=6)),
        probability_basis="mission-time" if mission else "per-demand",
        mission_time=draw(st.floats(min_value=1.0, max_value=1e5)) if mission else None,
        top_label=draw(st.just("") | one_line()),
        verification=verification,
        escalation=draw(st.none() | st.builds(Escalation, label=one_line(), cost=costs, instructions=paragraph())),
        isolation_threshold=draw(st.floats(min_value=0.0, max_value=1.0, exclude_min=True)),
    )
