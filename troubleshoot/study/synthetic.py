"""Seeded synthetic fault trees, for the benchmark and for simulation studies.

The trees imitate industrial ones: gates of two to five inputs, about one
input in ten a repeated event shared with a neighbouring subsystem (a common
power supply or controller), a voting gate now and then, unlisted causes on
some OR gates, a check on most gates and on some basic events. Probabilities
and costs are illustrative. Same seed, same model.
"""

from __future__ import annotations

import random

from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, Repair, Verification


def synthetic_model(basic_events: int, seed: int = 0, repeated_rate: float = 0.1,
                    voting_rate: float = 0.05, check_rate: float = 0.8,
                    three_outcome_share: float = 0.0) -> Model:
    """A random fault tree with about ``basic_events`` basic events.

    Parameters
    ----------
    basic_events : int
        Number of basic events (at least 4).
    seed : int
        Seed of the random generator.
    repeated_rate : float
        Share of gate inputs that reuse an event already placed nearby.
    voting_rate : float
        Share of gates that are 2-out-of-3 (or k-of-n) voting gates.
    check_rate : float
        Share of gates with a check on them; a tenth as many basic events get one too.
    three_outcome_share : float
        Share of the checks read as low / normal / high instead of normal /
        abnormal (format 1.1): each cause's detection and the false alarm are
        split between "low" and "high". The tree, the other checks and every
        total detection stay those of ``three_outcome_share=0`` with the same
        seed, so the two models compare the cost of the outcomes alone.

    Returns
    -------
    Model
    """
    if basic_events < 4:
        raise ValueError("a synthetic tree needs at least 4 basic events")
    rng = random.Random(seed)
    events = [
        BasicEvent(f"be{i}", f"component {i} failed", rng.choice([1e-4, 5e-4, 1e-3, 5e-3, 1e-2, 3e-2]),
                   repair=Repair(f"replace component {i}", float(rng.choice([10, 15, 30, 45, 60, 120]))))
        for i in range(basic_events)
    ]
    gates: list[Gate] = []
    frontier: list[str] = []  # ids not yet read by any gate, oldest first
    unused = [e.id for e in events]
    placed: list[str] = []  # events already read, for repeated events nearby
    g = 0
    while unused or len(frontier) > 1:
        width = rng.randint(2, 5)
        inputs: list[str] = []
        while len(inputs) < width and (unused or frontier):
            take_gate = frontier and (not unused or rng.random() < 0.45)
            if take_gate:
                inputs.append(frontier.pop(0))
            else:
                ev = unused.pop(0)
                inputs.append(ev)
                placed.append(ev)
        if placed and rng.random() < repeated_rate * len(inputs):
            shared = rng.choice(placed[-40:])
            if shared not in inputs:
                inputs.append(shared)
        if len(inputs) == 1:
            frontier.insert(0, inputs[0])
            if not unused and len(frontier) == 1:
                break
            continue
        r = rng.random()
        if r < voting_rate and len(inputs) >= 3:
            gate = Gate(f"g{g}", f"subsystem {g}: {len(inputs) - 1} of {len(inputs)} lost", "atleast",
                        tuple(inputs), k=len(inputs) - 1)
        elif r < 0.45:
            gate = Gate(f"g{g}", f"subsystem {g} lost (all of)", "and", tuple(inputs))
        else:
            gate = Gate(f"g{g}", f"subsystem {g} lost", "or", tuple(inputs),
                        unlisted=(0.001 if rng.random() < 0.2 else None))
        gates.append(gate)
        frontier.append(gate.id)
        g += 1
    top = frontier[0]
    checks = []
    for gate in gates:
        if rng.random() < check_rate:
            causes = [Cause(gate.id, rng.choice([0.9, 0.95, 0.99]))]
            if rng.random() < 0.3:
                extra = rng.choice(gate.inputs)
                causes.append(Cause(extra, rng.choice([0.5, 0.7])))
            checks.append(Check(f"t_{gate.id}", f"test subsystem {gate.id[1:]}", float(rng.choice([2, 5, 10, 20, 30])),
                                ("normal", "abnormal"), tuple(causes), false_alarm=rng.choice([0.0, 0.01, 0.02])))
    for event in events:
        if rng.random() < check_rate / 10:
            checks.append(Check(f"t_{event.id}", f"inspect component {event.id[2:]}", float(rng.choice([5, 10, 15])),
                                ("normal", "abnormal"), (Cause(event.id, 0.95),), false_alarm=0.01))
    if three_outcome_share > 0:
        checks = _three_outcomes(checks, three_outcome_share, random.Random(f"three-outcomes-{seed}"))
    return Model(
        name=f"synthetic-{basic_events}-seed{seed}", top=top, gates=tuple(gates), basic_events=tuple(events),
        checks=tuple(checks), equipment="synthetic plant (illustrative)", cost_unit="min",
        description="Generated for benchmarking; probabilities and costs are illustrative.",
        top_label=f"subsystem {top[1:]} lost", verification=Verification("run the plant and confirm it works", 10.0),
    )


def _three_outcomes(checks: list[Check], share: float, rng: random.Random) -> list[Check]:
    """Give about ``share`` of the checks the outcomes normal, low, high (its own generator)."""
    out = []
    for check in checks:
        if rng.random() >= share:
            out.append(check)
            continue
        causes = []
        for cause in check.causes:
            low = rng.choice([0.2, 0.5, 0.8])
            causes.append(Cause(cause.target, shows=(("low", cause.detection * low),
                                                     ("high", cause.detection * (1.0 - low)))))
        leak = (("low", check.false_alarm / 2), ("high", check.false_alarm / 2)) if check.false_alarm else ()
        out.append(Check(check.id, check.label, check.cost, ("normal", "low", "high"), tuple(causes), leak=leak))
    return out
