"""Everything ``troubleshoot analyze`` prints, computed without ever refusing a valid tree for its size.

The exact top-event probability and every importance measure come from the
BDD; the count of minimal cut sets by order, the rare-event sum and the
minimal cut set upper bound come from the cut-set ZBDD by passes over its
nodes, never by listing; the list itself is the most significant sets, in
order of probability, found by a best-first walk of the ZBDD: complete when
the family is small, else truncated with a bound on what was left out. A
diagram that outgrows its memory share is reported as a limit, with what was
computed before it.

References
----------
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981, chapter VII (rare-event
approximation, minimal cut set upper bound).
A. Rauzy, Reliability Engineering and System Safety 40(3), 1993 (BDD, ZBDD of
the minimal cut sets).
S. Minato, DAC 1993 (ZBDDs).
P. E. Hart, N. J. Nilsson and B. Raphael, "A formal basis for the heuristic
determination of minimum cost paths", IEEE Trans. SSC 4(2), 1968
(best-first search with an exact bound).
"""

from __future__ import annotations

import heapq
import math
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import numpy as np

from troubleshoot.analysis.bdd import DEFAULT_NODE_LIMIT, DiagramTooLarge, FaultTreeBdd
from troubleshoot.analysis.cutsets import (
    BASE,
    EMPTY,
    CutSet,
    CutSetFamily,
    TooManyCutSets,
    natural_key,
)
from troubleshoot.analysis.importance import Importance, importance_measures
from troubleshoot.model import Model

#: A family of at most this many sets (after --max-order / --min-probability) is listed whole.
COMPLETE_LIST_LIMIT = 100_000
#: Otherwise the list keeps this many of the most probable sets.
DEFAULT_SHOWN = 1_000
#: How the probability cut away by truncation is bounded (said in every output).
DROPPED_BOUND_METHOD = (
    "sum of the probabilities of the dropped minimal cut sets, "
    "an upper bound on P(top) minus P(union of the retained sets)"
)

Progress = Callable[[str], None]


@dataclass(frozen=True)
class FaultTreeFigures:
    """Everything ``analyze`` shows, computed once.

    Attributes
    ----------
    exact : float or None
        P(top) from the BDD; None only when the BDD passed its memory share.
    cut_sets : tuple of CutSet
        The sets listed, by probability (descending), then order, then ids.
    count_by_order : dict
        Every minimal cut set counted by order (empty when the ZBDD passed its share).
    truncated : bool
        Sets were left out of the list (by the options or by the default length).
    rare_event, mcub : float or None
        Over every minimal cut set; None when the ZBDD could not be built.
    dropped_probability_bound : float
        Sum of the probabilities of the sets left out of the list.
    limits : tuple of str
        Limits of memory met, each with what was computed before it.
    """

    model: Model
    exact: float | None
    exact_method: str
    importance: dict[str, Importance]
    cut_sets: tuple[CutSet, ...]
    count_by_order: dict[int, int]
    truncated: bool
    rare_event: float | None
    retained_rare_event: float
    dropped_probability_bound: float
    mcub: float | None
    coherent: bool
    max_order: int | None
    min_probability: float | None
    list_length: int | None
    notes: tuple[str, ...]
    limits: tuple[str, ...] = ()
    diagram_nodes: dict[str, int] = field(default_factory=dict)

    @property
    def total_count(self) -> int:
        return sum(self.count_by_order.values())


# --------------------------------------------------------------------------- passes over the ZBDD


def _levels(family: CutSetFamily):
    """The ZBDD's nodes grouped by level, deepest first, as index arrays over a dense numbering."""
    nodes = family._bottom_up()
    ids = np.array([EMPTY, BASE] + list(nodes), dtype=np.int64)
    dense = {int(n): i for i, n in enumerate(ids)}
    var = np.array([family.var[n] for n in nodes], dtype=np.int64)
    low = np.array([dense[family.low[n]] for n in nodes], dtype=np.int64)
    high = np.array([dense[family.high[n]] for n in nodes], dtype=np.int64)
    pos = np.arange(2, len(ids))
    groups = []
    for level in sorted(set(var.tolist()), reverse=True):
        sel = var == level
        groups.append((level, pos[sel], low[sel], high[sel]))
    return groups, len(ids), dense[family.root]


def power_sums(family: CutSetFamily, powers: int, priors: np.ndarray) -> np.ndarray:
    """sum over every minimal cut set S of P(S)^k, for k = 1..powers, one pass each.

    P(S)^k is the product of p_i^k over the events of S, so each sum is the
    ZBDD's weighted count with the priors raised to k (Minato 1993).
    """
    groups, size, root = _levels(family)
    out = np.zeros(powers)
    pk = np.ones_like(priors)
    for k in range(powers):
        pk = pk * priors
        total = np.zeros(size)
        total[BASE] = 1.0
        for level, idx, lo, hi in groups:
            total[idx] = total[lo] + pk[level] * total[hi]
        out[k] = total[root]
    return out


