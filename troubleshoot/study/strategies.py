"""How to choose the next check: the tool's rule and the baselines it is measured against.

A strategy looks at a :class:`~troubleshoot.session.SessionView` (the
findings, the ranking of the remaining checks, the suspects and the
policy's decision) and answers with a check id, or ``None`` for "stop
checking and finish": how to finish (repair the next suspect in the repair
order, escalate, or try the unit when a repair's own check read abnormal
but it may work) is the policy's
(:func:`troubleshoot.advice.policy.decide`) for every strategy but
``checklist`` (the repair order to its end, then escalation) and
``optimal`` (its table). Every strategy except ``likeliest`` and
``optimal`` keeps the session's stopping rule: it stops as soon as a suspect
is isolated or the session finds no check worth doing (none gives
``min_bits`` bits, or none of the best few is expected to save more than it
costs); ``info-per-cost-bits`` drops the second half.

=================  ===========================================================
name               next check
=================  ===========================================================
``info-per-cost``  the session's recommendation: most bits per unit of cost
``info-per-cost-bits``  the same order, checking while any check gives
                   ``min_bits`` bits (no comparison with repairing at once)
``info``           most bits, whatever the cost
``cheapest``       cheapest check giving at least ``min_bits`` bits
``likeliest``      none: repair at once in order of P(failed) / repair cost
``random``         a check giving at least ``min_bits`` bits, uniformly at random
``checklist``      the model's checks in the order the model lists them, each
                   done unless already done, then the repair order; no value
                   rule (a technician with a paper procedure)
``optimal``        the least-expected-cost policy (:mod:`troubleshoot.study.optimal`)
=================  ===========================================================

References
----------
J. de Kleer and B. C. Williams, "Diagnosing multiple faults", Artificial
Intelligence 32(1), 1987 (most informative test).
D. Heckerman, J. S. Breese and K. Rommelse, "Decision-theoretic
troubleshooting", Communications of the ACM 38(3), 1995 (information per
cost; repair in order of probability over cost).
J. B. Kadane and H. A. Simon, "Optimal strategies for a class of constrained
sequential problems", Annals of Statistics 5(2), 1977.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Protocol

import numpy as np

from troubleshoot.advice.ties import tie_ranks
from troubleshoot.errors import TroubleshootError
from troubleshoot.advice.policy import Action, Alternative
from troubleshoot.advice.repair import next_repair
from troubleshoot.session import AMBIGUITY, DIAGNOSING, SessionView

#: Every strategy name, in the order reports list them.
STRATEGY_NAMES = ("info-per-cost", "info-per-cost-bits", "info", "cheapest", "likeliest", "random", "checklist",
                  "optimal")


class Strategy(Protocol):
    """What the simulator asks of a strategy."""

    name: str

    def choices(self, view: SessionView) -> list[tuple[float, str | None]]:
        """Every action the strategy may take here, with its probability (check id or None = repair)."""
        ...

    def choose(self, view: SessionView, rng: np.random.Generator) -> str | None:
        """The action taken here; ``rng`` is the case's own generator (only ``random`` draws from it)."""
        ...

    def finish(self, view: SessionView):
        """When no check is named: repair (``action`` ``repair``, ``target``), escalate, or verify the unit in doubt."""
        ...


def _worth_doing(view: SessionView):
    return view.ranking.worth_doing(view.settings.min_bits)


class _Deterministic:
    name = ""

    def finish(self, view: SessionView):
        """How to finish when no check is named: the policy's choice (repair next, or escalate)."""
        return view.finish

    def pick(self, view: SessionView) -> str | None:
        raise NotImplementedError

    def choices(self, view: SessionView) -> list[tuple[float, str | None]]:
        return [(1.0, self.pick(view))]

    def choose(self, view: SessionView, rng: np.random.Generator) -> str | None:
        return self.pick(view)


class InfoPerCost(_Deterministic):
    """The session's own recommendation: most bits per unit of cost, while a check pays for itself."""

    name = "info-per-cost"

    def pick(self, view):
        decision = view.decision
        return decision.target if decision.action == Action.CHECK else None


class InfoPerCostBitsOnly(_Deterministic):
    """The tool's order with the plain stopping rule: check while any check gives ``min_bits`` bits.

    The ablation of the session's value comparison (a check is recommended
    only when it is expected to save more than it costs).
    """

    name = "info-per-cost-bits"

    def pick(self, view):
        if view.status not in (DIAGNOSING, AMBIGUITY):
            return None
        rows = _worth_doing(view)
        return rows[0].check if rows else None


class MostInformative(_Deterministic):
    """The check with the most bits, ignoring its cost (ties: cheaper, then id)."""

    name = "info"

    def pick(self, view):
        rows = _worth_doing(view)
        if view.status != DIAGNOSING or not rows:
            return None
        ranks = tie_ranks([r.bits for r in rows])
        return min(zip(ranks, rows), key=lambda pair: (pair[0], pair[1].cost, pair[1].check))[1].check


