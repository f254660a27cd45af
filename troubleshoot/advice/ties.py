"""Ordering by a figure with ties: values within a tolerance are equal, then the id decides.

Two posteriors that are equal in exact arithmetic can differ by 1e-17 after
floating point, and which one comes out larger depends on the order the
model lists its events. Sorting by the raw float would let that noise, not
the id, decide the order of exact ties. :func:`tie_ranks` gives each value a
rank in which values closer than the tolerance share one, so a sort by
(rank, id) is the same whatever the input order.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import TypeVar

import numpy as np

#: Two figures are tied when they differ by at most this, relative to the larger...
TIE_RTOL = 1e-12
#: ...or by at most this in absolute terms (probabilities and bits below it are noise).
TIE_ATOL = 1e-15


T = TypeVar("T")


def tied(a: float, b: float) -> bool:
    """True when ``a`` and ``b`` are equal up to the tie tolerance (infinities tie with themselves)."""
    if a == b:
        return True
    if not (np.isfinite(a) and np.isfinite(b)):
        return False
    return abs(a - b) <= max(TIE_RTOL * max(abs(a), abs(b)), TIE_ATOL)


def tie_ranks(values: Sequence[float] | np.ndarray, descending: bool = True) -> np.ndarray:
    """Rank of each value (0 first), values within the tolerance of their neighbour sharing a rank.

    Parameters
    ----------
    values : sequence of float
        The figures; NaN ranks last.
    descending : bool
        Largest first (default) or smallest first.

    Returns
    -------
    numpy.ndarray of int
        Same length as ``values``.

    Notes
    -----
    The values are sorted and a new rank starts wherever the gap to the
    previous value exceeds the tolerance, so a run of near-equal values is
    one group. The ranks depend only on the multiset of values, never on
    their input order.

    Examples
    --------
    >>> tie_ranks([0.1, 0.3, 0.1 + 1e-17, 0.2]).tolist()
    [2, 0, 2, 1]
    """
    v = np.asarray(values, dtype=float)
    ranks = np.zeros(len(v), dtype=np.int64)
    if len(v) == 0:
        return ranks
    key = np.where(np.isnan(v), -np.inf if descending else np.inf, v)
    order = np.argsort(-key if descending else key, kind="stable")
    ordered = key[order]
    # A new rank wherever a value is not tied with the one before it (whole arrays, as tied() says).
    a, b = ordered[1:], ordered[:-1]
    with np.errstate(invalid="ignore"):
        close = np.abs(a - b) <= np.maximum(TIE_RTOL * np.maximum(np.abs(a), np.abs(b)), TIE_ATOL)
    same = (a == b) | (np.isfinite(a) & np.isfinite(b) & close)
    ranks[order] = np.concatenate(([0], np.cumsum(~same)))
    return ranks


def ordered_by(items: Sequence[T], figure: Callable[[T], float], ident: Callable[[T], str]) -> list[T]:
    """``items`` by ``figure``, largest first, ties (within the tolerance) by ``ident``.

    Examples
    --------
    >>> ordered_by([("b", 0.2), ("a", 0.2 + 1e-17), ("c", 0.5)], lambda x: x[1], lambda x: x[0])
    [('c', 0.5), ('a', 0.2), ('b', 0.2)]
    """
    ranks = tie_ranks([figure(item) for item in items])
    keyed = sorted(range(len(items)), key=lambda i: (int(ranks[i]), ident(items[i])))
    return [items[i] for i in keyed]
