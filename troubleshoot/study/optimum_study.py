"""How far the tool's policy is from the exact optimum, on generated small models.

A seeded study: :func:`small_model` draws diagnostic models of 5 to 8 basic
events with unlisted causes, a few noisy checks, repairs, a verification of
the unit and a priced escalation; for each, the exact optimal policy
(:func:`troubleshoot.study.optimal.solve`) and the exact expected cost of a
strategy on the same protocol (:func:`troubleshoot.study.optimal.expected_cost`)
are computed, and their ratio reported. No sampling: every figure is exact,
so the same seed gives the same figures on any machine.

The figures of the models are illustrative.
"""

from __future__ import annotations

import random
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace

from troubleshoot.model import BasicEvent, Cause, Check, Escalation, Gate, Model, Repair, Verification

#: The number of basic events of a generated model is drawn from this range (inclusive).
MIN_EVENTS, MAX_EVENTS = 5, 8
#: States the exact optimum may visit per model before the model is skipped (and counted).
STUDY_MAX_STATES = 60_000


def small_model(seed: int, basic_events: int | None = None) -> Model:
    """A small diagnostic model with unlisted causes, drawn from ``seed``.

    Parameters
    ----------
    seed : int
    basic_events : int, optional
        5 to 8; drawn from the seed when not given.

    Returns
    -------
    Model
        Two subsystems (OR gates, now and then an AND or a 2-of-n vote)
        under an OR top event; every OR subsystem carries an unlisted cause
        (the first is always an OR); a check on each subsystem (detection
        0.9 to 0.99, false alarm up to 2 %); repairs
        of 5 to 90 min; the unit verified in 5 min; escalation priced at 2
        to 4 times the dearest repair with its verification (a specialist's
        visit costs at least as much as any repair).
    """
    rng = random.Random(f"small-model-{seed}")
    n = rng.randint(MIN_EVENTS, MAX_EVENTS) if basic_events is None else basic_events
    if not MIN_EVENTS <= n <= MAX_EVENTS:
        raise ValueError(f"a small model has {MIN_EVENTS} to {MAX_EVENTS} basic events, not {n}")
    events = [BasicEvent(f"e{i}", f"component {i} failed", rng.choice([0.002, 0.005, 0.01, 0.02, 0.05]),
                         repair=Repair(f"replace component {i}", float(rng.choice([5, 10, 20, 30, 60, 90]))))
              for i in range(n)]
    ids = [e.id for e in events]
    rng.shuffle(ids)
    cut = rng.randint(2, n - 2)
    groups = [ids[:cut], ids[cut:]]
    gates = []
    for j, group in enumerate(groups):
        kind = rng.choices(["or", "and", "atleast"], [0.7, 0.15, 0.15])[0] if len(group) >= 3 else "or"
        if j == 0:
            kind = "or"  # at least one subsystem with an unlisted cause
        unlisted = rng.choice([0.005, 0.01, 0.02]) if kind == "or" else None
        gates.append(Gate(f"g{j}", f"subsystem {j} lost", kind, tuple(sorted(group)),
                          k=2 if kind == "atleast" else None, unlisted=unlisted))
    top = Gate("top", "the unit fails", "or", tuple(g.id for g in gates))
    checks = []
    for gate in gates:
        causes = [Cause(gate.id, rng.choice([0.9, 0.95, 0.99]))]
        checks.append(Check(f"t_{gate.id}", f"test subsystem {gate.id[1:]}", float(rng.choice([2, 5, 10, 20])),
                            ("normal", "abnormal"), tuple(causes), false_alarm=rng.choice([0.0, 0.01, 0.02])))
    verification = Verification("run the unit and confirm it works", 5.0)
    dearest = max(e.repair.cost for e in events if e.repair is not None) + verification.cost
    escalation = Escalation("call the specialist", float(rng.choice([2, 3, 4]) * dearest))
    return Model(name=f"small-{n}-seed{seed}", top="top", gates=tuple(gates) + (top,), basic_events=tuple(events),
                 checks=tuple(checks), equipment="small generated unit (illustrative)", cost_unit="min",
                 description="Generated for the study of the policy against the exact optimum; figures illustrative.",
                 top_label="the unit fails", verification=verification, escalation=escalation)


