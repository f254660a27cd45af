"""How a check responds to its causes: P(outcome | state of the causes), for K >= 2 outcomes.

The one place that says it. A check (or symptom) has K outcomes: the normal
one (index 0 in ``Check.outcomes``) and K - 1 abnormal ones, listed in the
declared dominance order (``Check.dominance_order``, weakest first); the
normal outcome is level 0 and the abnormal ones levels 1..K-1 in that order.
Each cause, when present, independently produces level l with its own
probability (what is left is level 0: "this cause is not seen"); the false
alarm (the leak) does the same whatever the causes; the check shows the
highest level produced (noisy-MAX). In cumulative form

    P(Y <= l | causes) = Q_leak(l) * prod over present causes i of Q_i(l),

with Q_i(l) = P(cause i alone produces a level <= l). With two outcomes this
is the noisy-OR with leak, P(abnormal) = 1 - (1 - leak) prod (1 - d_i).

Everything works on log Q (a vector of K - 1 numbers per cause, level K - 1
being certain), so causes that are one node multiply their Q, a cause that is
always present joins the leak, and a family's table over the joint states of
its m distinct causes is a sum of m broadcast vectors: no table of the causes
is ever built beyond the one the join tree already holds for them, and a
wide check is exported as a chain Y_j = max(Y_(j-1), what chunk j produces)
of nodes of bounded fan-in (:func:`max_table`).

Readers: the network (:mod:`troubleshoot.engine.network` builds a
:class:`CheckFamily` per check and epoch), the inference (a finding's
likelihood), the ranking (the table P(T | c)), the export (XMLBIF tables),
the simulator and the exact optimal policy (:func:`outcome_probabilities`,
:func:`sample_outcome`).

References
----------
J. Pearl, *Probabilistic Reasoning in Intelligent Systems*, 1988 (noisy-OR).
M. Henrion, "Some practical issues in constructing belief networks", UAI 1989 (leak).
F. J. Díez, "Parameter adjustment in Bayes networks. The generalized
noisy OR-gate", UAI 1993 (noisy-MAX, cumulative form).
D. Heckerman and J. Breese, "Causal independence for probability assessment
and inference using Bayesian networks", IEEE SMC 26(6), 1996 (exact
decomposition of causal independence).
"""

from __future__ import annotations

from dataclasses import dataclass
from collections.abc import Callable, Sequence

import numpy as np

from troubleshoot.model import Cause, Check


def levels(check: Check) -> tuple[int, ...]:
    """Outcome index of each level: level 0 is the normal outcome, then the dominance order.

    Examples
    --------
    Outcomes ("normal", "low", "high"), high dominating low, give (0, 1, 2).
    The levels are kept apart from the outcome indices so that a display
    order other than the dominance order needs no other change here.
    """
    return (0,) + tuple(check.outcomes.index(name) for name in check.dominance_order)


def distribution(check: Check, shows: Sequence[tuple[str, float]], total: float) -> np.ndarray:
    """P(outcome) over ``check.outcomes`` of one cause alone (or of the leak).

    ``shows`` gives (abnormal outcome, probability) pairs; empty, the whole
    ``total`` goes to the one abnormal outcome of a two-outcome check.
    """
    k = len(check.outcomes)
    p = np.zeros(k)
    if shows:
        for name, q in shows:
            p[check.outcomes.index(name)] += float(q)
    elif total:
        if k != 2:
            raise ValueError(f"check {check.id!r} has {k} outcomes: say which abnormal outcome each "
                             "probability gives")
        p[1] = float(total)
    p[0] = max(0.0, 1.0 - float(p[1:].sum()))
    return p


def _log_cdf(check: Check, shows, total: float) -> np.ndarray:
    """log P(level <= l) for l = 0..K-2 of one cause alone (or the leak).

    Computed from the tail (the abnormal probabilities above l) with log1p,
    so a detection of 1e-12 keeps its digits.
    """
    if not shows and len(check.outcomes) == 2:
        # Two outcomes, one probability: the tail is ``total`` itself (the
        # general path below gives the same number, at many small array calls).
        tail1 = min(float(total), 1.0)
        return np.array([np.log1p(-tail1) if tail1 < 1.0 else -np.inf])
    p = distribution(check, shows, total)[list(levels(check))]
    tail = np.cumsum(p[::-1])[::-1][1:]  # P(level > l), l = 0..K-2
    with np.errstate(divide="ignore"):
        return np.where(tail < 1.0, np.log1p(-np.minimum(tail, 1.0)), -np.inf)