class Cheapest(_Deterministic):
    """The cheapest check that still gives at least ``min_bits`` bits (ties: more bits, then id)."""

    name = "cheapest"

    def pick(self, view):
        rows = _worth_doing(view)
        if view.status != DIAGNOSING or not rows:
            return None
        ranks = tie_ranks([r.bits for r in rows])
        return min(zip(ranks, rows), key=lambda pair: (pair[1].cost, pair[0], pair[1].check))[1].check


class Likeliest(_Deterministic):
    """No checks: repair at once in order of P(failed | complaint) / repair cost."""

    name = "likeliest"

    def pick(self, view):
        return None


class RandomCheck:
    """A check giving at least ``min_bits`` bits, drawn uniformly from the case's generator."""

    name = "random"

    def finish(self, view: SessionView):
        return view.finish

    def _rows(self, view):
        if view.status != DIAGNOSING:
            return ()
        return tuple(sorted(r.check for r in _worth_doing(view)))

    def choices(self, view):
        rows = self._rows(view)
        if not rows:
            return [(1.0, None)]
        return [(1.0 / len(rows), c) for c in rows]

    def choose(self, view, rng):
        rows = self._rows(view)
        if not rows:
            return None
        return rows[int(rng.integers(len(rows)))]


class Checklist(_Deterministic):
    """The model's checks in the order it lists them, each done once, then the repair order.

    A paper procedure: no ranking and no value rule. A check already done
    (since the start, whatever the repairs) or skipped is passed over.
    """

    name = "checklist"

    def finish(self, view):
        """The repair order to its end, then escalation: a paper procedure weighs no costs."""
        target = next_repair(view.model, view.suspects, view.settings.group_min_p)
        return Alternative(Action.REPAIR, target, None) if target is not None else Alternative(Action.ESCALATE, None, None)

    def pick(self, view):
        done = {o.finding.target for o in view.record.observations}
        skipped = {c for c, _ in view.record.skipped}
        for check in view.model.checks:
            if check.id not in done and check.id not in skipped:
                return check.id
        return None


class OptimalStrategy:
    """The exact optimal policy (:func:`troubleshoot.study.optimal.solve`), read from its table.

    Checks, repairs and escalation all come from the table: the state of the
    session is turned into the protocol's state and looked up.
    """

    name = "optimal"

    def __init__(self, solution):
        self.solution = solution

    def _action(self, view: SessionView):
        return self.solution.action(protocol_state(view))

    def choices(self, view):
        return [(1.0, self.choose(view, None))]

    def choose(self, view, rng):
        kind, target = self._action(view)
        return target if kind == "check" else None

    def finish(self, view):
        kind, target = self._action(view)
        if kind == "repair":
            return Alternative(Action.REPAIR, target, None)
        if kind == "verify":
            return Alternative(Action.VERIFY, target, None)
        if kind == "check":  # the table wants a check the caller would not do: the policy's finish
            return view.finish
        return Alternative(Action.ESCALATE, None, None)


def protocol_state(view: SessionView):
    """The protocol state (:class:`troubleshoot.study.optimal.State`) of a session's view."""
    from troubleshoot.study.optimal import State

    return State(tuple((o.finding.target, o.finding.outcome, o.finding.epoch, o.kind)
                       for o in view.record.observations), tuple(view.record.repairs))


def protocol_actor(model, strategy: Strategy, settings, engine):
    """A strategy as the exact evaluator sees it: protocol state -> [(probability, action)].

    The state is turned into a session record and its view (one propagation,
    remembered by the engine), and the strategy answers as it does in the
    simulator: a check, or how to finish (repair which, or escalate).
    """
    from troubleshoot.engine.inference import Finding
    from troubleshoot.session.session import Observation, Record

    def act(state):
        record = Record(tuple(Observation(Finding(t, o, e), kind) for t, o, e, kind in state.observations),
                        tuple(state.repairs))
        view = SessionView(model, engine, settings, record, engine.propagate(record.findings, record.repairs))
        out: list[tuple[float, tuple[str, str | None]]] = []
        for p, choice in strategy.choices(view):
            if choice is not None:
                out.append((p, ("check", choice)))
                continue
            finish = strategy.finish(view)
            if finish.action == Action.VERIFY:
                out.append((p, ("verify", model.top)))
            else:
                out.append((p, ("repair", finish.target) if finish.action == Action.REPAIR else ("escalate", None)))
        return out

    return act


def make_strategy(name: str, optimal_policy=None) -> Strategy:
    """The strategy called ``name``; ``optimal`` needs the solution of :func:`troubleshoot.study.optimal.solve`."""
    simple: dict[str, Callable[[], Strategy]] = {"info-per-cost": InfoPerCost, "info-per-cost-bits": InfoPerCostBitsOnly,
              "info": MostInformative, "cheapest": Cheapest,
              "likeliest": Likeliest, "random": RandomCheck, "checklist": Checklist}
    if name in simple:
        return simple[name]()
    if name == "optimal":
        if optimal_policy is None:
            raise TroubleshootError("the optimal strategy needs its policy computed first")
        return OptimalStrategy(optimal_policy)
    raise TroubleshootError(f"unknown strategy {name!r}; choose from {', '.join(STRATEGY_NAMES)}")
