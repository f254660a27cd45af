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
from dataclasses import dataclass

import numpy as np

from troubleshoot.advice.ties import ordered_by
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
    p = np.asarray(p, float)
    cost = np.asarray(cost, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(cost > 0, p / np.where(cost > 0, cost, 1.0), np.inf)
    first = sorted(range(len(ids)), key=lambda i: (-ratio[i], ids[i]))
    out: list[int] = []
    group: list[int] = []
    for i in first:
        if group and not _tied(ratio[group[0]], ratio[i]):
            out += sorted(group, key=lambda j: ids[j])
            group = []
        group.append(i)
    out += sorted(group, key=lambda j: ids[j])
    return out


def _tied(a: float, b: float) -> bool:
    if math.isinf(a) or math.isinf(b):
        return a == b
    return abs(a - b) <= RATIO_TOLERANCE * max(abs(a), abs(b))


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


def repair_sequence(model: Model, ranked, group_min_p: float) -> tuple[str, ...]:
    """Every repairable unrepaired suspect, in the order they would be repaired.

    The ambiguity group (P >= ``group_min_p``) first in :func:`repair_order`,
    then the other suspects with P > :data:`CLEARED_P` in the same order.
    The first entry is the next repair; the expected cost of repair sums
    over the whole sequence.
    """
    first = [s for s in ranked if not s.repaired and s.p >= group_min_p and s.p > CLEARED_P]
    rest = [s for s in ranked if not s.repaired and CLEARED_P < s.p < group_min_p]
    out = []
    for part in (first, rest):
        out += [step.id for step in repair_order(model, tuple(part)) if step.cost is not None]
    return tuple(out)


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
    """

    sequence: tuple[str, ...]
    cost_of_stopping_after: tuple[float, ...]
    outside_p: float

    @property
    def repair_cost(self) -> float:
        """Least expected cost of finishing that starts with a repair (inf if there is none)."""
        costs = self.cost_of_stopping_after[1:]
        return min(costs) if costs else math.inf

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
        """Least expected cost to finish by repairing and escalating (no more checks)."""
        return min(self.cost_of_stopping_after)


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
    live = [s for s in ranked if not s.repaired and s.p > CLEARED_P]
    total = sum(s.p for s in live)
    sequence = repair_sequence(model, ranked, group_min_p)
    if total <= 0.0:
        return RepairPlan(sequence, (0.0,) * (len(sequence) + 1), 0.0)
    p_of = {s.id: s.p for s in ranked}
    q = np.array([p_of[r] / total for r in sequence], float)
    full = np.array([repair_cost(model, r) + verification_cost(model, r) for r in sequence], float)
    reached = 1.0 - np.concatenate(([0.0], np.cumsum(q)))  # P(repair j+1 is reached); last: after all
    reached = np.clip(reached, 0.0, 1.0)
    reached[reached <= CLEARED_P] = 0.0
    spent = np.concatenate(([0.0], np.cumsum(reached[:-1] * full)))
    outside = float(reached[-1])
    if escalation_cost is None:
        stops = np.full(len(sequence) + 1, math.inf)
        stops[-1] = spent[-1]
    else:
        stops = spent + escalation_cost * reached
    return RepairPlan(tuple(sequence), tuple(float(x) for x in stops), outside)