def mcub_exact(family: CutSetFamily, priors: np.ndarray, likeliest: float) -> float:
    """1 - prod over every minimal cut set of (1 - P(S)), without listing the sets.

    Notes
    -----
    -log(1 - p) = sum_k p^k / k, so sum_S -log(1 - P(S)) = sum_k (1/k) sum_S
    P(S)^k, each inner sum one pass over the ZBDD (:func:`power_sums`). The
    terms fall at least as fast as likeliest^k, with likeliest the most
    probable set's probability; the series is cut when the remainder bound
    sum_S P(S)^(K+1) / ((K+1) (1 - likeliest)) is below 1e-17 of the sum.

    References
    ----------
    NUREG-0492, chapter VII (minimal cut set upper bound).
    """
    if likeliest >= 1.0:
        return 1.0
    if likeliest <= 0.0:
        return 0.0
    # Terms needed: likeliest^K < 1e-17, at most 4,000 passes.
    powers = int(min(4000, max(2, math.ceil(math.log(1e-17) / math.log(likeliest)) + 1)))
    sums = power_sums(family, powers, priors)
    log_survival = -math.fsum(sums[k] / (k + 1) for k in range(powers))
    return 0.0 - math.expm1(log_survival)


def _bounds(family: CutSetFamily):
    """Per node: shortest set length and likeliest set probability in its subfamily."""
    priors = family.bdd.priors
    shortest = {EMPTY: math.inf, BASE: 0}
    likeliest = {EMPTY: 0.0, BASE: 1.0}
    for n in family._bottom_up():
        shortest[n] = min(shortest[family.low[n]], shortest[family.high[n]] + 1)
        likeliest[n] = max(likeliest[family.low[n]], priors[family.var[n]] * likeliest[family.high[n]])
    return shortest, likeliest


def most_probable_sets(family: CutSetFamily, max_order: int | None = None,
                       min_probability: float | None = None) -> Iterator[tuple[tuple[int, ...], float]]:
    """(levels, probability) of the minimal cut sets, most probable first, lazily.

    Best-first walk of the ZBDD: a partial set's priority is its product so
    far times the likeliest completion below its node, an exact bound, so
    sets come out in non-increasing probability and the walk only ever holds
    the frontier (about two entries per level per set yielded). Sets longer
    than ``max_order`` or less probable than ``min_probability`` are not entered.

    References
    ----------
    Hart, Nilsson & Raphael 1968 (best-first search with an exact bound).
    """
    priors = family.bdd.priors
    shortest, likeliest = _bounds(family)
    order_cap = math.inf if max_order is None else max_order
    floor = 0.0 if min_probability is None else min_probability
    tie = 0
    # (-bound, tie, node, product, length, chosen as a linked list (level, rest))
    heap: list = [(-likeliest[family.root], tie, family.root, 1.0, 0, None)]
    while heap:
        neg, _, n, product, length, chosen = heapq.heappop(heap)
        if n == BASE:
            levels = []
            while chosen is not None:
                levels.append(chosen[0])
                chosen = chosen[1]
            yield tuple(reversed(levels)), product
            continue
        for child, prod, ln, ch in ((family.high[n], product * priors[family.var[n]], length + 1,
                                     (family.var[n], chosen)),
                                    (family.low[n], product, length, chosen)):
            if child == EMPTY or ln + shortest[child] > order_cap:
                continue
            bound = prod * likeliest[child]
            if bound < floor or bound <= 0.0:
                continue
            tie += 1
            heapq.heappush(heap, (-bound, tie, child, prod, ln, ch))


def all_cut_sets(family: CutSetFamily, max_order: int | None = None,
                 min_probability: float | None = None) -> Iterator[tuple[tuple[str, ...], float]]:
    """Every minimal cut set passing the truncation, as (event ids, probability), in ZBDD order.

    A depth-first walk holding one path: memory stays that of the diagram
    however many sets there are (for ``--all-cut-sets FILE``).
    """
    order_ids = family.bdd.order
    for levels, p in family.iterate(max_order, min_probability):
        yield tuple(order_ids[level] for level in levels), float(p)


# --------------------------------------------------------------------------- figures


