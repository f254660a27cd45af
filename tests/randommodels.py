"""Random small models for property tests of the engine (every gate type,
repeated events, unlisted causes, checks with several causes)."""

from __future__ import annotations

import random

from troubleshoot.engine.inference import Finding
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, Repair


def random_model(seed: int, n_events: int = 6, n_gates: int = 5, n_checks: int = 4,
                 tiny: bool = False, max_outcomes: int = 2) -> Model:
    """A random valid model; gates only read earlier gates, so it is acyclic.

    With ``max_outcomes`` above 2 each check has 2..max_outcomes outcomes
    (format 1.1: a distribution over the abnormal outcomes per cause and for
    the false alarm); at 2 the draws, and so the models, are those of before.
    """
    rng = random.Random(seed)
    events = []
    for i in range(n_events):
        p = rng.choice([1e-6, 1e-3, 0.01, 0.05, 0.2, 0.5]) if tiny else rng.uniform(0.02, 0.6)
        events.append(BasicEvent(f"e{i}", f"event {i}", p, repair=Repair(f"replace {i}", rng.randint(1, 30))))
    gates: list[Gate] = []
    for j in range(n_gates):
        pool = [e.id for e in events] + [g.id for g in gates]
        kind = rng.choice(["and", "or", "or", "atleast", "not", "inhibit"])
        if kind == "not":
            inputs = (rng.choice(pool),)
            gates.append(Gate(f"g{j}", f"gate {j}", "not", inputs))
            continue
        if kind == "inhibit":
            a, b = rng.sample(pool, 2)
            gates.append(Gate(f"g{j}", f"gate {j}", "inhibit", (a,), condition=b))
            continue
        width = rng.randint(2, min(5, len(pool)))
        inputs = tuple(rng.sample(pool, width))
        k = rng.randint(1, width) if kind == "atleast" else None
        unlisted = rng.choice([None, None, 0.05]) if kind == "or" else None
        gates.append(Gate(f"g{j}", f"gate {j}", kind, inputs, k=k, unlisted=unlisted))
    # The top reads everything no gate reads, so every event is reachable;
    # with a single such input it also reads the first event.
    read = {x for g in gates for x in g.operands}
    loose = [x for x in [e.id for e in events] + [g.id for g in gates] if x not in read]
    if len(loose) > 1:
        top = Gate("top", "the unit fails", rng.choice(["or", "and"]), tuple(loose))
    else:
        top = Gate("top", "the unit fails", "or", tuple(dict.fromkeys(loose + [events[0].id])))
    gates.append(top)
    targets = [e.id for e in events] + [g.id for g in gates]
    checks = []
    for c in range(n_checks):
        if max_outcomes > 2:
            checks.append(_graded_check(rng, c, targets, rng.randint(2, max_outcomes)))
            continue
        causes = tuple(Cause(t, rng.choice([1.0, 0.9, 0.6])) for t in rng.sample(targets, rng.randint(1, 3)))
        checks.append(Check(f"c{c}", f"check {c}", rng.randint(1, 20), ("normal", "abnormal"), causes,
                            false_alarm=rng.choice([0.0, 0.01, 0.1])))
    return Model(name=f"random{seed}", top="top", gates=tuple(gates), basic_events=tuple(events),
                 checks=tuple(checks))


def _split(rng: random.Random, abnormal: tuple[str, ...], total: float) -> tuple[tuple[str, float], ...]:
    """``total`` spread over a random non-empty subset of the abnormal outcomes.

    The pieces are multiples of 1/64 of ``total`` and the last is what is
    left, so a total of 1 is met exactly: P(normal) is then exactly 0, not
    a rounding residue of 1e-16 that no two summation orders agree on.
    """
    names = rng.sample(abnormal, rng.randint(1, len(abnormal)))
    cuts = sorted(rng.randint(1, 63) for _ in names[1:])
    pieces = [b - a for a, b in zip([0] + cuts, cuts + [64])]
    return tuple((name, total * piece / 64) for name, piece in zip(names, pieces))


def _graded_check(rng: random.Random, c: int, targets: list[str], k: int) -> Check:
    outcomes = ("normal",) + tuple(f"level {j}" for j in range(1, k))
    causes = tuple(Cause(t, shows=_split(rng, outcomes[1:], rng.choice([1.0, 0.9, 0.6])))
                   for t in rng.sample(targets, rng.randint(1, 3)))
    leak = _split(rng, outcomes[1:], rng.choice([0.01, 0.1])) if rng.random() < 0.7 else ()
    return Check(f"c{c}", f"check {c}", rng.randint(1, 20), outcomes, causes, leak=leak)


def random_findings(model: Model, rng: random.Random, repairs: tuple[str, ...]) -> list[Finding]:
    """The complaint, then two random check outcomes per epoch and, after each repair, the unit's verification."""
    findings = [Finding(model.top, 1, 0)]
    for epoch in range(len(repairs) + 1):
        for check in rng.sample(list(model.checks), min(2, len(model.checks))):
            findings.append(Finding(check.id, rng.randrange(len(check.outcomes)), epoch))
        if epoch:
            findings.append(Finding(model.top, rng.randint(0, 1), epoch))
    return findings
