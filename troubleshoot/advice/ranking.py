"""The next best check: expected information about the faults per unit of cost.

For a check T with causes c (the joint state of the gates and events it
responds to), the information T gives about the root events F is

    I(F; T | e) = H(T | e) - sum_c P(c | e) * H(T | c)

because T depends on F only through c and its noise is its own. One
propagation gives P(c | e) for every check (:meth:`Posterior.check_family`),
so ranking every check costs one propagation, not one per check per outcome.
Checks are grouped by the size of their cause family and scored in whole
arrays.

Score = bits / cost. A check with cost 0 that gives information (bits > 0)
has an infinite score and comes first (several such checks: most bits first);
a check with cost 0 that gives no information scores 0. Ties are broken by
lower cost, then by id, so the order is deterministic.

References
----------
J. de Kleer and B. C. Williams, "Diagnosing multiple faults", Artificial
Intelligence 32(1), 1987 (choose the test that minimises expected entropy).
D. Heckerman, J. S. Breese and K. Rommelse, "Decision-theoretic
troubleshooting", Communications of the ACM 38(3), 1995 (information per
unit of cost, observations versus repairs).
T. M. Cover and J. A. Thomas, *Elements of Information Theory*, 2006
(mutual information, chain rule).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from collections.abc import Callable, Iterable

import numpy as np

from troubleshoot.engine.inference import AnyPosterior
from troubleshoot.advice.ties import tie_ranks
from troubleshoot.model import Check

#: Information below this many bits is treated as exactly zero (floating-point
#: rounding of a difference of entropies; far below anything a user acts on).
BITS_EPSILON = 1e-12


def entropy_bits(p: np.ndarray) -> np.ndarray:
    """H = -sum_k p_k log2 p_k over the last axis (a distribution over outcomes); 0 log 0 = 0, never NaN."""
    p = np.clip(np.asarray(p, dtype=float), 0.0, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(p > 0.0, -p * np.log2(np.where(p > 0.0, p, 1.0)), 0.0)
    return terms.sum(axis=-1)


def binary_entropy_bits(p: np.ndarray) -> np.ndarray:
    """H(p) = -p log2 p - (1 - p) log2 (1 - p), elementwise; 0 at p = 0 and p = 1, never NaN."""
    p = np.clip(np.asarray(p, dtype=float), 0.0, 1.0)
    return entropy_bits(np.stack([p, 1.0 - p], axis=-1))


@dataclass(frozen=True)
class RankRow:
    """One check as the ranking sees it; plain Python values only.

    Attributes
    ----------
    check : str
        The check (or symptom) id.
    label : str
    cost : float
        In the model's cost unit.
    bits : float
        Expected information about the faults, I(F; T | findings), in bits.
    score : float
        bits / cost, in bits per cost unit; ``math.inf`` for an informative
        check of cost 0.
    outcomes : tuple of str
        The check's outcome names, normal first.
    p_outcomes : tuple of float
        P(outcome | findings) of each, in the same order.
    caution : str or None
        The model's safety caution for this check.
    """

    check: str
    label: str
    cost: float
    bits: float
    score: float
    outcomes: tuple[str, ...]
    p_outcomes: tuple[float, ...]
    caution: str | None = None

    def outcome_probabilities(self) -> dict[str, float]:
        """{outcome name: probability}."""
        return dict(zip(self.outcomes, self.p_outcomes))


class Ranking:
    """Every candidate check, best first.

    Parameters
    ----------
    rows : tuple of RankRow
        Sorted by score (descending), then cost (ascending), then id.
    epoch : int
        The repairs made so far: the checks are scored as done now.

    Notes
    -----
    :func:`rank` scores and orders every check in whole arrays and builds
    the Python rows only when they are read (``rows``, ``best``, ``row``,
    ``worth_doing``): a caller that needs the best few of 20,000 checks does
    not pay for the other rows. Immutable once made.
    """

    __slots__ = ("epoch", "_rows", "_make", "_bits", "_position")

    def __init__(self, rows: tuple[RankRow, ...] = (), epoch: int = 0):
        self.epoch = epoch
        self._rows: list[RankRow | None] = list(rows)
        self._make: Callable[[int], RankRow] | None = None
        self._bits: np.ndarray | None = None
        self._position: dict[str, int] | None = None

    @classmethod
    def _deferred(cls, make, checks: list[str], bits: np.ndarray, epoch: int) -> Ranking:
        """A ranking of ``len(checks)`` rows, best first; row i is ``make(i)``, built on first read."""
        ranking = cls((), epoch)
        ranking._rows = [None] * len(checks)
        ranking._make = make
        ranking._bits = bits
        ranking._position = {c: i for i, c in enumerate(checks)}
        return ranking

    def _row(self, i: int) -> RankRow:
        row = self._rows[i]
        if row is None:
            assert self._make is not None  # only a deferred ranking has rows still to build
            row = self._rows[i] = self._make(i)
        return row

    @property
    def rows(self) -> tuple[RankRow, ...]:
        """Every row, best first."""
        return tuple(self._row(i) for i in range(len(self._rows)))

    @property
    def best(self) -> RankRow | None:
        """The recommended next check, or None when no check is left."""
        return self._row(0) if self._rows else None

    def row(self, check_id: str) -> RankRow | None:
        """The row of one check, or None when it is not a candidate."""
        if self._position is not None:
            i = self._position.get(check_id)
            return None if i is None else self._row(i)
        for r in self.rows:
            if r.check == check_id:
                return r
        return None

    def worth_doing(self, min_bits: float) -> tuple[RankRow, ...]:
        """Rows giving at least ``min_bits`` bits."""
        if self._bits is not None:
            return tuple(self._row(i) for i in np.flatnonzero(self._bits >= min_bits).tolist())
        return tuple(r for r in self.rows if r.bits >= min_bits)

    def __len__(self) -> int:
        return len(self._rows)

    def __eq__(self, other) -> bool:
        if not isinstance(other, Ranking):
            return NotImplemented
        return self.epoch == other.epoch and self.rows == other.rows

    __hash__ = None  # type: ignore[assignment]

    def __repr__(self) -> str:
        return f"Ranking(rows={self.rows!r}, epoch={self.epoch!r})"


_FIELDS = ("check", "label", "cost", "bits", "score", "outcomes", "p_outcomes", "caution")


def _new_row(*values) -> RankRow:
    """A RankRow built without the frozen dataclass's per-field ``object.__setattr__`` calls.

    A ranking builds one row per check on every step (832 at 2,000 basic
    events), and the generated frozen ``__init__`` is about three times
    slower than filling the instance dictionary; the row is the same.
    """
    row = object.__new__(RankRow)
    row.__dict__.update(zip(_FIELDS, values))
    return row


def score_of(bits: float, cost: float) -> float:
    """bits / cost; infinite for an informative free check, 0 for an uninformative one."""
    if cost > 0:
        return bits / cost
    return math.inf if bits > 0 else 0.0


def batch_information(joint: np.ndarray, table: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """I(F; T | e) in bits and P(T = t | e) for a stack of checks, in whole arrays.

    Parameters
    ----------
    joint : ndarray, shape (n, S)
        P(c | e) over the S joint states of each check's causes.
    table : ndarray, shape (n, S, K)
        P(T = t | c) for each of K outcomes (any K >= 1).

    Returns
    -------
    bits : ndarray, shape (n,)
        H(T | e) - sum_c P(c | e) H(T | c); below BITS_EPSILON it is 0.
    p_outcomes : ndarray, shape (n, K)
        P(T = t | e).

    References
    ----------
    Cover & Thomas 2006, eq. 2.45; de Kleer & Williams 1987.
    """
    p_t = np.clip(np.einsum("ij,ijk->ik", joint, table), 0.0, 1.0)
    h_t_given_c = np.einsum("ij,ij->i", joint, entropy_bits(table))
    bits = entropy_bits(p_t) - h_t_given_c
    return np.where(bits < BITS_EPSILON, 0.0, bits), p_t


def outcome_information(posterior: AnyPosterior, check_ids: Iterable[str]) -> dict[str, tuple[float, np.ndarray]]:
    """I(F; T | findings) in bits and P(outcome | findings) of each check, done now.

    Parameters
    ----------
    posterior : Posterior
        One propagation of the findings so far.
    check_ids : iterable of str
        Checks or symptoms of the model.

    Returns
    -------
    dict
        check id -> (bits, P(T = each outcome | findings), in the check's outcome order).

    Notes
    -----
    I(F;T|e) = H(T|e) - sum_c P(c|e) H(T|c) over the check's K outcomes:
    the check's noise is independent of everything given its causes c, so
    H(T | F, e) = sum_c P(c|e) H(T|c). Checks whose families have the same
    number of joint states and outcomes come stacked from
    :meth:`Posterior.family_batches` (one gather and one sum per shape) and
    are scored together by :func:`batch_information`.

    References
    ----------
    Cover & Thomas 2006, eq. 2.45 (I = H(T) - H(T|F)); de Kleer & Williams 1987.
    """
    out: dict[str, tuple[float, np.ndarray]] = {}
    for batch in posterior.family_batches(check_ids):
        bits, p_t = batch_information(batch.joint, batch.likelihood)
        out.update(zip(batch.checks, zip(bits.tolist(), p_t)))
    return out


def _order(checks: list[str], costs: np.ndarray, scores: np.ndarray, bits: np.ndarray) -> np.ndarray:
    """Indices best first: by score, ties (within the tolerance) by cost, then id.

    Free informative checks (infinite score) are ordered among themselves by
    bits. Scores are compared with :func:`~troubleshoot.advice.ties.tie_ranks`,
    so checks whose scores agree analytically but differ in the last bits
    still fall to the cost/id tie-break. One lexicographic sort in numpy
    (last key first).
    """
    if not checks:
        return np.zeros(0, dtype=np.int64)
    score_rank = tie_ranks(scores)
    bits_rank = tie_ranks(np.where(np.isinf(scores), bits, 0.0))
    return np.lexsort((np.array(checks), costs, bits_rank, score_rank))


def rank(posterior: AnyPosterior, checks: Iterable[str | Check]) -> Ranking:
    """Score every candidate check from one propagation and sort them, best first.

    Parameters
    ----------
    posterior : Posterior
        The propagation of the findings so far (and the repairs).
    checks : iterable of str or Check
        The candidates: checks and symptoms not yet done at the current
        epoch and not skipped (the caller decides which).

    Returns
    -------
    Ranking

    Notes
    -----
    This is one step of a diagnosis after the propagation: the benchmark
    times ``engine.propagate`` plus ``rank`` over every check.

    References
    ----------
    Heckerman, Breese & Rommelse 1995 (information per unit cost);
    de Kleer & Williams 1987.
    """
    model = posterior.model
    ids = [c.id if isinstance(c, Check) else c for c in checks]
    names: list[str] = []
    bits_parts: list[np.ndarray] = []
    p_parts: list[np.ndarray] = []
    for batch in posterior.family_batches(ids):
        bits, p_t = batch_information(batch.joint, batch.likelihood)
        names.extend(batch.checks)
        bits_parts.append(bits)
        p_parts.extend(p_t)  # one row of P(outcome) per check
    bits = np.concatenate(bits_parts) if bits_parts else np.zeros(0)
    found = [model.check_by_id[c] for c in names]
    costs = np.array([c.cost for c in found], dtype=float)
    paid = costs > 0
    # score_of in whole arrays: bits / cost, infinite for an informative free check, 0 otherwise.
    scores = np.where(paid, bits / np.where(paid, costs, 1.0), np.where(bits > 0, np.inf, 0.0))
    order = _order(names, costs, scores, bits).tolist()

    def make(i: int) -> RankRow:
        j = order[i]
        check = found[j]
        return _new_row(names[j], check.label, float(costs[j]), float(bits[j]), float(scores[j]),
                        tuple(check.outcomes), tuple(p_parts[j].tolist()), check.caution)

    return Ranking._deferred(make, [names[j] for j in order], bits[order], posterior.epoch)
