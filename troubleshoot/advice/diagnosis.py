"""What the findings say about the faults: suspects, remaining uncertainty, the
most probable explanation, isolation, the ambiguity group and the repair order.

Pure functions of a :class:`~troubleshoot.engine.inference.Posterior` (and, for the
most probable explanation, the :class:`~troubleshoot.engine.inference.Engine` that
made it).

References
----------
J. de Kleer and B. C. Williams, "Diagnosing multiple faults", Artificial
Intelligence 32(1), 1987 (entropy of the fault hypotheses).
J. B. Kadane and H. A. Simon, "Optimal strategies for a class of constrained
sequential problems", Annals of Statistics 5(2), 1977 (repair in order of
probability over cost).
D. Heckerman, J. S. Breese and K. Rommelse, "Decision-theoretic
troubleshooting", Communications of the ACM 38(3), 1995.
J. Pearl, *Probabilistic Reasoning in Intelligent Systems*, 1988, section 5.3
(most probable explanation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from troubleshoot.errors import ImpossibleFindings
from troubleshoot.engine.inference import Engine, Finding, Posterior
from troubleshoot.model import DERIVED, Model
from troubleshoot.advice.ranking import rank



@dataclass(frozen=True)
class Suspect:
    """One hypothesis (root event) and its posterior probability of having failed."""

    id: str
    label: str
    p: float
    repaired: bool = False
    unlisted: bool = False


def is_unlisted(model: Model, root_id: str) -> bool:
    """True for the root standing for a gate's causes outside the model."""
    return root_id not in model.event_by_id and root_id.endswith(DERIVED + "unlisted")


def suspects(posterior: Posterior) -> tuple[Suspect, ...]:
    """Every hypothesis ranked by P(failed | findings), most probable first (ties by id).

    A repaired root keeps the probability that it *was* failed before the
    repair (the findings before the repair still speak of it) and is marked
    ``repaired``.
    """
    model = posterior.model
    repaired = set(posterior.repairs)
    ps = posterior.root_marginals()
    out = [Suspect(r, model.label_of(r), float(p), r in repaired, is_unlisted(model, r))
           for r, p in zip(model.hypotheses, ps)]
    out.sort(key=lambda s: (-s.p, s.id))
    return tuple(out)


def _expected_log(weights: np.ndarray, probabilities: np.ndarray) -> float:
    """sum w * log p over w > 0, with 0 log 0 = 0 and no NaN."""
    weights = np.asarray(weights, float)
    probabilities = np.asarray(probabilities, float)
    use = (weights > 0) & (probabilities > 0)
    return float(np.sum(weights[use] * np.log(probabilities[use])))


def entropy_bits(posterior: Posterior) -> float:
    """Remaining uncertainty H(F | findings) over the root events, in bits, exactly.

    Notes
    -----
    P(f | e) = prod_i prior(f_i) * prod_t P(t | c_t(f)) / P(e) for every f
    consistent with the exact observations, so

        H(F|e) = log P(e) - sum_i E[log prior(F_i)] - sum_t E[log P(t | c_t)]

    with the expectations over the posterior: the root marginals for the
    priors, and each observed check's family at the epoch it was made for
    its likelihood. Exact observations of events or gates contribute
    log 1 = 0 on the states they allow. Every term is one propagation's
    by-product.

    References
    ----------
    de Kleer & Williams 1987; Cover & Thomas 2006 (entropy, chain rule).
    """
    model = posterior.model
    q = posterior.root_marginals()
    prior = np.array([model.prior_of(r) for r in model.hypotheses])
    e_log_prior = _expected_log(q, prior) + _expected_log(1.0 - q, 1.0 - prior)
    e_log_lik = 0.0
    for f in posterior.findings:
        if f.target not in model.check_by_id:
            continue
        joint, p_abnormal = posterior.check_family(f.target, epoch=f.epoch)
        lik = p_abnormal if f.outcome == 1 else 1.0 - p_abnormal
        e_log_lik += _expected_log(joint, lik)
    nats = posterior.log_p - e_log_prior - e_log_lik
    bits = nats / math.log(2.0)
    return 0.0 if -1e-9 < bits < 0.0 else bits


@dataclass(frozen=True)
class Explanation:
    """The most probable joint state of the root events given the findings.

    Attributes
    ----------
    failed : tuple of str
        The roots failed in that state (in ``model.hypotheses`` order).
    p : float
        Its posterior probability P(f | findings).
    exact : bool
        True: the state is proven the most probable (the max pass is exact
        and always finishes). Kept so a future bounded search can say when
        it stopped early.
    propagations : int
        Passes the search used (one max pass).
    """

    failed: tuple[str, ...]
    p: float
    exact: bool
    propagations: int


