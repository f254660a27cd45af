"""How to choose the next check: the tool's rule and the baselines it is measured against.

A strategy looks at a :class:`~troubleshoot.session.SessionView` (the
findings, the ranking of the remaining checks, the suspects and the session's
status) and answers with a check id, or ``None`` for "stop checking and
repair in the session's order". Every strategy except ``likeliest`` and
``optimal`` keeps the session's stopping rule: it stops as soon as a suspect
is isolated or no check gives at least ``min_bits`` bits.

=================  ===========================================================
name               next check
=================  ===========================================================
``info-per-cost``  the session's recommendation: most bits per unit of cost
``info-per-cost-voi``  the same check, done only when a one-step lookahead says
                   it lowers the expected cost of repair by more than it costs
``info``           most bits, whatever the cost
``cheapest``       cheapest check giving at least ``min_bits`` bits
``likeliest``      none: repair at once in order of P(failed) / repair cost
``random``         a check giving at least ``min_bits`` bits, uniformly at random
``optimal``        the least-expected-cost policy (:mod:`troubleshoot.optimal`)
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

from typing import Protocol

import numpy as np

from troubleshoot.errors import TroubleshootError
from troubleshoot.session import DIAGNOSING, SessionView

#: Every strategy name, in the order reports list them.
STRATEGY_NAMES = ("info-per-cost", "info-per-cost-voi", "info", "cheapest", "likeliest", "random", "optimal")


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
    """The session's own recommendation: the check with the most bits per unit of cost."""

    name = "info-per-cost"

    def pick(self, view):
        if view.status != DIAGNOSING or view.ranking.best is None:
            return None
        return view.ranking.best.check


def expected_repair_cost(view_or_posterior) -> float:
    """Expected cost of repairing now in order of P / cost, each repair verified, one fault assumed.

    Notes
    -----
    With the suspects' posteriors renormalised to one fault, p_i, and the
    repairs in the session's order (p_i / c_i), the expected cost is
    sum_j (c_j + v_j) * (1 - sum_(i<j) p_i): repair j (cost c_j, its
    verification v_j) is reached only if none of the earlier ones was the fault.

    References
    ----------
    Kadane & Simon 1977; Heckerman, Breese & Rommelse 1995, eq. for ECR.
    """
    from troubleshoot.diagnosis import repair_order, suspects
    from troubleshoot.session import top_verification, verification_for

    posterior = getattr(view_or_posterior, "posterior", view_or_posterior)
    model = posterior.model
    ranked = [s for s in suspects(posterior) if not s.repaired and s.p > 1e-12]
    total_p = sum(s.p for s in ranked)
    if total_p <= 0.0:
        return 0.0
    remaining = 1.0
    cost = 0.0
    for step in repair_order(model, tuple(ranked)):
        if step.cost is None:
            continue
        verify = verification_for(model, step.id)
        extra = top_verification(model).cost if verify.target != model.top else 0.0
        cost += remaining * (step.cost + verify.cost + extra)
        remaining -= step.p / total_p
        if remaining <= 1e-12:
            break
    return cost


class InfoPerCostValueOfInformation(_Deterministic):
    """The session's recommended check, done only when it pays for itself one step ahead.

    The check t is done when cost(t) + sum_o P(t = o | e) ECR(e + {t = o}) < ECR(e),
    ECR being :func:`expected_repair_cost`; otherwise the strategy stops and
    repairs. Two extra propagations per step.

    References
    ----------
    Heckerman, Breese & Rommelse 1995 (myopic comparison of observing with repairing).
    """

    name = "info-per-cost-voi"

    def pick(self, view):
        from troubleshoot.inference import Finding

        if view.status != DIAGNOSING or view.ranking.best is None:
            return None
        best = view.ranking.best
        now = expected_repair_cost(view)
        after = best.cost
        findings = tuple(view.posterior.findings)
        for o, p in enumerate(best.p_outcomes):
            if p <= 0.0:
                continue
            posterior = view.engine.propagate(findings + (Finding(best.check, o, view.record.epoch),),
                                              view.record.repairs)
            after += p * expected_repair_cost(posterior)
        return best.check if after < now else None


class MostInformative(_Deterministic):
    """The check with the most bits, ignoring its cost (ties: cheaper, then id)."""

    name = "info"

    def pick(self, view):
        rows = _worth_doing(view)
        if view.status != DIAGNOSING or not rows:
            return None
        return min(rows, key=lambda r: (-r.bits, r.cost, r.check)).check


class Cheapest(_Deterministic):
    """The cheapest check that still gives at least ``min_bits`` bits (ties: more bits, then id)."""

    name = "cheapest"

    def pick(self, view):
        rows = _worth_doing(view)
        if view.status != DIAGNOSING or not rows:
            return None
        return min(rows, key=lambda r: (r.cost, -r.bits, r.check)).check


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
        return self.policy.get(findings_key(view))


def make_strategy(name: str, optimal_policy: dict | None = None) -> Strategy:
    """The strategy called ``name``; ``optimal`` needs the policy table of :func:`troubleshoot.optimal.solve`."""
    simple = {"info-per-cost": InfoPerCost, "info-per-cost-voi": InfoPerCostValueOfInformation,
              "info": MostInformative, "cheapest": Cheapest,
              "likeliest": Likeliest, "random": RandomCheck}
    if name in simple:
        return simple[name]()
    if name == "optimal":
        if optimal_policy is None:
            raise TroubleshootError("the optimal strategy needs its policy computed first")
        return PolicyStrategy("optimal", optimal_policy)
    raise TroubleshootError(f"unknown strategy {name!r}; choose from {', '.join(STRATEGY_NAMES)}")
