"""Minimal cut sets of a model's fault tree, from its BDD.

A cut set is a set of root events (basic events and unlisted-cause events)
whose joint failure makes the top event occur; it is minimal when no proper
subset is a cut set. The minimal cut sets are computed as a zero-suppressed
decision diagram (ZBDD) from the BDD of the top event, counted by order there
(before any list is made), and only then listed, optionally truncated by
order or by probability.

For a tree with NOT gates (non-coherent) the sets reported are the minimal
sets of failed roots that make the top occur whatever the other roots do not
do: the prime implicants with their negated literals dropped, the usual
coherent approximation. The exact top-event probability is unaffected.

References
----------
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981, chapter VII (minimal cut
sets; rare-event approximation; minimal cut set upper bound).
A. Rauzy, "New algorithms for fault trees analysis", Reliability Engineering
and System Safety 40(3), 1993 (minimal cut sets from BDDs; the "without" operation).
S. Minato, "Zero-suppressed BDDs for set manipulation in combinatorial
problems", DAC 1993 (ZBDDs).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

from troubleshoot.errors import TroubleshootError
from troubleshoot.analysis.bdd import FALSE, TRUE, FaultTreeBdd, NodeStore, fold_children_first, internal_nodes_under
from troubleshoot.model import Model

#: Empty family of sets.
EMPTY = 0
#: The family holding only the empty set.
BASE = 1

#: Most cut sets listed in memory by default (each costs a few hundred bytes).
DEFAULT_LIST_LIMIT = 1_000_000
#: Most cut sets walked (not kept) to sum the upper bound over a truncated family.
DEFAULT_STREAM_LIMIT = 2_000_000

Progress = Callable[[str], None]


class TooManyCutSets(TroubleshootError):
    """Listing the minimal cut sets would not fit in memory; the message says how to truncate."""


class CutSetFamily(NodeStore):
    """The minimal cut sets of a fault tree as a ZBDD.

    Node 0 is the empty family, node 1 the family {{}}; node ``i`` stands for
    ``low[i]`` union ``{S + {level var[i]} : S in high[i]}``.

    Parameters
    ----------
    bdd : FaultTreeBdd
        The top event's BDD; its variable levels are reused.
    """

    def __init__(self, bdd: FaultTreeBdd):
        self.bdd = bdd
        n_vars = bdd.diagram.n_vars
        NodeStore.__init__(self, n_vars, bdd.diagram.node_limit)
        self._without_cache: dict[tuple[int, int], int] = {}
        self._minimal_cache: dict[int, int] = {FALSE: EMPTY, TRUE: BASE}
        self._has_empty: dict[int, bool] = {EMPTY: False, BASE: True}
        self.root = self._minimal(bdd.root)

    def _node(self, level: int, low: int, high: int) -> int:
        if high == EMPTY:  # zero-suppression rule
            return low
        return self.intern(level, low, high)

    def too_large(self) -> TroubleshootError:
        return TooManyCutSets(
            f"the diagram of the minimal cut sets passed {self.node_limit:,} nodes; "
            "rerun with --max-order or --min-probability to keep fewer cut sets"
        )

    def _contains_empty(self, f: int) -> bool:
        """Does family ``f`` hold the empty set? (It does when its low chain ends in BASE.)"""
        chain = []
        while f not in self._has_empty:
            chain.append(f)
            f = self.low[f]
        found = self._has_empty[f]
        for n in chain:
            self._has_empty[n] = found
        return found

    def _without_known(self, f: int, g: int) -> int | None:
        """``f`` without ``g`` when a terminal case or the cache answers, else None."""
        if g == EMPTY or f == EMPTY:
            return f
        if f == g:
            return EMPTY
        if f == BASE:
            return EMPTY if self._contains_empty(g) else BASE
        if g == BASE:
            return EMPTY
        return self._without_cache.get((f, g))

    def _without(self, f: int, g: int) -> int:
        """Sets of family ``f`` that contain no set of family ``g`` (Rauzy 1993).

        An explicit stack of pairs stands in for the recursion: a pair waits
        until the pairs it needs are known.
        """
        known = self._without_known
        stack = [(f, g)]
        while stack:
            a, b = stack[-1]
            if known(a, b) is not None:
                stack.pop()
                continue
            va, vb = self.var[a], self.var[b]
            if va < vb:
                # No set of b holds va: filter both halves of a by all of b.
                lo, hi = known(self.low[a], b), known(self.high[a], b)
                if lo is None or hi is None:
                    if lo is None:
                        stack.append((self.low[a], b))
                    if hi is None:
                        stack.append((self.high[a], b))
                    continue
                result = self._node(va, lo, hi)
            elif va > vb:
                # Sets of b holding vb cannot sit inside a set of a.
                found = known(a, self.low[b])
                if found is None:
                    stack.append((a, self.low[b]))
                    continue
                result = found
            else:
                lo, part = known(self.low[a], self.low[b]), known(self.high[a], self.low[b])
                if lo is None or part is None:
                    if lo is None:
                        stack.append((self.low[a], self.low[b]))
                    if part is None:
                        stack.append((self.high[a], self.low[b]))
                    continue
                hi = known(part, self.high[b])
                if hi is None:
                    stack.append((part, self.high[b]))
                    continue
                result = self._node(va, lo, hi)
            self._without_cache[(a, b)] = result
            stack.pop()
        return known(f, g)  # type: ignore[return-value]

    def _minimal(self, f: int) -> int:
        """Minimal sets of failed roots making BDD node ``f`` true (Rauzy 1993).

        MCS(ite(x, f1, f0)) = MCS(f0) + x.(MCS(f1) without MCS(f0)), children
        first on an explicit stack.
        """
        d = self.bdd.diagram
        return fold_children_first(f, d.low, d.high, self._minimal_cache,
                                    lambda n, low, high: self._node(d.var[n], low, self._without(high, low)))

    def _bottom_up(self) -> list[int]:
        return internal_nodes_under(self.root, self.low, self.high, BASE)

    def count_by_order(self) -> dict[int, int]:
        """Number of minimal cut sets of each order, without listing them.

        Exact integers, by one bottom-up pass: count(node) = count(low) +
        count(high) shifted up one order.
        """
        counts: dict[int, list[int]] = {EMPTY: [], BASE: [1]}
        for n in self._bottom_up():
            low, high = counts[self.low[n]], counts[self.high[n]]
            size = max(len(low), len(high) + 1)
            merged = [0] * size
            for i, c in enumerate(low):
                merged[i] += c
            for i, c in enumerate(high):
                merged[i + 1] += c
            counts[n] = merged
        return {order: c for order, c in enumerate(counts[self.root]) if c}

    def probability_sum(self) -> float:
        """Sum over all minimal cut sets of their probability (the rare-event figure)."""
        priors = self.bdd.priors
        total = {EMPTY: 0.0, BASE: 1.0}
        for n in self._bottom_up():
            total[n] = total[self.low[n]] + priors[self.var[n]] * total[self.high[n]]
        return float(total[self.root])

    def iterate(
        self,
        max_order: int | None = None,
        min_probability: float | None = None,
    ) -> Iterator[tuple[tuple[int, ...], float]]:
        """Yield (levels, probability) of each minimal cut set that passes the truncation.

        Subfamilies that cannot hold a passing set (every set too long, or the
        most probable too unlikely) are not visited.
        """
        priors = self.bdd.priors
        nodes = self._bottom_up()
        shortest = {EMPTY: math.inf, BASE: 0}
        likeliest = {EMPTY: 0.0, BASE: 1.0}
        for n in nodes:
            shortest[n] = min(shortest[self.low[n]], shortest[self.high[n]] + 1)
            likeliest[n] = max(likeliest[self.low[n]], priors[self.var[n]] * likeliest[self.high[n]])
        order_cap = math.inf if max_order is None else max_order
        p_floor = 0.0 if min_probability is None else min_probability
        # Explicit depth-first stack of (node, product so far, levels chosen);
        # the high branch is taken first, so sets come out in a fixed order.
        stack: list[tuple[int, float, tuple[int, ...]]] = [(self.root, 1.0, ())]
        while stack:
            n, product, chosen = stack.pop()
            if n == EMPTY:
                continue
            if len(chosen) + shortest[n] > order_cap or product * likeliest[n] < p_floor:
                continue
            if n == BASE:
                yield chosen, product
                continue
            level = self.var[n]
            stack.append((self.low[n], product, chosen))
            stack.append((self.high[n], product * priors[level], chosen + (level,)))


@dataclass(frozen=True)
class CutSet:
    """One minimal cut set: its root event ids, order and probability."""

    events: tuple[str, ...]
    probability: float

    @property
    def order(self) -> int:
        return len(self.events)


@dataclass(frozen=True)
class CutSetAnalysis:
    """Minimal cut sets of a fault tree and the top-event figures they give.

    Attributes
    ----------
    cut_sets : tuple of CutSet
        Retained sets, by probability (descending), then order, then ids; the
        ids within a set and between sets compare in natural order (e2 < e10).
    count_by_order : dict of int to int
        Every minimal cut set, truncated or not, counted by order.
    truncated : bool
        Some minimal cut sets were dropped by ``max_order`` or ``min_probability``.
    rare_event : float
        Sum of the probabilities of all minimal cut sets (truncated or not).
    retained_rare_event : float
        The same sum over the retained sets.
    dropped_probability_bound : float
        Sum of the probabilities of the dropped sets, ``rare_event -
        retained_rare_event``: an upper bound on P(top) - P(union of retained sets).
    mcub : float or None
        1 - prod(1 - P(MCS)) over all minimal cut sets; None when the family
        was too large to walk.
    coherent : bool
        The top event is a monotone function of the roots; when False the sets
        drop negated literals (coherent approximation).
    """

    cut_sets: tuple[CutSet, ...]
    count_by_order: dict[int, int]
    truncated: bool
    rare_event: float
    retained_rare_event: float
    dropped_probability_bound: float
    mcub: float | None
    coherent: bool
    max_order: int | None = None
    min_probability: float | None = None
    diagram_nodes: dict[str, int] = field(default_factory=dict)

    @property
    def total_count(self) -> int:
        return sum(self.count_by_order.values())


def natural_key(identifier: str) -> tuple:
    """Sort key reading digit runs as numbers, so e2 comes before e10."""
    return tuple((0, int(part), "") if part.isdigit() else (1, 0, part) for part in re.split(r"(\d+)", identifier) if part)


def _mcub(probabilities) -> float:
    """1 - prod(1 - p), summed in log space so small p keep their digits (NUREG-0492 ch. VII)."""
    log_survival = 0.0
    for p in probabilities:
        if p >= 1.0:
            return 1.0
        log_survival += math.log1p(-p)
    return 0.0 - math.expm1(log_survival)  # 0.0 - keeps an empty family at +0.0


def minimal_cut_sets(
    model: Model,
    *,
    bdd: FaultTreeBdd | None = None,
    max_order: int | None = None,
    min_probability: float | None = None,
    list_limit: int | None = None,
    stream_limit: int | None = None,
    progress: Progress | None = None,
) -> CutSetAnalysis:
    """Minimal cut sets of ``model``'s top event, counted first, then listed.

    Parameters
    ----------
    model : Model
        The model; its root events are its hypotheses.
    bdd : FaultTreeBdd, optional
        The top event's BDD, if already built.
    max_order : int, optional
        Keep only the sets of at most this many events.
    min_probability : float, optional
        Keep only the sets whose probability is at least this.
    list_limit : int, optional
        Refuse to list more sets than this; default :data:`DEFAULT_LIST_LIMIT`.
    stream_limit : int, optional
        Default :data:`DEFAULT_STREAM_LIMIT`. Walk at most this many sets (without keeping them) to compute the
        minimal cut set upper bound over a truncated family.
    progress : callable, optional
        Called with short messages on long work.

    Returns
    -------
    CutSetAnalysis

    Raises
    ------
    TooManyCutSets
        More sets would be listed than ``list_limit``; the message gives a
        ``--max-order`` that fits and the count it keeps.

    Notes
    -----
    The family is a ZBDD built from the BDD by Rauzy's recursion, so the count
    by order and the rare-event sum are exact and cost one pass over its
    nodes. Truncation by probability is applied while walking: a subfamily
    whose likeliest set is below the threshold is not entered. The probability
    cut away is bounded by the sum of the dropped sets' probabilities.

    References
    ----------
    A. Rauzy, Reliability Engineering and System Safety 40(3), 1993.
    NUREG-0492, chapter VII (rare-event approximation, minimal cut set upper bound).
    """
    list_limit = DEFAULT_LIST_LIMIT if list_limit is None else list_limit
    stream_limit = DEFAULT_STREAM_LIMIT if stream_limit is None else stream_limit
    if bdd is None:
        bdd = FaultTreeBdd.from_model(model, progress=progress)
    coherent = not bdd.has_not_gates or bdd.diagram.is_monotone(bdd.root)
    family = CutSetFamily(bdd)
    counts = family.count_by_order()
    total = sum(counts.values())
    if progress is not None:
        progress(f"minimal cut sets: {total:,} counted (cut-set diagram of {len(family.var):,} nodes)")
    order_truncates = max_order is not None and any(order > max_order for order in counts)
    within_order = sum(c for order, c in counts.items() if max_order is None or order <= max_order)
    if within_order > list_limit and min_probability is None:
        raise TooManyCutSets(_advice(counts, within_order, list_limit, max_order))

    order_ids = bdd.order
    natural = {root_id: natural_key(root_id) for root_id in order_ids}
    retained: list[CutSet] = []
    for levels, p in family.iterate(max_order, min_probability):
        if len(retained) >= list_limit:
            raise TooManyCutSets(_advice(counts, None, list_limit, max_order))
        events = tuple(sorted((order_ids[level] for level in levels), key=natural.__getitem__))
        retained.append(CutSet(events, float(p)))
        if progress is not None and len(retained) % 50_000 == 0:
            progress(f"minimal cut sets: {len(retained):,} of at most {within_order:,} listed")
    retained.sort(key=lambda c: (-c.probability, c.order, tuple(natural[e] for e in c.events)))

    truncated = order_truncates or len(retained) < within_order
    rare_event = family.probability_sum()
    retained_sum = math.fsum(c.probability for c in retained)
    if not truncated:
        mcub: float | None = _mcub(c.probability for c in retained)
    elif total <= stream_limit:
        mcub = _mcub(p for _, p in family.iterate())
    else:
        mcub = None
    return CutSetAnalysis(
        cut_sets=tuple(retained),
        count_by_order=counts,
        truncated=truncated,
        rare_event=rare_event,
        retained_rare_event=retained_sum,
        dropped_probability_bound=max(rare_event - retained_sum, 0.0) if truncated else 0.0,
        mcub=mcub,
        coherent=coherent,
        max_order=max_order,
        min_probability=min_probability,
        diagram_nodes={"bdd": bdd.size, "zbdd": len(family._bottom_up())},
    )


def _advice(counts: dict[int, int], wanted: int | None, limit: int, max_order: int | None) -> str:
    """The refusal message: how many sets there are and a truncation that fits."""
    by_order = ", ".join(f"{order}: {c:,}" for order, c in sorted(counts.items()))
    how_many = f"{wanted:,} minimal cut sets" if wanted is not None else f"more than {limit:,} minimal cut sets"
    fits = None
    running = 0
    for order in sorted(counts):
        if running + counts[order] > limit:
            break
        running += counts[order]
        fits = (order, running)
    hint = (
        f"rerun with --max-order {fits[0]} (keeps {fits[1]:,}) or a --min-probability threshold"
        if fits and (max_order is None or fits[0] < max_order)
        else "rerun with a higher --min-probability threshold"
    )
    return (
        f"listing {how_many} would not fit in memory (limit {limit:,}; "
        f"counts by order {by_order}); {hint}"
    )