def most_probable_explanation(engine: Engine, posterior: Posterior) -> Explanation:
    """The joint state of every root with the highest posterior, found exactly in one pass.

    Parameters
    ----------
    engine : Engine
        The engine that made ``posterior`` (kept for the callers' signature).
    posterior : Posterior
        A join-tree or compiled posterior.

    Notes
    -----
    On the join tree it is one max-product collect pass and a decoding walk
    (Dawid 1992): the gates are functions of the roots, so the best joint
    state of all variables carries the best state of the roots. On the
    compiled diagram it is one max pass over the evidence diagram, whose
    leaves hold the checks' noise already summed out. Either costs about one
    propagation, needs no search (no branch is ever tried, so an impossible
    one costs nothing) and its memory does not depend on the number of roots
    assigned.

    References
    ----------
    Pearl 1988, section 5.3 (most probable explanation); A. P. Dawid,
    Statistics and Computing 2, 1992 (max-propagation).
    """
    failed, p = posterior.most_probable_state()
    return Explanation(failed, p, True, 1)


def isolated_suspect(ranked: tuple[Suspect, ...], threshold: float) -> Suspect | None:
    """The suspect (not yet repaired) whose posterior reaches the isolation threshold, if any."""
    for s in ranked:
        if not s.repaired and s.p >= threshold:
            return s
    return None


