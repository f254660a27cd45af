"""Repairs: their order, their verification and the expected cost of repairing from here.

Pure functions of a model and suspects (or a posterior). The one repair order
of the tool lives here (:func:`repair_sequence`); the session's displayed
order, the policy's next repair, the expected cost of repair, the simulator
and the exact optimal policy all read it.

References
----------
J. B. Kadane and H. A. Simon, "Optimal strategies for a class of constrained
sequential problems", Annals of Statistics 5(2), 1977 (search in order of
probability over cost).
D. Heckerman, J. S. Breese and K. Rommelse, "Decision-theoretic
troubleshooting", Communications of the ACM 38(3), 1995 (repair, verify;
expected cost of repair).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from troubleshoot.advice.diagnosis import hypotheses_of, ranked_marginals
from troubleshoot.advice.ties import ordered_by
from troubleshoot.engine.inference import AnyPosterior
from troubleshoot.model import Model

#: A suspect below this posterior is treated as cleared (rounding of an exact zero).
CLEARED_P = 1e-12
#: Two repair ratios within this relative distance are a tie, resolved by id.
RATIO_TOLERANCE = 1e-9


# ---------------------------------------------------------------- verification


@dataclass(frozen=True)
class VerificationRequest:
    """What to check after the last repair to confirm it."""

    target: str  # the repair's verify check, or the top event
    label: str
    cost: float
    outcomes: tuple[str, ...]  # (works / normal, still fails / abnormal)
    instructions: str = ""
    caution: str | None = None


def _verify_check(model: Model, repaired: str):
    """The repair's own ``verify`` check, or None."""
    event = model.event_by_id.get(repaired)
    verify = event.repair.verify if event is not None and event.repair is not None else None
    return model.check_by_id.get(verify) if verify is not None else None


def verification_for(model: Model, repaired: str) -> VerificationRequest:
    """The first check after a repair of ``repaired``: its ``verify`` check, else the top event."""
    check = _verify_check(model, repaired)
    if check is not None:
        return VerificationRequest(check.id, check.label, float(check.cost), tuple(check.outcomes),
                                   check.instructions, check.caution)
    return top_verification(model)


def top_verification_cost(model: Model) -> float:
    """What checking the unit itself costs (0 when the model gives no verification)."""
    return float(model.verification.cost) if model.verification is not None else 0.0


def top_verification(model: Model) -> VerificationRequest:
    """Checking the unit itself after a repair ("does it work now?"), which alone confirms it."""
    v = model.verification
    if v is None:
        return VerificationRequest(model.top, f"does the unit work now? ({model.label_of(model.top)})",
                                   top_verification_cost(model), ("works", "still fails"))
    return VerificationRequest(model.top, v.label, top_verification_cost(model), tuple(v.outcomes), v.instructions)


def verification_of(model: Model, target: str, repaired: str) -> VerificationRequest:
    """The verification a recorded verification finding on ``target`` answered."""
    return top_verification(model) if target == model.top else verification_for(model, repaired)


def repair_cost(model: Model, root: str) -> float:
    """Cost of repairing a root (0 when the model lists no repair)."""
    event = model.event_by_id.get(root)
    return float(event.repair.cost) if event is not None and event.repair is not None else 0.0


def verification_cost(model: Model, root: str) -> float:
    """Cost of verifying a repair of ``root``: its own check (if any), then the unit itself."""
    # The same figure as verification_for(...).cost plus the unit's check,
    # without building the requests (the policy asks it for every suspect
    # of every outcome it weighs).
    check = _verify_check(model, root)
    top = top_verification_cost(model)
    return top if check is None else float(check.cost) + top


# ---------------------------------------------------------------- the order


@dataclass(frozen=True)
class RepairStep:
    """One entry of the repair order.

    Attributes
    ----------
    id, label : str
        The suspect.
    p : float
        P(failed | findings).
    cost : float or None
        Repair cost in the model's cost unit; None when the model lists no repair.
    ratio : float or None
        p / (repair cost + verification cost) per cost unit (infinite when
        both are free); None without a repair.
    repair_label : str or None
    note : str or None
        Why the entry is last (no repair listed; cause outside the model).
    verification_cost : float or None
        What verifying the repair costs (its own check, then the unit).
    """

    id: str
    label: str
    p: float
    cost: float | None
    ratio: float | None
    repair_label: str | None
    note: str | None = None
    verification_cost: float | None = None


