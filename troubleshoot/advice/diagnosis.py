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
from troubleshoot.advice.ties import tie_ranks
from troubleshoot.model import DERIVED, Model



@dataclass(frozen=True)
class Suspect:
    """One hypothesis (root event) and its posterior probability of having failed."""

    id: str
    label: str
    p: float
    repaired: bool = False
    unlisted: bool = False
    #: A condition of an inhibit gate with no repair (:func:`is_condition`): not a fault.
    condition: bool = False

    @property
    def in_question(self) -> bool:
        """A fault still in question: not repaired, and not an inhibit gate's condition."""
        return not self.repaired and not self.condition


def is_unlisted(model: Model, root_id: str) -> bool:
    """True for the root standing for a gate's causes outside the model."""
    return root_id not in model.event_by_id and root_id.endswith(DERIVED + "unlisted")


def condition_events(model: Model) -> frozenset[str]:
    """The basic events that are only conditions of inhibit gates and have no repair.

    Such an event (a demand peak, a season, an operating mode) makes its
    gate's input matter; it is not a failure and nothing repairs it, so it
    is no suspect to isolate, to put in a repair order or to count as fault
    left unrepaired: the fault is the gate's input, which has the repair.
    Found once per model.

    References
    ----------
    W. E. Vesely et al., *Fault Tree Handbook*, NUREG-0492, 1981, chapter
    IV (the inhibit gate and its conditioning event).
    """
    found = model.__dict__.get("_advice_conditions")
    if found is None:
        as_input = {i for g in model.gates for i in g.inputs}
        found = frozenset(g.condition for g in model.gates
                          if g.condition and g.condition not in as_input and g.condition in model.event_by_id
                          and model.event_by_id[g.condition].repair is None)
        model.__dict__["_advice_conditions"] = found
    return found


def is_condition(model: Model, root_id: str) -> bool:
    """True for a basic event that is only an inhibit gate's condition, with no repair (:func:`condition_events`)."""
    return root_id in condition_events(model)


@dataclass(frozen=True)
class Hypotheses:
    """What the suspect list reads of every hypothesis, in ``model.hypotheses`` order, derived once per model.

    Attributes
    ----------
    ids, labels : tuple of str
    index : dict
        Hypothesis id -> its position.
    id_rank : numpy.ndarray of int
        Position of each id in the ids sorted as Python compares strings,
        so a numpy sort by (figure, id_rank) orders exactly as a sort by
        (figure, id).
    unlisted : tuple of bool
        The roots standing for causes outside the model (:func:`is_unlisted`).
    condition : numpy.ndarray of bool
        The inhibit gates' conditions with no repair (:func:`is_condition`).
    priors : numpy.ndarray
        The prior failure probability of each (``model.prior_of``).
    """

    ids: tuple[str, ...]
    labels: tuple[str, ...]
    index: dict[str, int]
    id_rank: np.ndarray
    unlisted: tuple[bool, ...]
    condition: np.ndarray
    priors: np.ndarray


def hypotheses_of(model: Model) -> Hypotheses:
    """The model's :class:`Hypotheses`, built on first use and kept beside the model's own lookups.

    The policy lists the suspects for every outcome it weighs; the labels,
    id order and flags do not depend on the findings, so they are derived
    once (in the model's ``__dict__``, as its cached lookups are).
    """
    table = model.__dict__.get("_advice_hypotheses")
    if table is None:
        ids = model.hypotheses
        id_rank = np.empty(len(ids), dtype=np.int64)
        id_rank[sorted(range(len(ids)), key=ids.__getitem__)] = np.arange(len(ids))
        table = Hypotheses(ids, tuple(model.label_of(r) for r in ids), {r: i for i, r in enumerate(ids)},
                           id_rank, tuple(is_unlisted(model, r) for r in ids),
                           np.array([is_condition(model, r) for r in ids], dtype=bool),
                           np.array([model.prior_of(r) for r in ids]))
        for shared in (table.id_rank, table.condition, table.priors):
            shared.flags.writeable = False  # every posterior of the model reads them
        model.__dict__["_advice_hypotheses"] = table
    return table


def ranked_marginals(posterior: AnyPosterior) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The hypotheses in :func:`suspects` order, without building a :class:`Suspect` each.

    Returns
    -------
    order : numpy.ndarray of int
        Positions in ``model.hypotheses``, most probable first (ties within
        the tolerance by id, as :func:`~troubleshoot.advice.ties.ordered_by`).
    p : numpy.ndarray
        P(failed | findings) in that order.
    repaired : numpy.ndarray of bool
        Whether each, in that order, has been repaired.
    """
    table = hypotheses_of(posterior.model)
    ps = np.asarray(posterior.root_marginals(), dtype=float)
    # ordered_by's sort by (tie rank, id), as one numpy sort (last key first).
    order = np.lexsort((table.id_rank, tie_ranks(ps)))
    repaired = np.zeros(len(ps), dtype=bool)
    for r in set(posterior.repairs):
        i = table.index.get(r)
        if i is not None:
            repaired[i] = True
    return order, ps[order], repaired[order]


_SUSPECT_FIELDS = ("id", "label", "p", "repaired", "unlisted", "condition")


def suspects(posterior: AnyPosterior) -> tuple[Suspect, ...]:
    """Every hypothesis ranked by P(failed | findings), most probable first.

    Probabilities within the tie tolerance (:mod:`troubleshoot.advice.ties`)
    are equal, and the id orders them, whatever the model's event order.

    A repaired root keeps the probability that it *was* failed before the
    repair (the findings before the repair still speak of it) and is marked
    ``repaired``.
    """
    table = hypotheses_of(posterior.model)
    order, ps, repaired = ranked_marginals(posterior)
    ids, labels, unlisted, condition = table.ids, table.labels, table.unlisted, table.condition.tolist()
    out = []
    # One Suspect per hypothesis (50,000 on the largest benchmark tree): filling
    # the instance dictionary skips the frozen dataclass's per-field
    # object.__setattr__ calls (as ranking._new_row does); the Suspect is the same.
    new = object.__new__
    for i, p, done in zip(order.tolist(), ps.tolist(), repaired.tolist()):
        s = new(Suspect)
        s.__dict__.update(zip(_SUSPECT_FIELDS, (ids[i], labels[i], p, done, unlisted[i], condition[i])))
        out.append(s)
    return tuple(out)


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
    prior = hypotheses_of(model).priors
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
    """The suspect (not yet repaired, not a condition) whose posterior reaches the isolation threshold, if any."""
    for s in ranked:
        if s.in_question and s.p >= threshold:
            return s
    return None


def ambiguity_group(ranked: tuple[Suspect, ...], min_p: float) -> tuple[Suspect, ...]:
    """Suspects not yet repaired (conditions left out) with P(failed | findings) >= min_p, most probable first."""
    return tuple(s for s in ranked if s.in_question and s.p >= min_p)
