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

from troubleshoot.engine.inference import AnyPosterior, Engine
from troubleshoot.advice.ties import ordered_by
from troubleshoot.model import DERIVED, Model



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


def suspects(posterior: AnyPosterior) -> tuple[Suspect, ...]:
    """Every hypothesis ranked by P(failed | findings), most probable first.

    Probabilities within the tie tolerance (:mod:`troubleshoot.advice.ties`)
    are equal, and the id orders them, whatever the model's event order.

    A repaired root keeps the probability that it *was* failed before the
    repair (the findings before the repair still speak of it) and is marked
    ``repaired``.
    """
    model = posterior.model
    repaired = set(posterior.repairs)
    ps = posterior.root_marginals()
    out = [Suspect(r, model.label_of(r), float(p), r in repaired, is_unlisted(model, r))
           for r, p in zip(model.hypotheses, ps)]
    return tuple(ordered_by(out, lambda s: s.p, lambda s: s.id))


def _expected_log(weights: np.ndarray, probabilities: np.ndarray) -> float:
    """sum w * log p over w > 0, with 0 log 0 = 0 and no NaN."""
    weights = np.asarray(weights, float)
    probabilities = np.asarray(probabilities, float)
    use = (weights > 0) & (probabilities > 0)
    return float(np.sum(weights[use] * np.log(probabilities[use])))


def entropy_bits(posterior: AnyPosterior) -> float:
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


def most_probable_explanation(engine: Engine, posterior: AnyPosterior) -> Explanation:
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
