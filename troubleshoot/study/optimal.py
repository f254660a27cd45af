"""The least expected cost of a diagnosis, exactly, on models small enough to enumerate.

What "optimal" means here
-------------------------
The protocol is the tool's own, the one the simulator runs
(:mod:`troubleshoot.study.simulation`):

1. The complaint and every symptom are observed first (symptoms are free).
2. At every step the technician may do a check (or re-read a symptom) not
   yet done since the last repair, repair any unrepaired basic event that
   has a repair, or escalate.
3. A repair is verified as the session asks: the repair's own check if the
   model names one (an abnormal outcome sends the diagnosis on), then the
   unit itself; the unit working ends the case. A unit that still fails
   goes back to step 2, every finding kept, the repair taken into account:
   checks may be done again. When the repair's own check read abnormal,
   the unit may work all the same: until the next repair, trying the unit
   (its verification) is one more action.
4. Escalating ends the case at its price (the model's, or
   :func:`troubleshoot.advice.policy.escalation_charge` when it gives none).

The cost of a case is the sum of its checks, repairs, verifications and
escalation. The optimal policy minimises its expectation; it is a lower
bound for every strategy on this protocol, the tool's included, each
strategy being one of the policies the recursion minimises over.

Two kinds of action are left out because they cannot lower the cost: a
check that gives no information about the root events (I(F; T | e) = 0),
and the repair of a root that has failed with probability 0.

The recursion (Bellman's equation) over the protocol's states (the repairs
made, the checks done since the last one and the posterior over the joint
states of the roots), memoised:

    V(s) = min( E,  min_t  c_t + sum_o P(o | s) V(s + t=o),
                    min_r  c_r + verification costs + sum_b P(b | s) V(s_b),
                    v + P(unit fails | s) V(s + unit fails)  [unit in doubt only] )

with E the escalation price, b the branches of the verification in which
the unit still fails, and v the unit's verification. Every probability
comes from the exact joint over the 2^n states of the n root events
(enumeration), never from sampling; how a check responds to its causes
comes from one function,
:meth:`Enumeration.table` (over :mod:`troubleshoot.engine.observation`).

References
----------
R. Bellman, *Dynamic Programming*, Princeton University Press, 1957.
D. Heckerman, J. S. Breese and K. Rommelse, "Decision-theoretic
troubleshooting", Communications of the ACM 38(3), 1995 (observation,
repair and service calls; the myopic rule the tool approximates it with).
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from troubleshoot.advice.policy import escalation_charge
from troubleshoot.advice.ranking import BITS_EPSILON, entropy_bits
from troubleshoot.advice.repair import CLEARED_P, repair_cost, top_verification, verification_for
from troubleshoot.engine.observation import outcome_probabilities
from troubleshoot.errors import TroubleshootError
from troubleshoot.model import Model
from troubleshoot.model.gates import gate_values

#: Largest number of root events the enumeration takes (2^16 joint states).
MAX_ROOTS = 16
#: Largest number of distinct states the recursion visits.
MAX_STATES = 200_000
#: Up to this many repairable roots the lower bound of the recursion tries every subset of repairs.
MAX_BOUND_REPAIRS = 10
#: Posteriors equal to this many decimals are one state of the recursion.
STATE_DECIMALS = 12

# Kinds of observation in a protocol state (as the session names them).
COMPLAINT, FINDING, VERIFICATION = "complaint", "finding", "verification"


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
        rows = len(self.states)
        value = gate_values(self.model, {r: (np.zeros(rows, bool) if r in key else self.states[:, i])
                                         for i, r in enumerate(self.roots)})
        self._values[key] = value
        return value

    def table(self, check_id: str, repaired=()) -> np.ndarray:
        """P(outcome | joint state) of a check, shape (states, K): the one place a check's response is read.

        It reads :func:`troubleshoot.engine.observation.outcome_probabilities`,
        the model's observation layer (noisy-OR, noisy-MAX for K outcomes).
        """
        key = (check_id, frozenset(repaired))
        if key not in self._table:
            check = self.model.check_by_id[check_id]
            value = self.values(repaired)
            self._table[key] = outcome_probabilities(check, [value[c.target] for c in check.causes])
        return self._table[key]

    def outcomes(self, check_id: str) -> range:
        """The outcome indices of a check."""
        return range(len(self.model.check_by_id[check_id].outcomes))

    def likelihood(self, check_id: str, outcome: int, repaired=()) -> np.ndarray:
        return self.table(check_id, repaired)[:, outcome]

    def top_fails(self, repaired=()) -> np.ndarray:
        """1.0 where the top event occurs with the repaired roots working, else 0.0."""
        return self.values(repaired)[self.model.top].astype(float)

    def complaint(self) -> np.ndarray:
        """Prior weight of each joint state times [the top event occurs]."""
        return self.prior * self.top_fails(())

    def bits(self, weights: np.ndarray, check_id: str, repaired=()) -> float:
        """I(F; T | findings) in bits for a check done after ``repaired`` (Cover & Thomas 2006)."""
        w = weights / weights.sum()
        table = self.table(check_id, repaired)
        p_t = np.clip(w @ table, 0.0, 1.0)
        value = float(entropy_bits(p_t) - w @ entropy_bits(table))
        return value if value > BITS_EPSILON else 0.0

    def p_failed(self, weights: np.ndarray) -> np.ndarray:
        """P(root failed | findings) per root, from unnormalised weights."""
        return weights @ self.states / weights.sum()


# ---------------------------------------------------------------- the protocol


@dataclass(frozen=True)
class State:
    """Where a case stands on the protocol: what was observed and repaired, in order.

    Attributes
    ----------
    observations : tuple of (target, outcome index, epoch, kind)
        The complaint first; ``kind`` is ``complaint``, ``finding`` or
        ``verification`` (as the session records them).
    repairs : tuple of str
    """

    observations: tuple[tuple[str, int, int, str], ...]
    repairs: tuple[str, ...] = ()

    @property
    def epoch(self) -> int:
        return len(self.repairs)

    def done_now(self) -> frozenset[str]:
        """Checks observed since the last repair."""
        return frozenset(t for t, _, e, _ in self.observations if e == self.epoch)


#: An action: ("check", id), ("repair", id), ("verify", top event id: a unit in doubt) or ("escalate", None).
Action = tuple[str, str | None]


class Protocol:
    """What each action of the protocol costs and where it leads, on an enumeration.

    Parameters
    ----------
    enumeration : Enumeration
    """

    def __init__(self, enumeration: Enumeration):
        self.enum = enumeration
        model = enumeration.model
        self.model = model
        self.escalation = escalation_charge(model)
        self.top_cost = top_verification(model).cost
        self.check_ids = tuple(c.id for c in model.checks + model.symptoms)
        self.cost_of = {c.id: float(c.cost) for c in model.checks + model.symptoms}
        self.repairable = tuple(e.id for e in model.basic_events if e.repair is not None)
        self.index = {r: i for i, r in enumerate(model.hypotheses)}
        self.full_cost = {r: repair_cost(model, r) + verification_for(model, r).cost for r in self.repairable}
        self._works: list[np.ndarray] | None = None
        self._mask_cost = np.zeros(1)
        self._floors: dict[frozenset, np.ndarray] = {}

    def start(self) -> list[tuple[float, State, np.ndarray]]:
        """The states after the complaint and every symptom, with their probabilities and weights."""
        model = self.model
        w0 = self.enum.complaint()
        if w0.sum() <= 0.0:
            raise OptimalTooLarge(f"model {model.name!r}: the top event cannot occur, there is nothing to diagnose")
        out = [(1.0, State(((model.top, 1, 0, COMPLAINT),)), w0 / w0.sum())]
        for s in model.symptoms:
            nxt = []
            for p, state, w in out:
                for o in self.enum.outcomes(s.id):
                    w2 = w * self.enum.likelihood(s.id, o)
                    q = float(w2.sum())
                    if q > 0.0:
                        nxt.append((p * q, State(state.observations + ((s.id, o, 0, FINDING),)), w2 / q))
            out = nxt
        return out

    def weights(self, state: State) -> np.ndarray:
        """P(joint state | what ``state`` observed), normalised; from the observations alone."""
        enum, model = self.enum, self.model
        w = enum.prior.copy()
        for target, outcome, epoch, _kind in state.observations:
            repaired = state.repairs[:epoch]
            if target == model.top:
                fails = enum.top_fails(repaired)
                w = w * (fails if outcome else 1.0 - fails)
            else:
                w = w * enum.likelihood(target, outcome, repaired)
        total = w.sum()
        return w / total if total > 0 else w

    def checks_open(self, state: State, w: np.ndarray) -> list[str]:
        """Checks not done since the last repair that give information."""
        done = state.done_now()
        return [t for t in self.check_ids
                if t not in done and self.enum.bits(w, t, state.repairs) > 0.0]

    def repairs_open(self, state: State, w: np.ndarray) -> list[str]:
        """Unrepaired roots with a repair that may have failed."""
        p = self.enum.p_failed(w)
        return [r for r in self.repairable if r not in state.repairs and p[self.index[r]] > CLEARED_P]

    def after_check(self, state: State, w: np.ndarray, check_id: str) -> list[tuple[float, State, np.ndarray]]:
        """The outcomes of a check: (probability, next state, next weights)."""
        out = []
        for o in self.enum.outcomes(check_id):
            w2 = w * self.enum.likelihood(check_id, o, state.repairs)
            p = float(w2.sum())
            if p > 0.0:
                out.append((p, State(state.observations + ((check_id, o, state.epoch, FINDING),), state.repairs),
                            w2 / p))
        return out

    def after_repair(self, state: State, w: np.ndarray, root: str) -> tuple[float, list]:
        """Expected cost of a repair and its verification, and the branches where the case goes on.

        Returns
        -------
        cost : float
            Repair, its own check (if any) and, where that reads normal, the unit itself.
        branches : list of (probability, next state, next weights)
            The outcomes after which the diagnosis goes on: the own check
            abnormal, or the unit still failing. The unit working ends the case.
        """
        enum, model = self.enum, self.model
        repaired = state.repairs + (root,)
        epoch = len(repaired)
        request = verification_for(model, root)
        cost = repair_cost(model, root) + request.cost
        fails = enum.top_fails(repaired)
        branches = []

        def add(p_w: np.ndarray, observations) -> None:
            p = float(p_w.sum())
            if p > 0.0:
                branches.append((p, State(state.observations + observations, repaired), p_w / p))

        top_seen = (model.top, 1, epoch, VERIFICATION)
        if request.target == model.top:
            add(w * fails, (top_seen,))
            return cost, branches
        table = enum.table(request.target, repaired)
        for o in range(table.shape[1]):
            w_o = w * table[:, o]
            if o != 0:
                add(w_o, ((request.target, o, epoch, VERIFICATION),))
                continue
            cost += float(w_o.sum()) * self.top_cost
            add(w_o * fails, ((request.target, 0, epoch, VERIFICATION), top_seen))
        return cost, branches

    def unit_in_doubt(self, state: State) -> bool:
        """A repair was made and the unit not tried since (its own check read abnormal)."""
        epoch = state.epoch
        return epoch > 0 and not any(t == self.model.top and e == epoch for t, _, e, _ in state.observations)

    def after_unit_check(self, state: State, w: np.ndarray) -> tuple[float, list]:
        """Trying a unit in doubt: its verification's cost, and the branch where it still fails."""
        still = w * self.enum.top_fails(state.repairs)
        p = float(still.sum())
        seen = (self.model.top, 1, state.epoch, VERIFICATION)
        return self.top_cost, ([(p, State(state.observations + (seen,), state.repairs), still / p)] if p > 0.0 else [])

    def lower_bound(self, state: State, w: np.ndarray) -> float:
        """A lower bound of the cost still to come: the expected cost with the faults known.

        In each joint state the case ends with an escalation or with repairs
        that make the unit work, each repair followed by at least its first
        verification; knowing the joint state, the cheapest of these is
        :meth:`floor_costs`. Its expectation under ``w`` bounds every policy
        from below (the value of perfect information is never negative).
        """
        return float(w @ self.floor_costs(frozenset(state.repairs)))

    def floor_costs(self, repaired: frozenset) -> np.ndarray:
        """Per joint state, the least cost of ending the case once its faults are known.

        min(E, min over sets R of unrepaired repairable roots that make the
        unit work with ``repaired`` and R repaired, of sum_(r in R) (c_r + v_r)),
        v_r the repair's first verification. Computed once per set of repairs
        made, by trying every subset of the repairable roots (2^m, m at most
        :data:`MAX_ROOTS`).
        """
        if repaired in self._floors:
            return self._floors[repaired]
        if len(self.repairable) > MAX_BOUND_REPAIRS:
            # Too many subsets to try: the cheapest single verified repair, escalation, or
            # (after a repair) trying the unit, which may already work.
            cheapest = min([self.escalation] + ([self.top_cost] if repaired else [])
                           + [repair_cost(self.model, r) + verification_for(self.model, r).cost
                              for r in self.repairable if r not in repaired])
            self._floors[repaired] = np.full(len(self.enum.states), cheapest)
            return self._floors[repaired]
        if self._works is None:
            self._works, self._mask_cost = self._subset_table()
        bits = {r: 1 << i for i, r in enumerate(self.repairable)}
        done = sum(bits[r] for r in repaired if r in bits)
        floor = np.full(len(self.enum.states), self.escalation)
        for mask, works in enumerate(self._works):
            if (mask & done) != done:
                continue
            spend = self._mask_cost[mask] - self._mask_cost[done]
            if spend < self.escalation:
                np.minimum(floor, np.where(works, spend, np.inf), out=floor)
        self._floors[repaired] = floor
        return floor

    def _subset_table(self) -> tuple[list[np.ndarray], np.ndarray]:
        """Whether the unit works in each joint state with each subset of the repairable roots repaired."""
        model = self.model
        m = len(self.repairable)
        unit = np.array([repair_cost(model, r) + verification_for(model, r).cost for r in self.repairable])
        masks = np.arange(2**m)
        cost = ((masks[:, None] >> np.arange(m)) & 1) @ unit if m else np.zeros(1)
        works = [self.enum.top_fails(tuple(r for i, r in enumerate(self.repairable) if mask >> i & 1)) == 0.0
                 for mask in range(2**m)]
        return works, np.asarray(cost, float)

    def key(self, state: State, w: np.ndarray) -> tuple:
        """States with the same repairs, the same checks open and the same posterior share their future.

        The posterior is that of the roots not repaired: a repaired root
        works from then on, so whether it had failed no longer changes any
        outcome, repair or bound to come (histories that differ only in it
        are one state).
        """
        n = len(self.enum.roots)
        repaired = sorted({self.index[r] for r in state.repairs})
        if repaired:
            # Bit i of a joint state's code is root i: axis n - 1 - i of the (2,) * n view.
            w = w.reshape((2,) * n).sum(axis=tuple(n - 1 - i for i in repaired)).ravel()
        digest = hashlib.blake2b(np.round(w, STATE_DECIMALS).tobytes(), digest_size=16).digest()
        return frozenset(state.repairs), state.done_now(), digest