def cause_log_cdf(check: Check, cause: Cause) -> np.ndarray:
    """log Q_i(l) of one cause, l = 0..K-2."""
    return _log_cdf(check, cause.shows, cause.detection)


def leak_log_cdf(check: Check) -> np.ndarray:
    """log Q_leak(l) of the false alarm, l = 0..K-2."""
    return _log_cdf(check, check.leak, check.false_alarm)


def table_from_log_cdf(log_cdf: np.ndarray, order: Sequence[int]) -> np.ndarray:
    """P(outcome) from log P(level <= l), l = 0..K-2 on the last axis; outcomes in check order.

    Each level's probability is a difference of cumulative probabilities,
    written as exp(a) * -expm1(b - a) so that neither a small level nor the
    top one (1 - P(<= K-2) = -expm1(log P(<= K-2))) loses digits.
    """
    log_cdf = np.asarray(log_cdf, dtype=float)
    k = len(order)
    full = np.concatenate([log_cdf, np.zeros(log_cdf.shape[:-1] + (1,))], axis=-1)
    by_level = np.empty(full.shape)
    by_level[..., 0] = np.exp(full[..., 0])
    with np.errstate(invalid="ignore"):
        for level in range(1, k):
            upper, lower = full[..., level], full[..., level - 1]
            step = -np.exp(upper) * np.expm1(lower - upper)
            by_level[..., level] = np.where(np.isneginf(upper), 0.0, step)
    out = np.empty(full.shape)
    out[..., list(order)] = by_level
    return out


def outcome_probabilities(check: Check, present: Sequence) -> np.ndarray:
    """P(outcome | which causes are present), for the simulator and the exact optimal policy.

    Parameters
    ----------
    check : Check
    present : sequence
        One bool (or bool array, all of one shape) per cause of ``check``,
        in ``check.causes`` order: whether that cause is present.

    Returns
    -------
    numpy.ndarray
        Shape ``shape(present[0]) + (K,)``, outcomes in ``check.outcomes`` order.
    """
    log_cdf = leak_log_cdf(check)
    shape = np.shape(present[0]) if len(present) else ()
    total = np.broadcast_to(log_cdf, shape + log_cdf.shape).copy()
    for cause, here in zip(check.causes, present):
        total = total + np.where(np.asarray(here, bool)[..., None], cause_log_cdf(check, cause), 0.0)
    return table_from_log_cdf(total, levels(check))


def sample_outcome(p: np.ndarray, u: float) -> int:
    """The outcome a uniform draw ``u`` picks from P(outcome), abnormal outcomes first.

    u below P(outcome 1) gives 1, below P(1) + P(2) gives 2, ..., otherwise
    0 (normal): with two outcomes, the abnormal one exactly when u < P(abnormal).
    """
    edge = 0.0
    for index in range(1, len(p)):
        edge += float(p[index])
        if u < edge:
            return index
    return 0


