"""The least expected cost of a diagnosis, exactly, on models small enough to enumerate.

What "optimal" means here
-------------------------
The protocol is the simulator's (:mod:`troubleshoot.study.simulation`): the
complaint and every symptom are observed first; then, before any repair, the
policy either does a check not yet done or stops; once it stops, the repair
phase is fixed: repair the first repairable entry of the session's repair
order (P(failed | findings) / repair cost over the ambiguity group, see
:func:`troubleshoot.study.simulation.next_repair`), verify as the session asks,
and on a failed verification repair the next one in the order recomputed
from the new findings, until a verification passes or no repairable suspect
is left. The cost of a case is the sum of the check, repair and
verification costs.

The optimal policy is the one that, at every set of findings, chooses
between each remaining check and "stop and repair" so as to minimise the
expected total cost. Its expected cost is a lower bound for every strategy
that follows the same protocol (the same repair phase), whatever rule it
uses to choose checks: each such strategy is one of the policies the
recursion minimises over. It is not a bound for a protocol that checks
again after a failed repair.

The recursion (Bellman's equation) over sets of findings e, memoised:

    V(e) = min( R(e),  min over checks t not in e of  cost(t) + sum_o P(t = o | e) V(e + {t = o}) )

with R(e) the exact expected cost of the repair phase from e. Every
probability comes from the exact joint over the 2^n states of the n root
events (enumeration), never from sampling; a check that gives no
information about the roots (I(F; T | e) = 0) cannot lower the cost and is
not tried.

References
----------
R. Bellman, *Dynamic Programming*, Princeton University Press, 1957.
D. Heckerman, J. S. Breese and K. Rommelse, "Decision-theoretic
troubleshooting", Communications of the ACM 38(3), 1995 (observation-repair
planning; the myopic rule it approximates).
J. B. Kadane and H. A. Simon, "Optimal strategies for a class of constrained
sequential problems", Annals of Statistics 5(2), 1977 (repair order).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from troubleshoot.advice.diagnosis import Suspect, is_unlisted
from troubleshoot.advice.ranking import BITS_EPSILON, entropy_bits
from troubleshoot.engine.observation import outcome_probabilities
from troubleshoot.advice.ties import ordered_by
from troubleshoot.errors import TroubleshootError
from troubleshoot.model.gates import gate_values
from troubleshoot.model import Model
from troubleshoot.session import (
    Session,
    SessionSettings,
    settings_for,
    top_verification,
    verification_for,
)
from troubleshoot.advice.repair import CLEARED_P, next_repair, repair_cost

#: Largest number of root events the enumeration takes (2^16 joint states).
MAX_ROOTS = 16
#: Largest number of distinct sets of findings the recursion visits.
MAX_STATES = 200_000


class OptimalTooLarge(TroubleshootError):
    """The model is too large for the exact optimal policy."""


class Enumeration:
    """Every joint state of a model's root events, with the gate logic evaluated per state.

    Parameters
    ----------
    model : Model
        At most :data:`MAX_ROOTS` root events.

    Raises
    ------
    OptimalTooLarge
    """

    def __init__(self, model: Model):
        n = len(model.hypotheses)
        if n > MAX_ROOTS:
            raise OptimalTooLarge(
                f"model {model.name!r} has {n} root events (basic events and unlisted causes); the exact "
                f"optimal policy enumerates 2^n joint states and is computed for at most {MAX_ROOTS}")
        self.model = model
        self.roots = model.hypotheses
        codes = np.arange(2**n, dtype=np.int64)
        self.states = ((codes[:, None] >> np.arange(n)) & 1).astype(bool)
        priors = np.array([model.prior_of(r) for r in self.roots])
        self.prior = np.prod(np.where(self.states, priors, 1.0 - priors), axis=1)
        self._values: dict[frozenset, dict[str, np.ndarray]] = {}
        self._table: dict[tuple, np.ndarray] = {}

    def values(self, repaired) -> dict[str, np.ndarray]:
        """Failed or not, per joint state, of every root and gate, the repaired roots working."""
        key = frozenset(repaired)
        if key in self._values:
            return self._values[key]
        model = self.model
        rows = len(self.states)
        value = gate_values(model, {r: (np.zeros(rows, bool) if r in key else self.states[:, i])
                                    for i, r in enumerate(self.roots)})
        self._values[key] = value
        return value

    def table(self, check_id: str, repaired=()) -> np.ndarray:
        """P(outcome | joint state) of a check, shape (states, K) (:mod:`troubleshoot.engine.observation`)."""
        key = (check_id, frozenset(repaired))
        if key not in self._table:
            check = self.model.check_by_id[check_id]
            value = self.values(repaired)
            self._table[key] = outcome_probabilities(check, [value[c.target] for c in check.causes])
        return self._table[key]

    def outcomes(self, check_id: str) -> range:
        """The outcome indices of a check."""
        return range(len(self.model.check_by_id[check_id].outcomes))

    def p_abnormal(self, check_id: str, repaired=()) -> np.ndarray:
        """P(any abnormal outcome | joint state) of a check."""
        return 1.0 - self.table(check_id, repaired)[:, 0]

    def likelihood(self, check_id: str, outcome: int, repaired=()) -> np.ndarray:
        return self.table(check_id, repaired)[:, outcome]

    def complaint(self) -> np.ndarray:
        """Prior weight of each joint state times [the top event occurs]."""
        return self.prior * self.values(())[self.model.top]

    def suspects(self, weights: np.ndarray, repaired=()) -> tuple[Suspect, ...]:
        """Suspects from unnormalised weights, ordered as :func:`troubleshoot.advice.diagnosis.suspects` does."""
        q = weights @ self.states / weights.sum()
        model = self.model
        out = [Suspect(r, model.label_of(r), float(p), r in repaired, is_unlisted(model, r))
               for r, p in zip(self.roots, q)]
        return tuple(ordered_by(out, lambda s: s.p, lambda s: s.id))

    def bits(self, weights: np.ndarray, check_id: str) -> float:
        """I(F; T | findings) in bits for a check done before any repair (Cover & Thomas 2006)."""
        w = weights / weights.sum()
        table = self.table(check_id)
        p_t = np.clip(w @ table, 0.0, 1.0)
        value = float(entropy_bits(p_t) - w @ entropy_bits(table))
        return value if value > BITS_EPSILON else 0.0


def repair_phase_cost(enumeration: Enumeration, weights: np.ndarray, settings: SessionSettings) -> float:
    """Exact expected cost of the repair phase from the findings whose joint weights are given.

    Parameters
    ----------
    enumeration : Enumeration
    weights : numpy.ndarray
        Unnormalised P(joint state, findings).
    settings : SessionSettings
        For the ambiguity-group threshold of the repair order.

    Returns
    -------
    float
        sum over repair steps j of P(step j is reached | findings) *
        (repair cost + verification cost), in the model's cost unit.

    Notes
    -----
    Each repair is verified as the session asks: the top event, or first
    the repair's own check (through its noise) and, when that reads normal,
    the top event. Every branch that does not end in a working unit leads to
    the next repair, conditioned on what was seen; the recursion sums over
    the branches exactly (a branch of probability at most CLEARED_P is
    dropped).

    References
    ----------
    Heckerman, Breese & Rommelse 1995 (expected cost of a repair sequence).
    """
    model = enumeration.model
    top_cost = top_verification(model).cost
    limit = len(model.hypotheses)

    def phase(w: np.ndarray, repaired: tuple[str, ...]) -> float:
        """Expected cost from here, times the probability of getting here (the mass of w)."""
        mass = float(w.sum())
        if mass <= CLEARED_P or len(repaired) >= limit:
            return 0.0
        root = next_repair(model, enumeration.suspects(w, repaired), settings.group_min_p)
        if root is None:
            return 0.0
        repaired = repaired + (root,)
        request = verification_for(model, root)
        total = mass * (repair_cost(model, root) + request.cost)
        top_fails = enumeration.values(repaired)[model.top].astype(float)
        if request.target == model.top:
            return total + phase(w * top_fails, repaired)
        # The repair's own check first: still abnormal, the diagnosis goes on;
        # normal, the unit itself is checked, and only a working unit ends it.
        p_abn = enumeration.p_abnormal(request.target, repaired)
        normal = w * (1.0 - p_abn)
        total += phase(w * p_abn, repaired)
        total += float(normal.sum()) * top_cost
        return total + phase(normal * top_fails, repaired)

    return phase(weights / weights.sum(), ())


@dataclass(frozen=True)
class OptimalSolution:
    """The optimal policy and its expected cost.

    Attributes
    ----------
    expected_cost : float
        In the model's cost unit: the least expected total cost (see the module notes).
    policy : dict
        Findings key (frozenset of (check id, outcome index), symptoms
        included, complaint excluded) -> the check to do, or None to stop and repair.
    states : int
        Sets of findings the recursion visited.
    """

    expected_cost: float
    policy: dict
    states: int


def _symptom_states(enumeration: Enumeration, weights: np.ndarray):
    """Every combination of symptom outcomes with P > 0: (key, weights, probability)."""
    model = enumeration.model
    out: list[tuple[frozenset[tuple[str, int]], np.ndarray, float]] = [(frozenset(), weights, 1.0)]
    for s in model.symptoms:
        nxt = []
        for key, w, p in out:
            for o in enumeration.outcomes(s.id):
                w2 = w * enumeration.likelihood(s.id, o)
                q = float(w2.sum() / w.sum())
                if q > 0.0:
                    nxt.append((key | {(s.id, o)}, w2, p * q))
        out = nxt
    return out


def solve(model: Model, settings: SessionSettings | None = None, max_states: int = MAX_STATES) -> OptimalSolution:
    """The least-expected-cost policy by dynamic programming over sets of findings.

    Parameters
    ----------
    model : Model
    settings : SessionSettings, optional
        The repair phase's ambiguity-group threshold (default: the model's session settings).
    max_states : int
        Refuse (OptimalTooLarge) after visiting this many sets of findings.

    Returns
    -------
    OptimalSolution

    Raises
    ------
    OptimalTooLarge
        Too many root events to enumerate, or too many reachable sets of findings.

    Notes
    -----
    Memoised recursion of the Bellman equation in the module notes; on a
    tie between stopping and a check the policy stops, and between checks
    it takes the first in model order, so the policy is deterministic.

    References
    ----------
    Bellman 1957; Heckerman, Breese & Rommelse 1995.
    """
    settings = settings or settings_for(model)
    enum = Enumeration(model)
    checks = [c.id for c in model.checks]
    cost_of = {c.id: float(c.cost) for c in model.checks}
    memo: dict[frozenset, float] = {}
    policy: dict[frozenset, str | None] = {}

    def value(key: frozenset, w: np.ndarray) -> float:
        if key in memo:
            return memo[key]
        if len(memo) >= max_states:
            raise OptimalTooLarge(
                f"model {model.name!r} has more than {max_states} reachable sets of findings over its "
                f"{len(checks)} checks; the exact optimal policy is skipped for it")
        best, action = repair_phase_cost(enum, w, settings), None
        done = {t for t, _ in key}
        total_w = float(w.sum())
        for t in checks:
            if t in done or cost_of[t] >= best or enum.bits(w, t) == 0.0:
                continue
            expected = cost_of[t]
            for o in enum.outcomes(t):
                w2 = w * enum.likelihood(t, o)
                p = float(w2.sum()) / total_w
                if p > 0.0:
                    expected += p * value(key | {(t, o)}, w2)
                if expected >= best:
                    break
            if expected < best * (1.0 - 1e-12):
                best, action = expected, t
        memo[key] = best
        policy[key] = action
        return best

    complaint = enum.complaint()
    if complaint.sum() <= 0.0:
        raise OptimalTooLarge(f"model {model.name!r}: the top event cannot occur, there is nothing to diagnose")
    total = 0.0
    for key, w, p in _symptom_states(enum, complaint):
        total += p * value(key, w)
    return OptimalSolution(float(total), policy, len(memo))


def expected_cost(model: Model, strategy, settings: SessionSettings | None = None, engine=None,
                  max_states: int = MAX_STATES) -> float:
    """Exact expected cost of a strategy under the simulator's protocol, by recursion over outcomes.

    Parameters
    ----------
    model : Model
    strategy : Strategy
        Its choices are read from a real :class:`~troubleshoot.session.Session`
        driven through every outcome branch (record, recurse, undo).
    settings : SessionSettings, optional
    engine : Engine, optional
    max_states : int

    Returns
    -------
    float
        E[total cost] in the model's cost unit, the outcome probabilities
        and the repair phase exact by enumeration.

    Raises
    ------
    OptimalTooLarge
    """
    settings = settings or settings_for(model)
    enum = Enumeration(model)
    session = Session(model, settings, engine)
    memo: dict[frozenset, float] = {}
    from troubleshoot.study.strategies import findings_key

    def value(w: np.ndarray) -> float:
        view = session.view
        key = findings_key(view)
        if key in memo:
            return memo[key]
        if len(memo) >= max_states:
            raise OptimalTooLarge(f"model {model.name!r}: more than {max_states} sets of findings")
        total = 0.0
        for prob, action in strategy.choices(view):
            if action is None:
                total += prob * repair_phase_cost(enum, w, settings)
                continue
            branch = float(model.check_by_id[action].cost)
            for o in enum.outcomes(action):
                w2 = w * enum.likelihood(action, o)
                p = float(w2.sum() / w.sum())
                if p <= 0.0:
                    continue
                session.record_finding(action, o)
                branch += p * value(w2)
                session.undo()
            total += prob * branch
        memo[key] = total
        return total

    total = 0.0
    for key, w, p in _symptom_states(enum, enum.complaint()):
        for target, o in sorted(key):
            session.record_finding(target, o)
        total += p * value(w)
        for _ in key:
            session.undo()
    return float(total)