def fault_tree_figures(model: Model, *, max_order: int | None = None, min_probability: float | None = None,
                       list_length: int | None = None, node_limit: int | None = None,
                       progress: Progress | None = None) -> FaultTreeFigures:
    """Top-event probability, importance, cut-set counts and figures, and the significant cut sets.

    Parameters
    ----------
    model : Model
    max_order, min_probability : optional
        Keep only sets of at most this order / at least this probability in the list.
    list_length : int, optional
        Sets listed; default: every set when at most :data:`COMPLETE_LIST_LIMIT`
        pass the truncation, else the :data:`DEFAULT_SHOWN` most probable.
    node_limit : int, optional
        Nodes each diagram may take (the memory share); default the BDD's.
    progress : callable, optional

    Returns
    -------
    FaultTreeFigures
        Never refuses for size: a diagram too large is a limit in ``limits``.
    """
    notes: list[str] = []
    limits: list[str] = []
    try:
        bdd = FaultTreeBdd.from_model(model, progress=progress,
                                      node_limit=DEFAULT_NODE_LIMIT if node_limit is None else node_limit)
    except DiagramTooLarge as exc:
        limits.append(f"{exc}; nothing else could be computed without it")
        return FaultTreeFigures(model, None, "binary decision diagram", {}, (), {}, False, None, 0.0, 0.0, None,
                                True, max_order, min_probability, list_length, (), tuple(limits))
    exact = bdd.probability()
    if progress:
        progress("importance measures")
    importance = importance_measures(model, bdd=bdd)
    coherent = not bdd.has_not_gates or bdd.diagram.is_monotone(bdd.root)
    if not coherent:
        notes.append("the tree has NOT gates and is not coherent: the cut sets listed drop negated "
                     "events (coherent approximation), so the rare-event and upper-bound figures are "
                     "approximations; the exact probability and the importance measures are exact")
    elif bdd.has_not_gates:
        notes.append("the tree has NOT gates but its top event is still coherent")
    notes.append("Fussell-Vesely is the exact form (P(top) - P(top | event works)) / P(top); "
                 "risk reduction worth is infinite (JSON null) when P(top | event works) = 0")
    nodes = {"bdd": bdd.size}
    try:
        family = CutSetFamily(bdd)
    except TooManyCutSets as exc:
        limits.append(f"{exc}; the exact probability and the importance measures above are complete")
        return FaultTreeFigures(model, exact, "binary decision diagram", importance, (), {}, True, None, 0.0, 0.0,
                                None, coherent, max_order, min_probability, list_length, tuple(notes),
                                tuple(limits), nodes)
    counts = family.count_by_order()
    total = sum(counts.values())
    nodes["zbdd"] = len(family._bottom_up())
    if progress:
        progress(f"minimal cut sets: {total:,} counted (cut-set diagram of {nodes['zbdd']:,} nodes)")
    rare_event = family.probability_sum()
    _, likeliest = _bounds(family)
    mcub = mcub_exact(family, bdd.priors, likeliest[family.root])
    within = sum(c for order, c in counts.items() if max_order is None or order <= max_order)
    if list_length is None:
        list_length = within if within <= COMPLETE_LIST_LIMIT else DEFAULT_SHOWN
    natural = {root_id: natural_key(root_id) for root_id in bdd.order}
    retained: list[CutSet] = []
    for levels, p in most_probable_sets(family, max_order, min_probability):
        if len(retained) >= list_length:
            break
        events = tuple(sorted((bdd.order[level] for level in levels), key=natural.__getitem__))
        retained.append(CutSet(events, float(p)))
        if progress and len(retained) % 50_000 == 0:
            progress(f"minimal cut sets: {len(retained):,} most probable listed")
    retained.sort(key=lambda c: (-c.probability, c.order, tuple(natural[e] for e in c.events)))
    retained_sum = math.fsum(c.probability for c in retained)
    truncated = len(retained) < total
    if truncated and len(retained) < within and min_probability is None and max_order is None:
        notes.append(f"the list keeps the {len(retained):,} most probable of {total:,} minimal cut sets "
                     "(--all-cut-sets FILE writes every one)")
    return FaultTreeFigures(
        model=model, exact=exact, exact_method="binary decision diagram", importance=importance,
        cut_sets=tuple(retained), count_by_order=counts, truncated=truncated, rare_event=rare_event,
        retained_rare_event=retained_sum,
        dropped_probability_bound=max(rare_event - retained_sum, 0.0) if truncated else 0.0,
        mcub=mcub, coherent=coherent, max_order=max_order, min_probability=min_probability,
        list_length=list_length, notes=tuple(notes), limits=tuple(limits), diagram_nodes=nodes,
    )


def cut_set_family(model: Model, node_limit: int | None = None) -> CutSetFamily:
    """The ZBDD of the minimal cut sets of ``model`` (for streaming them all)."""
    return CutSetFamily(FaultTreeBdd.from_model(
        model, node_limit=DEFAULT_NODE_LIMIT if node_limit is None else node_limit))