@dataclass(frozen=True)
class CheckFamily:
    """What one check reads at one epoch, after constants are folded.

    ``nodes`` are the distinct non-constant network nodes the causes stand
    on; ``log_cdfs[i]`` is log Q of node i (causes sharing a node multiply
    their Q); ``leak_log_cdf`` holds the false alarm and every cause that is
    always present; a cause that is never present is dropped. ``order``
    maps levels to outcome indices (:func:`levels`).
    """

    check: str
    epoch: int
    nodes: tuple[str, ...]
    log_cdfs: tuple[tuple[float, ...], ...]
    leak_log_cdf: tuple[float, ...]
    order: tuple[int, ...]

    @property
    def n_outcomes(self) -> int:
        return len(self.order)

    def _cached(self, key: str, make: Callable[[], np.ndarray]) -> np.ndarray:
        cached = self.__dict__.get(key)
        if cached is None:
            cached = make()
            cached.setflags(write=False)
            self.__dict__[key] = cached  # frozen dataclass: cache beside the fields
        return cached

    def log_cdf(self) -> np.ndarray:
        """log P(Y <= l | c), shape (2,)*m + (K-1,), C order over ``nodes`` (read-only, cached)."""
        def make():
            m = len(self.nodes)
            total = np.broadcast_to(np.array(self.leak_log_cdf), (1,) * m + (self.n_outcomes - 1,))
            for axis, values in enumerate(self.log_cdfs):
                shape = [1] * m + [self.n_outcomes - 1]
                shape[axis] = 2
                total = total + np.stack([np.zeros(len(values)), np.array(values)]).reshape(shape)
            return np.array(np.broadcast_to(total, (2,) * m + (self.n_outcomes - 1,)))
        return self._cached("_log_cdf", make)

    def likelihood(self) -> np.ndarray:
        """P(outcome | c), shape (2,)*m + (K,), outcomes in the check's order (read-only, cached)."""
        return self._cached("_likelihood", lambda: table_from_log_cdf(self.log_cdf(), self.order))

    def p_outcome(self, outcome: int) -> np.ndarray:
        """P(this outcome | c), shape (2,)*m."""
        return self.likelihood()[..., outcome]

    def p_normal(self) -> np.ndarray:
        """P(normal | c), shape (2,)*m."""
        return self.p_outcome(0)

    def p_abnormal(self) -> np.ndarray:
        """P(any abnormal outcome | c) = -expm1(log P(normal | c)), shape (2,)*m."""
        return self._cached("_p_abnormal", lambda: -np.expm1(self.log_cdf()[..., 0]))


def check_family(check: Check, epoch: int, node_of: Callable[[str], str | bool]) -> CheckFamily:
    """Fold a check's causes onto the network nodes they stand on at an epoch.

    Parameters
    ----------
    check : Check
    epoch : int
    node_of : callable
        Cause target -> its node id at that epoch, or True / False when
        the gate logic folded it to a constant (a repair held it working).
    """
    order = levels(check)
    leak = leak_log_cdf(check)
    nodes: list[str] = []
    log_cdfs: list[np.ndarray] = []
    for cause in check.causes:
        node = node_of(cause.target)
        if node is False:
            continue
        q = cause_log_cdf(check, cause)
        if node is True:
            leak = leak + q
        elif node in nodes:  # two causes that are one node: their Q multiply
            i = nodes.index(node)
            log_cdfs[i] = log_cdfs[i] + q
        else:
            nodes.append(node)
            log_cdfs.append(q)
    return CheckFamily(check.id, epoch, tuple(nodes), tuple(tuple(float(x) for x in q) for q in log_cdfs),
                       tuple(float(x) for x in leak), order)


def max_table(family: CheckFamily, chunk: Sequence[int], with_leak: bool, with_previous: bool) -> np.ndarray:
    """Table of one link of the exported chain Y_j = max(Y_(j-1), what causes ``chunk`` produce).

    Parameters
    ----------
    family : CheckFamily
    chunk : sequence of int
        Positions in ``family.nodes`` of this link's causes.
    with_leak : bool
        The first link also carries the leak.
    with_previous : bool
        The link reads the previous link (K states, outcome order) as its first parent.

    Returns
    -------
    numpy.ndarray
        P(Y_j | [Y_(j-1),] chunk causes), shape ([K,] + (2,)*len(chunk) + (K,)),
        every state in the check's outcome order.

    Notes
    -----
    P(max(y', Z) <= l) = [level(y') <= l] * P(Z <= l) (Díez 1993).
    """
    k = family.n_outcomes
    order = family.order
    sub = CheckFamily(family.check, family.epoch, tuple(family.nodes[i] for i in chunk),
                      tuple(family.log_cdfs[i] for i in chunk),
                      family.leak_log_cdf if with_leak else (0.0,) * (k - 1), order)
    log_cdf = sub.log_cdf()
    if not with_previous:
        return np.array(sub.likelihood())
    level_of = np.empty(k, dtype=int)
    level_of[list(order)] = np.arange(k)
    with np.errstate(divide="ignore"):
        # log [level(y') <= l] for each previous outcome y' and l = 0..K-2
        gate = np.log((level_of[:, None] <= np.arange(k - 1)[None, :]).astype(float))
    m = len(chunk)
    total = gate.reshape((k,) + (1,) * m + (k - 1,)) + log_cdf[None]
    return table_from_log_cdf(total, order)
