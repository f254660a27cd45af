"""What the findings say about the faults: suspects, remaining uncertainty, the
most probable explanation, isolation and the ambiguity group.

The repair order lives in :mod:`troubleshoot.advice.repair`, the decision in
:mod:`troubleshoot.advice.policy`.

Pure functions of a :class:`~troubleshoot.engine.inference.Posterior` (and, for the
most probable explanation, the :class:`~troubleshoot.engine.inference.Engine` that
made it).

References
----------
J. de Kleer and B. C. Williams, "Diagnosing multiple faults", Artificial
Intelligence 32(1), 1987 (entropy of the fault hypotheses).
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

#: The most probable explanation search gives up (and says so) after this many propagations.
MPE_MAX_PROPAGATIONS = 2000
#: Single-fault states tried first to give the search a bound.
SEED_GUESSES = 5


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
        joint, table = posterior.check_likelihood(f.target, epoch=f.epoch)
        lik = table[:, f.outcome]
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
        False when the search stopped at its propagation bound: ``failed``
        is then the best state found, not proven the best.
    propagations : int
        Propagations the search used.
    """

    failed: tuple[str, ...]
    p: float
    exact: bool
    propagations: int


def most_probable_explanation(engine: Engine, posterior: Posterior,
                              max_propagations: int = MPE_MAX_PROPAGATIONS) -> Explanation:
    """The joint state of every root with the highest posterior, found exactly.

    Parameters
    ----------
    engine : Engine
        The engine that made ``posterior``.
    posterior : Posterior
    max_propagations : int
        Bound on the work; the result says whether it was proven best.

    Notes
    -----
    Depth-first branch and bound over the roots, each node one propagation
    with exact findings on the roots assigned so far. The propagation of a
    partial assignment A gives P(A | e) and the conditional marginals
    P(F_j | A, e); any completion f of A has P(f | e) <= P(A | e) *
    P(F_j = f_j | A, e) for every unassigned j. So once a state of
    probability p* is known, a root whose value v has P(A|e) P(F_j=v|A,e)
    <= p* must take the other value (one propagation fixes all such roots),
    and a branch whose bound is <= p* is cut without propagating. The first
    leaf is the greedy state (likelier value first, most uncertain root
    first), unless a few cheap guesses tried first (every root at its
    likelier value; each of the five likeliest suspects as the only fault)
    already bound it. The search is exact when it finishes within the
    propagation bound.

    References
    ----------
    Pearl 1988, section 5.3 (most probable explanation); A. H. Land and
    A. G. Doig, Econometrica 28(3), 1960 (branch and bound).
    """
    model = posterior.model
    roots = model.hypotheses
    log_pe = posterior.log_p
    base = tuple(posterior.findings)
    repairs = tuple(posterior.repairs)
    best_assign: dict[str, int] | None = None
    best_p = 0.0
    used = 0
    exhausted = False

    def propagate(assign: dict[str, int]) -> Posterior | None:
        nonlocal used, exhausted
        if used >= max_propagations:
            exhausted = True
            return None
        used += 1
        extra = tuple(Finding(r, v, 0) for r, v in assign.items())
        try:
            return engine.propagate(base + extra, repairs)
        except ImpossibleFindings:
            return None

    def visit(assign: dict[str, int], post: Posterior) -> None:
        nonlocal best_assign, best_p
        if exhausted:
            return
        p_assign = math.exp(post.log_p - log_pe)
        if best_assign is not None and p_assign <= best_p:
            return
        q = post.root_marginals()
        forced: dict[str, int] = {}
        free: list[tuple[float, int, str, float]] = []
        for j, r in enumerate(roots):
            if r in assign:
                continue
            qj = float(q[j])
            can_fail = qj > 0.0 and (best_assign is None or p_assign * qj > best_p)
            can_work = qj < 1.0 and (best_assign is None or p_assign * (1.0 - qj) > best_p)
            if not can_fail and not can_work:
                return
            if not can_fail:
                forced[r] = 0
            elif not can_work:
                forced[r] = 1
            else:
                free.append((-min(qj, 1.0 - qj), j, r, qj))
        if forced:
            new = {**assign, **forced}
            child = propagate(new)
            if child is not None:
                visit(new, child)
            return
        if not free:
            best_assign, best_p = dict(assign), p_assign
            return
        free.sort()
        _, _, r, qj = free[0]
        values = (1, 0) if qj > 0.5 else (0, 1)
        for v in values:
            bound = p_assign * (qj if v == 1 else 1.0 - qj)
            if bound <= 0.0 or (best_assign is not None and bound <= best_p):
                continue
            new = {**assign, r: v}
            child = propagate(new)
            if child is not None:
                visit(new, child)

    # A good first bound makes the search prune from the root: the state with
    # every root at its likelier value, and each of the likeliest suspects as
    # the only fault. Any state will do for soundness; these are cheap guesses.
    q0 = posterior.root_marginals()
    order = sorted(range(len(roots)), key=lambda j: (-float(q0[j]), roots[j]))
    guesses = [{r: int(q0[j] > 0.5) for j, r in enumerate(roots)}]
    guesses += [{r: int(r == roots[k]) for r in roots} for k in order[:SEED_GUESSES]]
    for guess in guesses:
        if used >= max_propagations // 2:
            break
        post = propagate(guess)
        if post is not None:
            p_guess = math.exp(post.log_p - log_pe)
            if p_guess > best_p:
                best_assign, best_p = guess, p_guess
    visit({}, posterior)
    failed = tuple(r for r in roots if best_assign and best_assign.get(r) == 1)
    return Explanation(failed, best_p, not exhausted and best_assign is not None, used)


def isolated_suspect(ranked: tuple[Suspect, ...], threshold: float) -> Suspect | None:
    """The suspect (not yet repaired) whose posterior reaches the isolation threshold, if any."""
    for s in ranked:
        if not s.repaired and s.p >= threshold:
            return s
    return None


def ambiguity_group(ranked: tuple[Suspect, ...], min_p: float) -> tuple[Suspect, ...]:
    """Suspects not yet repaired with P(failed | findings) >= min_p, most probable first."""
    return tuple(s for s in ranked if not s.repaired and s.p >= min_p)