def part_check_model(seed: int, basic_events: int | None = None) -> Model:
    """:func:`small_model` with one more check, on a single part: "inspect component i".

    A technician can often look at one part (a belt, a fuse) besides testing
    a whole subsystem. When that part sits under an AND gate or a vote, or
    its subsystem has been tested normal, it may be failed without causing
    the complaint: what the check tells about it is worth nothing to the
    repair. The family measures how the policy weighs such a check (the
    part is drawn from the seed; detection 0.9 or 0.95, no false alarm or
    2 %, 5 to 20 min; figures illustrative).
    """
    model = small_model(seed, basic_events)
    rng = random.Random(f"part-check-{seed}")
    part = rng.choice([e.id for e in model.basic_events])
    check = Check(f"t_{part}", f"inspect component {part[1:]}", float(rng.choice([5, 10, 20])),
                  ("normal", "abnormal"), (Cause(part, rng.choice([0.9, 0.95])),),
                  false_alarm=rng.choice([0.0, 0.02]))
    return replace(model, checks=model.checks + (check,))


#: The families of generated models: name -> generator (seed -> Model).
FAMILIES: dict[str, Callable[[int], Model]] = {"subsystem": small_model, "part": part_check_model}


@dataclass(frozen=True)
class StudyRow:
    """One model of the study.

    Attributes
    ----------
    model : str
    basic_events, checks, unlisted : int
        Basic events, checks and unlisted causes of the model.
    optimal : float or None
        The exact optimal expected cost (min); None when skipped.
    costs : tuple of (strategy, float)
        Each strategy's exact expected cost on the same protocol (min).
    states : int
        States the optimal recursion visited.
    skipped : str or None
        Why the model was skipped (too many states), else None.
    """

    model: str
    basic_events: int
    checks: int
    unlisted: int
    optimal: float | None
    costs: tuple[tuple[str, float], ...]
    states: int
    skipped: str | None = None

    def ratio(self, strategy: str) -> float | None:
        """The strategy's exact expected cost over the optimum."""
        cost = dict(self.costs).get(strategy)
        if cost is None or self.optimal is None or self.optimal <= 0:
            return None
        return cost / self.optimal


def study_seeds(seed: int):
    """The stream of model seeds of a study drawn from ``seed`` (endless; same seed, same stream)."""
    rng = random.Random(f"optimum-study-{seed}")
    while True:
        yield rng.randrange(1_000_000)


def optimum_study(models: int, seed: int, strategies: tuple[str, ...] = ("info-per-cost",),
                  max_states: int = STUDY_MAX_STATES, max_tries: int | None = None,
                  progress: Callable[[int, int], None] | None = None,
                  family: str = "subsystem") -> Iterator[StudyRow]:
    """Generated models with their optimum and every strategy's exact expected cost, in the order drawn.

    Parameters
    ----------
    models : int
        How many models with a computed optimum to study.
    seed : int
        Same seed, same models, same figures.
    strategies : tuple of str
        Names of :mod:`troubleshoot.study.strategies` (not ``optimal``).
    max_states : int
        A model whose optimum needs more states is skipped: yielded with
        ``skipped`` set (reported, not hidden), and another model is drawn.
    max_tries : int, optional
        Stop after drawing this many models (default 10 x ``models``: the
        three checks of the ``part`` family leave about three of every four
        models of seed 1 too large).
    progress : callable, optional
        Called with (models solved so far, ``models``) after each model with a computed optimum.
    family : str
        Which generator of :data:`FAMILIES` draws the models (the same seeds for every family).

    Yields
    ------
    StudyRow
    """
    from troubleshoot.engine.inference import Engine
    from troubleshoot.session import settings_for
    from troubleshoot.study.optimal import OptimalTooLarge, expected_cost, solve
    from troubleshoot.study.strategies import make_strategy, protocol_actor

    generate = FAMILIES[family]
    max_tries = 10 * models if max_tries is None else max_tries
    solved = 0
    for tries, model_seed in enumerate(study_seeds(seed)):
        if solved >= models or tries >= max_tries:
            return
        model = generate(model_seed)
        shape = (len(model.basic_events), len(model.checks), sum(1 for g in model.gates if g.unlisted))
        try:
            solution = solve(model, max_states=max_states)
        except OptimalTooLarge as exc:
            yield StudyRow(model.name, *shape, None, (), 0, str(exc))
            continue
        settings = settings_for(model)
        engine = Engine(model)
        costs = tuple((name, expected_cost(model, protocol_actor(model, make_strategy(name), settings, engine)))
                      for name in strategies)
        solved += 1
        yield StudyRow(model.name, *shape, solution.expected_cost, costs, solution.states)
        if progress is not None:
            progress(solved, models)
