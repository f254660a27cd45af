"""How to choose the next check: the tool's rule and the baselines it is measured against.

A strategy looks at a :class:`~troubleshoot.session.SessionView` (the
findings, the ranking of the remaining checks, the suspects and the session's
status) and answers with a check id, or ``None`` for "stop checking and
repair in the session's order". Every strategy except ``likeliest`` and
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
from troubleshoot.session import AMBIGUITY, DIAGNOSING, SessionView

#: Every strategy name, in the order reports list them.
STRATEGY_NAMES = ("info-per-cost", "info-per-cost-bits", "info", "cheapest", "likeliest", "random", "optimal")


class Strategy(Protocol):
    """What the simulator asks of a strategy."""

    name: str

    def choices(self, view: SessionView) -> list[tuple[float, str | None]]:
        """Every action the strategy may take here, with its probability (check id or None = repair)."""
        ...

    def choose(self, view: SessionView, rng: np.random.Generator) -> str | None:
        """The action taken here; ``rng`` is the case's own generator (only ``random`` draws from it)."""
        ...


def findings_key(view: SessionView) -> frozenset:
    """The observations made before any repair, as a set of (check id, outcome index).

    The complaint is left out (every session starts with it). The posterior
    depends on the set of findings, not on their order, so this is the state
    a policy is a function of.
    """
    return frozenset((o.finding.target, o.finding.outcome) for o in view.record.observations
                     if o.finding.epoch == 0 and o.finding.target in view.model.check_by_id)


def _worth_doing(view: SessionView):
    return view.ranking.worth_doing(view.settings.min_bits)


class _Deterministic:
    name = ""

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
        if view.status != DIAGNOSING or view.recommended is None:
            return None
        return view.recommended.check


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


class PolicyStrategy(_Deterministic):
    """A policy given as a table: findings key -> check id or None (see :func:`findings_key`).

    A state the table does not hold (it had probability zero when the table
    was computed) is answered with ``None``: repair.
    """

    def __init__(self, name: str, policy: dict):
        self.name = name
        self.policy = policy

    def pick(self, view):
        if view.record.epoch > 0:  # the policy is over findings made before any repair
            return None
        return self.policy.get(findings_key(view))


def make_strategy(name: str, optimal_policy: dict | None = None) -> Strategy:
    """The strategy called ``name``; ``optimal`` needs the policy table of :func:`troubleshoot.study.optimal.solve`."""
    simple: dict[str, Callable[[], Strategy]] = {
        "info-per-cost": InfoPerCost, "info-per-cost-bits": InfoPerCostBitsOnly,
        "info": MostInformative, "cheapest": Cheapest,
        "likeliest": Likeliest, "random": RandomCheck,
    }
    if name in simple:
        return simple[name]()
    if name == "optimal":
        if optimal_policy is None:
            raise TroubleshootError("the optimal strategy needs its policy computed first")
        return PolicyStrategy("optimal", optimal_policy)
    raise TroubleshootError(f"unknown strategy {name!r}; choose from {', '.join(STRATEGY_NAMES)}")