# ---------------------------------------------------------------- the optimum


@dataclass(frozen=True)
class OptimalSolution:
    """The optimal policy and its expected cost.

    Attributes
    ----------
    expected_cost : float
        In the model's cost unit: the least expected total cost (see the module notes).
    policy : dict
        :meth:`Protocol.key` of a state -> the best action there.
    states : int
        States the recursion visited.
    protocol : Protocol
    """

    expected_cost: float
    policy: dict
    states: int
    protocol: Protocol

    def action(self, state: State) -> Action:
        """The optimal action in a state of the protocol (escalate in a state never reached)."""
        p = self.protocol
        return self.policy.get(p.key(state, p.weights(state)), ("escalate", None))


def solve(model: Model, max_states: int = MAX_STATES) -> OptimalSolution:
    """The least-expected-cost policy by dynamic programming over the protocol's states.

    Parameters
    ----------
    model : Model
    max_states : int
        Refuse (OptimalTooLarge) after visiting this many states.

    Returns
    -------
    OptimalSolution

    Raises
    ------
    OptimalTooLarge
        Too many root events to enumerate, or too many reachable states.

    Notes
    -----
    Memoised recursion of the Bellman equation in the module notes, with
    branch and bound: the expected cost of ending the case with the faults
    known bounds a state's value from below (:meth:`Protocol.lower_bound`);
    a course whose cost so far plus the bounds of its remaining branches
    reaches the best found is cut, and a state is solved only as far as its
    budget requires (a state cut by its budget keeps the bound it was cut
    at). Ties go to the first found: escalation, then checks in model order,
    then trying a unit in doubt, then repairs in decreasing P / (repair +
    first verification cost), by model order within a tie.

    References
    ----------
    Bellman 1957; Heckerman, Breese & Rommelse 1995.
    """
    protocol = Protocol(Enumeration(model))
    memo: dict[tuple, float] = {}  # exact values
    floor: dict[tuple, float] = {}  # lower bounds of states cut by a budget
    policy: dict[tuple, Action] = {}
    visited = 0

    def courses(state: State, w: np.ndarray):
        for t in protocol.checks_open(state, w):
            yield ("check", t), protocol.cost_of[t], protocol.after_check(state, w, t)
        if protocol.unit_in_doubt(state):
            cost, branches = protocol.after_unit_check(state, w)
            yield ("verify", model.top), cost, branches
        # The likeliest repair per cost first (Kadane & Simon 1977): a good course found early
        # tightens the bound for the rest.
        p = protocol.enum.p_failed(w)
        repairs = protocol.repairs_open(state, w)
        for r in sorted(repairs, key=lambda r: -p[protocol.index[r]] / max(protocol.full_cost[r], 1e-300)):
            cost, branches = protocol.after_repair(state, w, r)
            yield ("repair", r), cost, branches

    def value(state: State, w: np.ndarray, budget: float = np.inf) -> tuple[float, bool]:
        """(V(state), True) when it is below ``budget``; otherwise (a lower bound of it >= budget, False).

        The flag, not a comparison with the budget, says which: p * (budget / p)
        may round below the budget, and a bound taken for a value makes a
        course look cheaper than it is.
        """
        nonlocal visited
        key = protocol.key(state, w)
        if key in memo:
            return memo[key], True
        low = max(floor.get(key, 0.0), protocol.lower_bound(state, w))
        if low >= budget:
            return low, False
        visited += 1
        if visited > max_states:
            raise OptimalTooLarge(
                f"model {model.name!r} needs more than {max_states} states of the tool's protocol; "
                "the exact optimal policy is skipped for it")
        best, action = protocol.escalation, ("escalate", None)
        for course, cost, branches in courses(state, w):
            limit = min(best, budget)
            lows = [p * protocol.lower_bound(child, w2) for p, child, w2 in branches]
            rest = sum(lows)
            if cost + rest >= limit:
                continue
            total, cut = cost, False
            for (p, child, w2), low_i in zip(branches, lows):
                rest -= low_i
                v, exact = value(child, w2, (limit - total - rest) / p)
                total += p * v
                if not exact or total + rest >= limit:
                    cut = True
                    break
            if not cut and total < best * (1.0 - 1e-12):
                best, action = total, course
        if best < budget:
            memo[key] = best
            policy[key] = action
            return best, True
        floor[key] = max(floor.get(key, 0.0), budget)
        return budget, False

    total = sum(p * value(state, w)[0] for p, state, w in protocol.start())
    return OptimalSolution(float(total), policy, visited, protocol)