def kadane_simon_order(ids: list[str], p: np.ndarray, cost: np.ndarray) -> list[int]:
    """Indices in decreasing p / cost, ratios within :data:`RATIO_TOLERANCE` tied and taken by id.

    Parameters
    ----------
    ids : list of str
    p, cost : numpy.ndarray
        Probability of each item and the full cost of trying it (repair and verification).

    Notes
    -----
    With one fault among the items and each try revealing whether it was
    the fault, trying them in decreasing p / cost minimises the expected
    cost sum_j cost_j (1 - sum_(i<j) p_i) (Kadane & Simon 1977). Items whose
    ratios differ by rounding only are a tie: the order between them does
    not change the expected cost, and taking them by id makes every caller
    (a live session, the simulator, the exact policy) pick the same one.

    References
    ----------
    Kadane & Simon 1977.
    """
    ratio = _ratios(np.asarray(p, float), np.asarray(cost, float))
    return _grouped(sorted(range(len(ids)), key=lambda i: (-ratio[i], ids[i])), ratio, ids)


def _ratios(p: np.ndarray, cost: np.ndarray) -> np.ndarray:
    """p / cost per item, infinite where trying it is free."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(cost > 0, p / np.where(cost > 0, cost, 1.0), np.inf)


def _tied(a: float, b: float) -> bool:
    if math.isinf(a) or math.isinf(b):
        return a == b
    return abs(a - b) <= RATIO_TOLERANCE * max(abs(a), abs(b))


def _kadane_simon_ranked(id_rank: np.ndarray, p: np.ndarray, cost: np.ndarray) -> np.ndarray:
    """:func:`kadane_simon_order` in whole arrays, ids given by their rank in id order.

    The same order, item for item: the first sort by (-ratio, id) is one
    numpy sort; the grouping of ties (each ratio against the first of its
    group, :func:`_tied`) is done in Python only over runs of neighbours
    whose ratios lie within twice the tolerance and are not all equal.
    Outside such runs every item starts a group of its own: with positive
    ratios in decreasing order, r_(i-1) - r_i > 2 tol r_(i-1) gives
    r_h - r_i > tol (r_h + r_(i-1)) for any earlier r_h, far beyond
    rounding, so no earlier group takes it. A run of equal ratios is one
    group, already in id order.
    """
    ratio = _ratios(p, cost)
    if len(ratio) <= _FEW:
        # A few suspects (the demos, the simulator): the loop costs less than the array calls.
        keys = id_rank.tolist()
        return np.array(_grouped(sorted(range(len(keys)), key=lambda i: (-ratio[i], keys[i])), ratio, keys),
                        dtype=np.int64)
    first = np.lexsort((id_rank, -ratio))
    r = ratio[first]
    a, b = r[:-1], r[1:]
    with np.errstate(invalid="ignore"):
        near = (a == b) | (np.abs(a - b) <= 2.0 * RATIO_TOLERANCE * np.maximum(np.abs(a), np.abs(b)))
    unequal = near & (a != b)
    if not unequal.any():
        return first
    out = first.copy()
    # Runs of near neighbours: [start, stop) in positions of ``first``; only
    # those with two unequal ratios need the grouping (large models have
    # long runs of parts with the same prior and cost).
    edges = np.flatnonzero(np.diff(np.concatenate(([0], near.astype(np.int8), [0]))))
    starts, stops = edges[0::2], edges[1::2] + 1
    seen = np.concatenate(([0], np.cumsum(unequal)))  # unequal neighbour pairs before each position
    mixed = seen[stops - 1] > seen[starts]
    keys = id_rank.tolist()
    for start, stop in zip(starts[mixed].tolist(), stops[mixed].tolist()):
        run, run_ratio = first[start:stop], r[start:stop]
        if stop - start <= _FEW:
            out[start:stop] = _grouped(run.tolist(), ratio, keys)
            continue
        pos = 0
        while pos < len(run):
            length = _group_length(run_ratio[pos:])
            group = run[pos:pos + length]
            out[start + pos:start + pos + length] = group[np.argsort(id_rank[group])]
            pos += length
    return out


#: Up to this many items (or a run of this many) are grouped item by item, beyond it in whole arrays.
_FEW = 48


def _grouped(first: list[int], ratio: np.ndarray, keys: Sequence) -> list[int]:
    """``first`` (in decreasing ratio) with each group of ratios tied to its first (:func:`_tied`) by ``keys``."""
    out: list[int] = []
    group: list[int] = []
    for i in first:
        if group and not _tied(ratio[group[0]], ratio[i]):
            out += sorted(group, key=keys.__getitem__)
            group = []
        group.append(i)
    return out + sorted(group, key=keys.__getitem__)


def _group_length(r: np.ndarray) -> int:
    """How many of ``r`` form the group ``r[0]`` heads: it and the ratios after it tied to it (:func:`_tied`),
    up to the first that is not.

    Looked for in windows growing fourfold, so a group costs about its
    length, not the run's.
    """
    head = float(r[0])
    width = 64
    while True:
        window = r[1:1 + width]
        if math.isinf(head):
            tied = window == head
        else:
            with np.errstate(invalid="ignore"):
                # _tied's operations, in whole arrays.
                tied = ~np.isinf(window) & (np.abs(head - window)
                                            <= RATIO_TOLERANCE * np.maximum(abs(head), np.abs(window)))
        if not tied.all():
            return 1 + int(np.argmin(tied))
        if 1 + width >= len(r):
            return len(r)
        width *= 4


def repair_order(model: Model, group) -> tuple[RepairStep, ...]:
    """Repairs of the given suspects in order of P / (repair + verification cost); the rest last.

    Notes
    -----
    When every repair is followed by its verification, repairing in
    decreasing p / (c + v) minimises the expected cost of repair with one
    fault among the suspects (Kadane & Simon 1977; Heckerman, Breese &
    Rommelse 1995). An unlisted-cause event has no repair (the cause is
    outside the model): it is listed after every repairable suspect, with a
    note, as is a basic event whose model lists no repair. Ties within
    :data:`RATIO_TOLERANCE` go by id.

    References
    ----------
    Kadane & Simon 1977; Heckerman, Breese & Rommelse 1995.
    """
    repairable: list[RepairStep] = []
    other: list[RepairStep] = []
    full_costs: list[float] = []  # repair plus verification, per repairable step
    for s in group:
        event = model.event_by_id.get(s.id)
        repair = event.repair if event is not None else None
        if repair is None:
            if s.unlisted:
                note = "the cause lies outside the model: inspect beyond the listed components"
            elif s.condition:
                note = "a condition, not a fault: nothing to repair"
            else:
                note = "the model lists no repair for this event"
            other.append(RepairStep(s.id, s.label, s.p, None, None, None, note))
            continue
        cost = float(repair.cost)
        verify = verification_cost(model, s.id)
        full = cost + verify
        ratio = s.p / full if full > 0 else math.inf
        repairable.append(RepairStep(s.id, s.label, s.p, cost, ratio, repair.label, None, verify))
        full_costs.append(full)
    order = kadane_simon_order([r.id for r in repairable], np.array([r.p for r in repairable]), np.array(full_costs))
    other = ordered_by(other, lambda r: r.p, lambda r: r.id)
    return tuple([repairable[i] for i in order] + other)


@dataclass(frozen=True)
class _Repairs:
    """The full cost (repair and verification) of every hypothesis, in ``model.hypotheses`` order.

    Derived once per model: the policy orders every live suspect for every
    outcome it weighs, and these figures do not depend on the findings.
    """

    repairable: np.ndarray  # bool: the model lists a repair
    full: np.ndarray  # repair_cost + verification_cost (0 where there is no repair)


def _repairs_of(model: Model) -> _Repairs:
    table = model.__dict__.get("_advice_repairs")
    if table is None:
        ids = hypotheses_of(model).ids
        repairable = np.array([r in model.event_by_id and model.event_by_id[r].repair is not None for r in ids],
                              dtype=bool)
        full = np.array([repair_cost(model, r) + verification_cost(model, r) if ok else 0.0
                         for r, ok in zip(ids, repairable.tolist())], dtype=float)
        table = _Repairs(repairable, full)
        for shared in (repairable, full):
            shared.flags.writeable = False  # every posterior of the model reads them
        model.__dict__["_advice_repairs"] = table
    return table


def _live(model: Model, ranked) -> tuple[np.ndarray, np.ndarray]:
    """The suspects not repaired with P > CLEARED_P, in ranked order: hypothesis positions (-1 for an id
    the model does not list) and probabilities."""
    index = hypotheses_of(model).index
    live = [s for s in ranked if not s.repaired and s.p > CLEARED_P]
    idx = np.fromiter((index.get(s.id, -1) for s in live), dtype=np.int64, count=len(live))
    p = np.fromiter((s.p for s in live), dtype=float, count=len(live))
    return idx, p


def _sequence(model: Model, idx: np.ndarray, p: np.ndarray, group_min_p: float) -> tuple[np.ndarray, np.ndarray]:
    """:func:`repair_sequence` of the live suspects ``idx`` (probabilities ``p``), as hypothesis positions and
    their probabilities.

    The same order as :func:`repair_order` over the group, then over the
    rest, keeping the repairable steps: the unrepairable ones only ever
    come last there, and are dropped.
    """
    repairs = _repairs_of(model)
    id_rank = hypotheses_of(model).id_rank
    known = idx >= 0
    keep = known.copy()
    keep[known] = repairs.repairable[idx[known]]
    idx, p = idx[keep], p[keep]
    parts_idx, parts_p = [], []
    for part in (p >= group_min_p, p < group_min_p):
        i, q = idx[part], p[part]
        order = _kadane_simon_ranked(id_rank[i], q, repairs.full[i])
        parts_idx.append(i[order])
        parts_p.append(q[order])
    return np.concatenate(parts_idx), np.concatenate(parts_p)


def repair_sequence(model: Model, ranked, group_min_p: float) -> tuple[str, ...]:
    """Every repairable unrepaired suspect, in the order they would be repaired.

    The ambiguity group (P >= ``group_min_p``) first in :func:`repair_order`,
    then the other suspects with P > :data:`CLEARED_P` in the same order.
    The first entry is the next repair; the expected cost of repair sums
    over the whole sequence.
    """
    ids = hypotheses_of(model).ids
    seq, _ = _sequence(model, *_live(model, ranked), group_min_p)
    return tuple(ids[i] for i in seq.tolist())


def next_repair(model: Model, ranked, group_min_p: float) -> str | None:
    """The root to repair next: the first of :func:`repair_sequence`, or None when none is left.

    Parameters
    ----------
    model : Model
    ranked : tuple of Suspect
        The suspects, most probable first (repaired ones marked).
    group_min_p : float
        The ambiguity-group threshold.

    References
    ----------
    Kadane & Simon 1977 (order by probability over cost).
    """
    sequence = repair_sequence(model, ranked, group_min_p)
    return sequence[0] if sequence else None


# ---------------------------------------------------------------- expected cost of repair


@dataclass(frozen=True)
class RepairPlan:
    """Expected cost of repairing from here, in the repair order, with escalation as the way out.

    Attributes
    ----------
    sequence : tuple of str
        The repairs in order (:func:`repair_sequence`).
    cost_of_stopping_after : tuple of float
        Entry k: expected cost of making the first k repairs of the sequence,
        each verified, and escalating if the unit still fails (k = 0:
        escalating at once). With no escalation price, only the last entry
        (every repair, nothing after) is finite.
    outside_p : float
        P(the fault is not put right by any repair of the sequence), one
        fault assumed among the live suspects.
    reached : tuple of float
        Entry k: P(the unit still fails after the first k repairs), the
        chance that repair k + 1 is made (entry 0 is 1; the last is
        ``outside_p``).
    diagnosed_after_first : float
        Expected cost of making the first repair and, if the unit still
        fails, diagnosing again (``advice.policy.cost_of_repair_then``); inf
        when not weighed. Finishing by repairs costs the least of it and the
        entries k >= 1.
    """

    sequence: tuple[str, ...]
    cost_of_stopping_after: tuple[float, ...]
    outside_p: float
    reached: tuple[float, ...] = ()
    diagnosed_after_first: float = math.inf

    @property
    def repair_cost(self) -> float:
        """Least expected cost of finishing that starts with a repair (inf if there is none)."""
        costs = self.cost_of_stopping_after[1:]
        return min(min(costs) if costs else math.inf, self.diagnosed_after_first)

    @property
    def escalate_cost(self) -> float:
        """Expected cost of escalating at once."""
        return self.cost_of_stopping_after[0]

    @property
    def going_on(self) -> float:
        """Least expected cost of finishing by repairs first (escalating later, if priced); escalating at
        once only when nothing is left to repair. What a check is weighed against: one step ahead
        undervalues a run of checks, so handing over at once is weighed only when no check pays."""
        return self.repair_cost if math.isfinite(self.repair_cost) else self.best

    @property
    def best(self) -> float:
        """Least expected cost to finish by repairing and escalating (no more checks before the first repair)."""
        return min(min(self.cost_of_stopping_after), self.diagnosed_after_first)


def repair_plan(model: Model, ranked, group_min_p: float, escalation_cost: float | None) -> RepairPlan:
    """Expected cost of finishing by repairs in order, escalating after k of them.

    Parameters
    ----------
    model : Model
    ranked : tuple of Suspect
        Every hypothesis with P(failed | findings) (repaired ones marked).
    group_min_p : float
    escalation_cost : float or None
        What escalating costs; None: escalation has no price, so repairing
        never stops for it (every entry but the last is infinite).

    Notes
    -----
    With the suspects not yet repaired (P > CLEARED_P) renormalised to a
    single fault, q_i, and the repairs in the order of
    :func:`repair_sequence`, stopping after k repairs costs

        sum_(j<=k) (c_j + v_j) (1 - sum_(i<j) q_i)  +  E (1 - sum_(i<=k) q_i)

    repair j (cost c_j, its verification v_j: the repair's own check, if
    any, and the unit itself) is reached only if none of the earlier ones
    was the fault; escalation (cost E) puts right whatever is left. The
    mass left after every repair is the cause outside the model (and any
    suspect with no repair). Without a price for escalation the last entry
    leaves that mass out, as the 1.0 tool did.

    References
    ----------
    Kadane & Simon 1977; Heckerman, Breese & Rommelse 1995 (expected cost of repair).
    """
    return _plan(model, *_live(model, ranked), group_min_p, escalation_cost)


def repair_plan_of(posterior: AnyPosterior, group_min_p: float, escalation_cost: float | None) -> RepairPlan:
    """``repair_plan(model, suspects(posterior), ...)``, the same figures, without a Suspect per hypothesis.

    The policy weighs a plan for every outcome of every check it looks
    ahead at; on a large model building the suspect list cost most of a
    decision.
    """
    order, p, repaired = ranked_marginals(posterior)
    live = ~repaired & (p > CLEARED_P)
    return _plan(posterior.model, order[live], p[live], group_min_p, escalation_cost)


def _plan(model: Model, idx: np.ndarray, p: np.ndarray, group_min_p: float,
          escalation_cost: float | None) -> RepairPlan:
    """:func:`repair_plan` of the live suspects: hypothesis positions ``idx`` (-1: not in the model) and
    probabilities ``p``, in ranked order."""
    # Python's sum over the ranked order, as the suspects were always added up:
    # the same float, bit for bit, on every Python version.
    total = sum(p.tolist())
    seq_idx, seq_p = _sequence(model, idx, p, group_min_p)
    ids = hypotheses_of(model).ids
    sequence = tuple(ids[i] for i in seq_idx.tolist())
    if total <= 0.0:
        return RepairPlan(sequence, (0.0,) * (len(sequence) + 1), 0.0, (0.0,) * (len(sequence) + 1))
    q = seq_p / total
    reached = 1.0 - np.concatenate(([0.0], np.cumsum(q)))  # P(repair j+1 is reached); last: after all
    return _costs(sequence, _repairs_of(model).full[seq_idx], reached, escalation_cost)


def plan_from_reached(model: Model, sequence: tuple[str, ...], reached, escalation_cost: float | None) -> RepairPlan:
    """The plan's costs from the chance that the unit still fails after each prefix of ``sequence``.

    ``reached[k]``: P(still failing after the first k repairs), k = 0 .. len(sequence).
    """
    index = hypotheses_of(model).index
    full = _repairs_of(model).full[np.fromiter((index[r] for r in sequence), dtype=np.int64, count=len(sequence))]
    return _costs(sequence, full, reached, escalation_cost)


def _costs(sequence: tuple[str, ...], full: np.ndarray, reached, escalation_cost: float | None) -> RepairPlan:
    reached = np.clip(np.asarray(reached, dtype=float), 0.0, 1.0)
    reached[reached <= CLEARED_P] = 0.0
    spent = np.concatenate(([0.0], np.cumsum(reached[:-1] * full)))
    outside = float(reached[-1])
    if escalation_cost is None:
        stops = np.full(len(sequence) + 1, math.inf)
        stops[-1] = spent[-1]
    else:
        stops = spent + escalation_cost * reached
    return RepairPlan(sequence, tuple(stops.tolist()), outside, tuple(reached.tolist()))