def ambiguity_group(ranked: tuple[Suspect, ...], min_p: float) -> tuple[Suspect, ...]:
    """Suspects not yet repaired with P(failed | findings) >= min_p, most probable first."""
    return tuple(s for s in ranked if not s.repaired and s.p >= min_p)


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
        p / cost per cost unit (infinite for a free repair); None without a repair.
    repair_label : str or None
    note : str or None
        Why the entry is last (no repair listed; cause outside the model).
    """

    id: str
    label: str
    p: float
    cost: float | None
    ratio: float | None
    repair_label: str | None
    note: str | None = None


def repair_order(model: Model, group: tuple[Suspect, ...]) -> tuple[RepairStep, ...]:
    """Repairs in order of P(failed) / repair cost, descending; suspects without a repair last.

    Notes
    -----
    With a single fault among the suspects and each repair followed by a
    check of the unit, repairing in decreasing p / cost minimises the
    expected cost (Kadane & Simon 1977; Heckerman, Breese & Rommelse 1995).
    An unlisted-cause event has no repair (the cause is outside the model):
    it is listed after every repairable suspect, with a note, as is a basic
    event whose model lists no repair. Ties go by higher p, then id.

    References
    ----------
    Kadane & Simon 1977; Heckerman, Breese & Rommelse 1995.
    """
    repairable, other = [], []
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
        ratio = s.p / cost if cost > 0 else math.inf
        repairable.append(RepairStep(s.id, s.label, s.p, cost, ratio, repair.label))
    repairable.sort(key=lambda r: (-r.ratio, -r.p, r.id))
    other.sort(key=lambda r: (-r.p, r.id))
    return tuple(repairable + other)


# ---------------------------------------------------------------- verification and value

@dataclass(frozen=True)
class VerificationRequest:
    """What to check after the last repair to confirm it."""

    target: str  # the repair's verify check, or the top event
    label: str
    cost: float
    outcomes: tuple[str, str]  # (works / normal, still fails / abnormal)
    instructions: str = ""
    caution: str | None = None



def verification_for(model: Model, repaired: str) -> VerificationRequest:
    """The first check after a repair of ``repaired``: its ``verify`` check, else the top event."""
    event = model.event_by_id.get(repaired)
    verify = event.repair.verify if event is not None and event.repair is not None else None
    if verify is not None and verify in model.check_by_id:
        check = model.check_by_id[verify]
        return VerificationRequest(check.id, check.label, float(check.cost), tuple(check.outcomes),
                                   check.instructions, check.caution)
    return top_verification(model)


def top_verification(model: Model) -> VerificationRequest:
    """Checking the unit itself after a repair ("does it work now?"), which alone confirms it."""
    v = model.verification
    if v is None:
        return VerificationRequest(model.top, f"does the unit work now? ({model.label_of(model.top)})",
                                   0.0, ("works", "still fails"))
    return VerificationRequest(model.top, v.label, float(v.cost), tuple(v.outcomes), v.instructions)


def verification_of(model: Model, target: str, repaired: str) -> VerificationRequest:
    """The verification a recorded verification finding on ``target`` answered."""
    return top_verification(model) if target == model.top else verification_for(model, repaired)


def expected_repair_cost(posterior: Posterior) -> float:
    """Expected cost of repairing now, in the repair order, each repair verified, one fault assumed.

    Notes
    -----
    With the suspects not yet repaired (P > 1e-12) renormalised to a single
    fault, p_i, and the repairs in the order of :func:`repair_order`, the
    expected cost is sum_j (c_j + v_j) * (1 - sum_(i<j) p_i): repair j (cost
    c_j, its verification v_j: the repair's own check, if any, and the unit
    itself) is reached only if none of the earlier ones was the fault.
    Suspects with no repair (unlisted causes) are passed over. Whole arrays:
    it runs several times per action.

    References
    ----------
    Kadane & Simon 1977; Heckerman, Breese & Rommelse 1995 (expected cost of repair).
    """
    model = posterior.model
    table = _repair_table(model)
    p = posterior.root_marginals()
    live = p > 1e-12
    for r in posterior.repairs:
        live[table.index[r]] = False
    total = float(p[live].sum())
    if total <= 0.0:
        return 0.0
    cand = np.flatnonzero(live & table.repairable)
    if cand.size == 0:
        return 0.0
    pc, cost = p[cand], table.repair_cost[cand]
    with np.errstate(divide="ignore"):
        ratio = np.where(cost > 0, pc / np.where(cost > 0, cost, 1.0), np.inf)
    order = cand[np.lexsort((table.id_rank[cand], -pc, -ratio))]
    q = p[order] / total
    before = 1.0 - np.concatenate(([0.0], np.cumsum(q)[:-1]))  # P(repair j is reached)
    reached = np.concatenate(([True], before[1:] > 1e-12))
    return float(np.sum(before[reached] * table.full_cost[order][reached]))


@dataclass(frozen=True)
class _RepairTable:
    index: dict
    repairable: np.ndarray
    repair_cost: np.ndarray
    full_cost: np.ndarray  # repair + its verification (own check, then the unit)
    id_rank: np.ndarray


_REPAIR_TABLES: dict[int, tuple] = {}


def _repair_table(model: Model) -> _RepairTable:
    """Per-hypothesis repair costs as arrays, built once per model."""
    hit = _REPAIR_TABLES.get(id(model))
    if hit is not None and hit[0]() is model:
        return hit[1]
    import weakref

    hyps = model.hypotheses
    top_cost = top_verification(model).cost
    repairable, repair_cost, full_cost = [], [], []
    for h in hyps:
        event = model.event_by_id.get(h)
        repair = event.repair if event is not None else None
        repairable.append(repair is not None)
        cost = float(repair.cost) if repair is not None else 0.0
        repair_cost.append(cost)
        if repair is None:
            full_cost.append(0.0)
            continue
        verify = verification_for(model, h)
        full_cost.append(cost + verify.cost + (top_cost if verify.target != model.top else 0.0))
    id_rank = np.empty(len(hyps), dtype=np.int64)
    id_rank[np.argsort(np.array(hyps, dtype=object), kind="stable")] = np.arange(len(hyps))
    table = _RepairTable({h: i for i, h in enumerate(hyps)}, np.array(repairable, dtype=bool),
                         np.array(repair_cost), np.array(full_cost), id_rank)
    _REPAIR_TABLES[id(model)] = (weakref.ref(model), table)
    return table


def expected_cost_ahead(engine: Engine, posterior: Posterior, candidates: tuple[str, ...], depth: int,
                        breadth: int, min_bits: float) -> float:
    """Least expected cost from here looking ``depth`` checks ahead, then repairing.

    min(ECR(e), min over the ``breadth`` best-scoring informative checks t of
    cost(t) + sum_o P(o | e) * expected_cost_ahead(e + o, depth - 1)); at
    depth 0 it is ECR(e), :func:`expected_repair_cost`.

    References
    ----------
    Heckerman, Breese & Rommelse 1995 (observation versus repair; the
    myopic rule is depth 1).
    """
    best = expected_repair_cost(posterior)
    if depth <= 0:
        return best
    for row in rank(posterior, candidates).worth_doing(min_bits)[:breadth]:
        best = min(best, cost_of_check_then(engine, posterior, row.check, row.cost, row.p_outcomes,
                                            candidates, depth, breadth, min_bits, bound=best))
    return best


def cost_of_check_then(engine: Engine, posterior: Posterior, check_id: str, cost: float,
                       p_outcomes: tuple[float, float], candidates: tuple[str, ...], depth: int,
                       breadth: int, min_bits: float, bound: float = math.inf) -> float:
    """Expected cost of doing a check now and then the best of ``depth - 1`` more checks or repairing.

    Stops adding once the sum reaches ``bound`` (the caller only needs to
    know it is not below it). One propagation per outcome at each level.
    """
    total = cost
    rest = tuple(c for c in candidates if c != check_id)
    findings = tuple(posterior.findings)
    for outcome, p in enumerate(p_outcomes):
        if p <= 0.0:
            continue
        try:
            later = engine.propagate(findings + (Finding(check_id, outcome, posterior.epoch),), posterior.repairs)
        except ImpossibleFindings:
            continue
        total += p * expected_cost_ahead(engine, later, rest, depth - 1, breadth, min_bits)
        if total >= bound:
            return total
    return total