def expected_cost(model: Model, act: Callable[[State], list[tuple[float, Action]]],
                  max_states: int = MAX_STATES) -> float:
    """Exact expected cost of a strategy on the protocol, by recursion over every outcome.

    Parameters
    ----------
    model : Model
    act : callable
        State -> [(probability, action)]: what the strategy does there (one
        action with probability 1 for a deterministic strategy).
    max_states : int

    Returns
    -------
    float
        E[total cost] in the model's cost unit, every probability exact by enumeration.

    Raises
    ------
    OptimalTooLarge
    """
    protocol = Protocol(Enumeration(model))
    memo: dict[State, float] = {}

    def value(state: State, w: np.ndarray) -> float:
        if state in memo:
            return memo[state]
        if len(memo) >= max_states:
            raise OptimalTooLarge(f"model {model.name!r}: more than {max_states} states on the protocol")
        total = 0.0
        for prob, (kind, target) in act(state):
            if kind == "escalate":
                total += prob * protocol.escalation
                continue
            assert target is not None, "a check or a repair names its target"
            if kind == "check":
                branch, children = protocol.cost_of[target], protocol.after_check(state, w, target)
            elif kind == "verify":
                branch, children = protocol.after_unit_check(state, w)
            else:
                branch, children = protocol.after_repair(state, w, target)
            for p, child, w2 in children:
                branch += p * value(child, w2)
            total += prob * branch
        memo[state] = total
        return total

    return float(sum(p * value(state, w) for p, state, w in protocol.start()))
