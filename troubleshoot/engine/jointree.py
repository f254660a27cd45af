"""Join tree of a binary Bayesian network: compiled once, propagated per set of findings.

Compilation is a pipeline of plain functions: :func:`moral_graph` (plus each
check's cause set, so that one clique holds every check's causes together),
:func:`min_fill_order` (greedy min-fill elimination), :func:`elimination_tree`,
:func:`merge_cliques` (non-maximal cliques removed, small neighbouring cliques
merged), :func:`centre_roots` (each tree hung from its centre, so it is as
shallow as it can be) and :func:`layout` (every table in one flat buffer,
level by level, each table's axes with its separator first).
:func:`base_potentials` folds every conditional table into its clique, and
:func:`propagation_plan` precomputes the index arrays of a propagation.

Propagation: Hugin-style collect and distribute, one level of the tree at a
time. A level is a fixed handful of whole-array numpy calls whatever the
number of cliques on it: the messages of every clique on the level are
contiguous block sums (each table has its separator axes first), the
parents take them in with a gather and an in-place multiply per "round" (the
r-th child of every parent), and the distribute pass sums the parents onto
the separators with ``bincount`` and scales the children with one repeat and
one multiply. Every message is renormalised as it is sent, so log P(findings)
is a sum of logs and never underflows. No matrix product is used, so no BLAS
thread pool is involved on a busy machine.

References
----------
S. L. Lauritzen and D. J. Spiegelhalter, "Local computations with
probabilities on graphical structures and their application to expert
systems", JRSS B 50(2), 1988.
F. V. Jensen, S. L. Lauritzen and K. G. Olesen, "Bayesian updating in causal
probabilistic networks by local computations", Computational Statistics
Quarterly 4, 1990 (the Hugin architecture).
U. Kjaerulff, "Triangulation of graphs: algorithms giving small total state
space", Aalborg University report R-90-09, 1990 (min-fill).
"""

from __future__ import annotations

import gc
import heapq
import math
from collections import deque
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np

from troubleshoot.errors import NetworkTooLarge
from troubleshoot.model import DERIVED
from troubleshoot.engine.network import Network

#: Default ceiling on the memory the tables may take, in bytes.
DEFAULT_MEMORY_BUDGET = 2 * 1024**3
#: Bytes per table entry across the base buffer, a working copy and messages.
_BYTES_PER_ENTRY = 8 * 3
#: Bytes per table entry of the index plans kept beside the tables (the
#: parents' gathers of every level and the marginals' gathers, int64 each).
_PLAN_BYTES_PER_ENTRY = 8 * 2
#: Cliques are merged while the merged table stays at most this many entries.
MERGE_ENTRIES = 256
#: The minor-min-width lower bound is computed once an elimination clique
#: comes within this many bits (a factor 2^10) of the table budget.
_MMW_SLACK_BITS = 10
#: Index arrays of the table layout are built this many entries at a time (bounds peak memory).
_CHUNK = 1 << 20


class ZeroProbability(Exception):
    """Internal: the findings have probability zero under the network."""


class _OverBudget(Exception):
    """Internal: the elimination cliques made so far already pass the table budget."""

    def __init__(self, clique: frozenset, entries: int, width_bound: int | None = None):
        super().__init__()
        self.clique, self.entries, self.width_bound = clique, entries, width_bound


@dataclass(frozen=True)
class Evidence:
    """A likelihood over some variables of one clique, ready to multiply in."""

    clique: int
    factor: np.ndarray  # already shaped to broadcast against the clique table


@contextmanager
def gc_paused():
    """Hold the cyclic garbage collector while compiling.

    Compilation allocates hundreds of thousands of small long-lived sets and
    tuples and no reference cycles; with the collector on, its full passes
    rescan all of them again and again (at 50,000 basic events, more than
    half the compile time). It is switched back on afterwards if it was on.
    """
    was_on = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_on:
            gc.enable()


# -- compilation, step by step ------------------------------------------------


def moral_graph(network: Network, variables: list[str], families) -> list[set[int]]:
    """Adjacency of the moral graph over ``variables`` plus every check family made a clique.

    Parameters
    ----------
    network : Network
    variables : list of str
        The nodes carried, closed under parents; vertex i is ``variables[i]``.
    families : dict
        (check id, epoch) -> CheckFamily; each family's nodes are joined so
        that one clique holds them all.

    Returns
    -------
    list of set of int
    """
    index = {v: i for i, v in enumerate(variables)}
    parents = {v: d["parents"] for v, d in network.graph.nodes(data=True)}
    adjacency: list[set[int]] = [set() for _ in variables]
    groups = [(v, *parents[v]) for v in variables]
    groups.extend(fam.nodes for fam in families.values() if len(fam.nodes) > 1)
    for group in groups:
        idx = [index[x] for x in group]
        for a in idx:
            adjacency[a].update(idx)
    for a, nbrs in enumerate(adjacency):
        nbrs.discard(a)
    return adjacency


def minor_min_width(adjacency: list[set[int]]) -> tuple[int, frozenset[int]]:
    """A lower bound on the treewidth of a graph: minor-min-width.

    Repeatedly contract a vertex of least degree into its neighbour of least
    degree; the largest least degree met bounds the treewidth from below.
    Returns the bound and the vertex that met it with its neighbours then.

    References
    ----------
    V. Gogate and R. Dechter, "A complete anytime algorithm for treewidth",
    UAI 2004; H. L. Bodlaender and A. M. C. A. Koster, "Treewidth lower
    bounds", Computer Science Review 2(1), 2008 (MMW).
    """
    adj = [set(s) for s in adjacency]
    alive = [True] * len(adj)
    heap = [(len(m), v) for v, m in enumerate(adj)]
    heapq.heapify(heap)
    bound, where = 0, frozenset[int]()
    left = len(adj)
    while left > 1 and heap:
        d, v = heapq.heappop(heap)
        if not alive[v] or len(adj[v]) != d:
            continue
        m = adj[v]
        alive[v] = False
        left -= 1
        if d > bound:
            bound, where = d, frozenset([v, *m])
        if not m:
            continue
        u = min(m, key=lambda x: (len(adj[x]), x))
        for w in m:
            adj[w].discard(v)
            if w != u:
                adj[w].add(u)
                adj[u].add(w)
        adj[v] = set()
        for w in (*m, u):
            heapq.heappush(heap, (len(adj[w]), w))
    return bound, where


def min_fill_order(adjacency: list[set[int]], max_entries: float = math.inf
                   ) -> tuple[list[int], list[frozenset[int]]]:
    """Greedy elimination order: least fill-in first, ties by fewest neighbours, then index.

    Parameters
    ----------
    adjacency : list of set of int
        An undirected graph (not modified).
    max_entries : float
        Raise _OverBudget as soon as the elimination cliques made so far
        hold more table entries than this (a tree too large is refused
        without finishing the order); with a finite budget, the
        minor-min-width lower bound is checked as soon as a clique comes
        within 2^10 of the budget, so a tree too wide is refused early.

    Returns
    -------
    order : list of int
        The elimination order.
    neighbours : list of frozenset of int
        Each vertex's neighbours when it was eliminated (its elimination
        clique less itself).

    Notes
    -----
    A vertex's fill-in changes only when its own neighbourhood changes (it
    was a neighbour of the eliminated vertex) or when a fill edge joins two of
    its neighbours, so only those vertices are rescored: eliminating a
    simplicial vertex (no fill, the common case in fault trees) rescores its
    neighbours alone. Fill-in is counted with set intersections, d(d-1)/2
    minus the edges already among the neighbours.

    References
    ----------
    Kjaerulff 1990 (min-fill).
    """
    lower_bound_checked = max_entries == math.inf

    def check_lower_bound() -> None:
        # The minor-min-width bound refuses a tree too wide before the order
        # is finished. It can only refuse a tree whose order meets a clique of
        # 2^(bound + 1) > max_entries entries, so it is computed when the
        # order first meets a clique within _MMW_SLACK_BITS of the budget (or
        # is about to refuse): narrow trees never pay for it, wide ones are
        # refused by it as before (at once where a vertex's degree is that high).
        nonlocal lower_bound_checked
        lower_bound_checked = True
        bound, where = minor_min_width(adjacency)
        if 2 ** (bound + 1) > max_entries:
            raise _OverBudget(where, 2 ** (bound + 1), bound)

    # A vertex of high degree would make such a clique if eliminated now, and
    # makes min-fill's own scoring slow (wide trees): bound the width first.
    if not lower_bound_checked and 2 ** (max(map(len, adjacency), default=0) + 1 + _MMW_SLACK_BITS) > max_entries:
        check_lower_bound()
    adj = [set(s) for s in adjacency]
    n = len(adj)
    entries = 0
    largest: frozenset[int] = frozenset()

    def fill(v: int) -> int:
        nb = adj[v]
        d = len(nb)
        if d < 2:
            return 0
        links = 0
        for a in nb:
            links += len(adj[a] & nb)
        return (d * (d - 1) - links) // 2

    fills = [fill(v) for v in range(n)]
    heap = [(f, len(adj[v]), v) for v, f in enumerate(fills)]
    heapq.heapify(heap)
    done = [False] * n
    order: list[int] = []
    neighbours: list[frozenset[int]] = [frozenset()] * n
    while heap:
        f, d, v = heapq.heappop(heap)
        if done[v] or fills[v] != f or len(adj[v]) != d:
            continue
        done[v] = True
        order.append(v)
        nb = adj[v]
        adj[v] = set()
        neighbours[v] = frozenset(nb)
        entries += 1 << (len(nb) + 1)
        if len(nb) + 1 > len(largest):
            largest = neighbours[v] | {v}
            if not lower_bound_checked and 2 ** (len(largest) + _MMW_SLACK_BITS) > max_entries:
                check_lower_bound()
        if entries > max_entries:
            if not lower_bound_checked:
                check_lower_bound()
            raise _OverBudget(largest, entries)
        if not f:
            # v is simplicial: each neighbour a loses exactly the missing
            # pairs (v, b) with b outside v's clique, deg(a) - deg(v) of them.
            for a in nb:
                fa = fills[a] - (len(adj[a]) - d)
                adj[a].discard(v)
                fills[a] = fa
                heapq.heappush(heap, (fa, len(adj[a]), a))
            continue
        for a in nb:
            adj[a].discard(v)
        touched = set(nb)
        added = []
        for a in nb:
            missing = nb - adj[a]
            missing.discard(a)
            if missing:
                adj[a] |= missing
                for b in missing:
                    adj[b].add(a)
                    added.append((a, b))
        for a, b in added:
            touched |= adj[a] & adj[b]
        for w in touched:
            fw = fill(w)
            if fw != fills[w] or w in nb:
                fills[w] = fw
                heapq.heappush(heap, (fw, len(adj[w]), w))
    return order, neighbours


def elimination_tree(order: list[int], neighbours: list[frozenset[int]]) -> list[int]:
    """Parent of each vertex's elimination clique: its neighbour eliminated first after it (-1: a root)."""
    position = [0] * len(order)
    for i, v in enumerate(order):
        position[v] = i
    parent = [-1] * len(order)
    for v in order:
        if neighbours[v]:
            parent[v] = min(neighbours[v], key=position.__getitem__)
    return parent


def merge_cliques(order: list[int], neighbours: list[frozenset[int]], parent: list[int],
                  merge_entries: int) -> tuple[list[int], dict[int, set[int]], dict[int, int], dict[int, int]]:
    """Drop non-maximal elimination cliques and merge small ones into their parents.

    Parameters
    ----------
    order, neighbours, parent
        From :func:`min_fill_order` and :func:`elimination_tree`; clique v is
        ``{v} | neighbours[v]``.
    merge_entries : int
        A clique is merged into its parent while the union has at most this
        many table entries (fewer, larger tables cost less interpreter time).

    Returns
    -------
    alive : list of int
        The cliques kept, named by their eliminated vertex, in elimination order.
    members : dict
        Clique -> its variables.
    tree_parent : dict
        Clique -> its parent clique (-1: a root).
    merged_into : dict
        Removed clique -> the clique that took its place.
    """
    members = {v: set(neighbours[v]) | {v} for v in order}
    tree_parent = {v: parent[v] for v in order}
    children: dict[int, list[int]] = {v: [] for v in order}
    for v in order:
        if parent[v] >= 0:
            children[parent[v]].append(v)
    alive = set(order)
    merged_into: dict[int, int] = {}

    def absorb(v: int, into: int, keep_child: bool) -> None:
        alive.discard(v)
        merged_into[v] = into
        if keep_child:  # into is a child of v: it takes v's place
            tree_parent[into] = tree_parent[v]
            if tree_parent[v] >= 0:
                siblings = children[tree_parent[v]]
                siblings[siblings.index(v)] = into
        else:  # into is v's parent
            children[into].remove(v)
        for x in children[v]:
            if x != into and x in alive:
                tree_parent[x] = into
                children[into].append(x)
        children[v] = []

    # A non-maximal clique is always contained in one of its children.
    for v in order:
        for w in children[v]:
            if members[v] <= members[w]:
                absorb(v, w, keep_child=True)
                break
    # Small cliques into their parents, children first.
    for v in order:
        p = tree_parent[v]
        if v not in alive or p < 0:
            continue
        union = members[p] | members[v]
        if 2 ** len(union) <= merge_entries:
            members[p] = union
            absorb(v, p, keep_child=False)
    kept = [v for v in order if v in alive]
    return kept, {v: members[v] for v in kept}, {v: tree_parent[v] for v in kept}, merged_into


def centre_roots(parent: list[int]) -> list[int]:
    """The same forest, each tree hung from a centre of its longest path (least height).

    The propagation takes two numpy passes per level, so a shallow tree is a fast one.
    """
    n = len(parent)
    nbrs: list[list[int]] = [[] for _ in range(n)]
    for c, p in enumerate(parent):
        if p >= 0:
            nbrs[c].append(p)
            nbrs[p].append(c)

    def bfs(start: int) -> tuple[list[int], dict[int, int]]:
        seen = {start: -1}
        queue = deque([start])
        visited = []
        while queue:
            x = queue.popleft()
            visited.append(x)
            for y in nbrs[x]:
                if y not in seen:
                    seen[y] = x
                    queue.append(y)
        return visited, seen

    new_parent = [-1] * n
    placed = [False] * n
    for start in range(n):
        if placed[start]:
            continue
        visited, _ = bfs(start)
        far = visited[-1]
        visited, came = bfs(far)
        path = [visited[-1]]
        while came[path[-1]] >= 0:
            path.append(came[path[-1]])
        centre = path[len(path) // 2]
        visited, came = bfs(centre)
        for x in visited:
            new_parent[x] = came[x]
            placed[x] = True
    return new_parent


@dataclass(frozen=True)
class Layout:
    """Where every clique's table lives in the flat buffer.

    Cliques are numbered level by level (roots first); on a level, those
    with more children come first, so the r-th children of a level's
    parents always land on a prefix of the parents' tables.

    Attributes
    ----------
    cliques : list of tuple of int
        Each clique's variables in its table's axis order (C order): the
        separator with its parent first, ascending, then the rest, ascending.
    parent : list of int
        Parent clique, -1 for a root.
    depth : list of int
    sep_size : list of int
        Number of separator variables (0 for a root).
    offsets : ndarray
        Table c is ``buffer[offsets[c]:offsets[c + 1]]``.
    level_start : list of int
        The cliques of level d are ``level_start[d]:level_start[d + 1]``.
    """

    cliques: list[tuple[int, ...]]
    parent: list[int]
    depth: list[int]
    sep_size: list[int]
    offsets: np.ndarray
    level_start: list[int]


def layout(members: list[set[int]], parent: list[int], tie: list[int]) -> tuple[Layout, list[int]]:
    """Number the cliques level by level and order each table's axes, separator first.

    Parameters
    ----------
    members : list of set of int
        Each clique's variables.
    parent : list of int
        Parent of each clique (-1: a root).
    tie : list of int
        A deterministic tie-break per clique (its elimination position).

    Returns
    -------
    Layout
    slot : list of int
        The new number of each input clique.
    """
    n = len(members)
    kids: list[list[int]] = [[] for _ in range(n)]
    for c, p in enumerate(parent):
        if p >= 0:
            kids[p].append(c)
    depth = [0] * n
    queue = deque(c for c in range(n) if parent[c] < 0)
    seen = []
    while queue:
        c = queue.popleft()
        seen.append(c)
        for k in kids[c]:
            depth[k] = depth[c] + 1
            queue.append(k)
    ranked = sorted(range(n), key=lambda c: (depth[c], -len(kids[c]), tie[c]))
    slot = [0] * n
    for i, c in enumerate(ranked):
        slot[c] = i
    cliques, new_parent, new_depth, sep_size = [], [], [], []
    for c in ranked:
        p = parent[c]
        sep = members[c] & members[p] if p >= 0 else set()
        cliques.append(tuple(sorted(sep)) + tuple(sorted(members[c] - sep)))
        new_parent.append(slot[p] if p >= 0 else -1)
        new_depth.append(depth[c])
        sep_size.append(len(sep))
    offsets = np.zeros(n + 1, dtype=np.int64)
    offsets[1:] = np.cumsum([1 << len(c) for c in cliques])
    levels = max(new_depth) + 1 if n else 0
    level_start = [0] * (levels + 1)
    for d in new_depth:
        level_start[d + 1] += 1
    for d in range(levels):
        level_start[d + 1] += level_start[d]
    return Layout(cliques, new_parent, new_depth, sep_size, offsets, level_start), slot


def _bits(entries: np.ndarray, size: int, axes: np.ndarray) -> np.ndarray:
    """State index, over ``axes`` (most significant first), of each entry of a table of ``size`` axes."""
    out = np.zeros(entries.shape, dtype=np.int64)
    for axis in axes:
        out = (out << 1) | ((entries >> (size - 1 - int(axis))) & 1)
    return out


def sub_index(lay: Layout, c: int, variables, memo: dict | None = None) -> np.ndarray:
    """For every entry of clique c's table, its state index over ``variables`` (first most significant).

    ``memo`` (a dict the caller keeps for one compilation) shares the answer
    between cliques of the same size reading the same axes.
    """
    clique = lay.cliques[c]
    key = (len(clique), tuple(clique.index(v) for v in variables))
    found = memo.get(key) if memo is not None else None
    if found is None:
        found = _bits(np.arange(1 << key[0], dtype=np.int64), key[0], np.array(key[1], dtype=np.int64))
        if memo is not None:
            memo[key] = found
    return found


def base_potentials(lay: Layout, tables: list[np.ndarray], families: list[tuple[int, ...]],
                    hosts: list[int]) -> np.ndarray:
    """The product of every conditional table folded into its host clique, as one flat buffer.

    Parameters
    ----------
    lay : Layout
    tables : list of ndarray
        P(node | parents), shape (2,) * len(family), axes in the family's order.
    families : list of tuple of int
        Each table's variables (parents, then the node).
    hosts : list of int
        The clique holding each family.

    Notes
    -----
    Tables are grouped by (family size, clique size) and each group is
    gathered and multiplied in with whole-array calls, a bounded number of
    entries at a time.
    """
    base = np.ones(int(lay.offsets[-1]))
    groups: dict[tuple[int, int], list[int]] = {}
    for t, fam in enumerate(families):
        groups.setdefault((len(fam), len(lay.cliques[hosts[t]])), []).append(t)
    local_of: dict[int, dict[int, int]] = {}
    for c in set(hosts):
        local_of[c] = {x: i for i, x in enumerate(lay.cliques[c])}
    for (f, k), members in groups.items():
        entries = np.arange(1 << k, dtype=np.int64)
        step = max(1, _CHUNK >> k)
        for start in range(0, len(members), step):
            chunk = members[start : start + step]
            axes = np.array([[local_of[hosts[t]][x] for x in families[t]] for t in chunk],
                            dtype=np.int64).reshape(len(chunk), f)
            idx = np.zeros((len(chunk), 1 << k), dtype=np.int64)
            for j in range(f):
                idx = (idx << 1) | ((entries[None, :] >> (k - 1 - axes[:, j : j + 1])) & 1)
            flat_tables = np.stack([tables[t].reshape(-1) for t in chunk])
            values = np.take_along_axis(flat_tables, idx, axis=1)
            where = lay.offsets[[hosts[t] for t in chunk]][:, None] + entries[None, :]
            np.multiply.at(base, where.ravel(), values.ravel())
    return base


@dataclass(frozen=True)
class Level:
    """The index plan of one level of the tree (its cliques send to the level above).

    Attributes
    ----------
    lo, hi : int
        The level's tables in the buffer.
    parent_lo : int
        Where the tables of the level above start.
    first, last : int
        The level's cliques (their numbers).
    sep_lo, sep_hi : int
        The level's separators in the separator buffer.
    block_starts : ndarray
        Start, relative to lo, of each separator state's block (contiguous,
        as the separator axes come first).
    block_sizes : ndarray
        Length of each such block.
    sep_starts : ndarray
        Start, relative to sep_lo, of each clique's separator table.
    sep_counts : ndarray
        Entries of each clique's separator table.
    rounds : tuple of (int, ndarray)
        Round r: the r-th child of every parent that has one. The parents'
        first ``length`` entries (from parent_lo) pair with the separator
        entries ``gather`` (relative to sep_lo).
    """

    lo: int
    hi: int
    parent_lo: int
    first: int
    last: int
    sep_lo: int
    sep_hi: int
    block_starts: np.ndarray
    block_sizes: np.ndarray
    sep_starts: np.ndarray
    sep_counts: np.ndarray
    rounds: tuple[tuple[int, np.ndarray], ...]


def propagation_plan(lay: Layout) -> tuple[list[Level], np.ndarray]:
    """Index plans for every level, and each clique's start in the separator buffer.

    Returns
    -------
    levels : list of Level
        Level 1 (children of the roots) first.
    sep_offsets : ndarray
        Clique c's separator table is ``separators[sep_offsets[c]:sep_offsets[c + 1]]``.
    """
    n = len(lay.cliques)
    sep_offsets = np.zeros(n + 1, dtype=np.int64)
    sep_offsets[1:] = np.cumsum([1 << s if lay.parent[c] >= 0 else 0 for c, s in enumerate(lay.sep_size)])
    kids: list[list[int]] = [[] for _ in range(n)]
    for c, p in enumerate(lay.parent):
        if p >= 0:
            kids[p].append(c)
    levels = []
    memo: dict = {}
    for d in range(1, len(lay.level_start) - 1):
        first, last = lay.level_start[d], lay.level_start[d + 1]
        lo, hi = int(lay.offsets[first]), int(lay.offsets[last])
        sep_lo, sep_hi = int(sep_offsets[first]), int(sep_offsets[last])
        sizes = np.array([len(lay.cliques[c]) for c in range(first, last)])
        seps = np.array(lay.sep_size[first:last])
        sep_counts = 1 << seps
        block_sizes = np.repeat(1 << (sizes - seps), sep_counts)
        block_starts = np.zeros(len(block_sizes), dtype=np.int64)
        block_starts[1:] = np.cumsum(block_sizes)[:-1]
        sep_starts = sep_offsets[first:last] - sep_lo
        parents = range(lay.level_start[d - 1], first)
        parent_lo = int(lay.offsets[lay.level_start[d - 1]])
        rounds = []
        for r in range(max((len(kids[p]) for p in parents), default=0)):
            having = [p for p in parents if len(kids[p]) > r]  # a prefix: more children first
            gathers = []
            for p in having:
                child = kids[p][r]
                sep = lay.cliques[child][: lay.sep_size[child]]
                gathers.append(sub_index(lay, p, sep, memo) + int(sep_offsets[child] - sep_lo))
            length = int(lay.offsets[having[-1] + 1]) - parent_lo
            rounds.append((length, np.concatenate(gathers)))
        levels.append(Level(lo, hi, parent_lo, first, last, sep_lo, sep_hi, block_starts, block_sizes,
                            sep_starts, sep_counts, tuple(rounds)))
    return levels, sep_offsets


def _entries_with_bit(size: int) -> np.ndarray:
    """Row i: the entries of a table of ``size`` axes where axis i is 1, shape (size, 2**(size-1))."""
    entries = np.arange(1 << size, dtype=np.int64)
    on = ((entries[None, :] >> (size - 1 - np.arange(size)[:, None])) & 1) == 1
    return np.nonzero(on)[1].reshape(size, -1)


@dataclass(frozen=True)
class MarginalPlan:
    """Where every variable's marginal is read from the calibrated tables.

    A variable on some separator is read from its smallest separator table
    (one gather and one ``bincount`` for all of them). Any other variable
    lives in one clique only; those cliques are read by size: one gather
    of their tables, then per axis one strided sum over the entries where
    that axis is 1, whatever the number of cliques.

    Attributes
    ----------
    sep_gather, sep_target : ndarray
        P(v = 1) of separator variables = bincount(sep_target, separators[sep_gather]).
    groups : tuple of (int, ndarray, tuple of int, ndarray, ndarray)
        (clique size k, gather of their tables, axes needed, positions in
        the (cliques, axes) result, the variables they are).
    """

    sep_gather: np.ndarray
    sep_target: np.ndarray
    groups: tuple

    @property
    def entries(self) -> int:
        """Entries read (the separators' half tables, and per clique size its tables once per axis)."""
        return len(self.sep_gather) + sum(len(g) * (1 + len(axes)) // 2 for _, g, axes, _, _ in self.groups)


def marginal_plan(lay: Layout, sep_offsets: np.ndarray, n_vars: int) -> MarginalPlan:
    """Plan the reading of every variable's marginal (see :class:`MarginalPlan`)."""
    best_sep = [(1 << 62, 0, 0)] * n_vars  # (separator size, start, axis)
    home = [(-1, 0)] * n_vars  # (clique, axis) for a variable on no separator
    sep_start = sep_offsets.tolist()
    for c, clique in enumerate(lay.cliques):
        s = lay.sep_size[c] if lay.parent[c] >= 0 else 0
        for i, v in enumerate(clique):
            if i < s:
                if s < best_sep[v][0]:
                    best_sep[v] = (s, sep_start[c], i)
            else:
                home[v] = (c, i)
    by_size: dict[int, list[tuple[int, int, int]]] = {}
    for v, (size, start, axis) in enumerate(best_sep):
        if size < (1 << 62):
            by_size.setdefault(size, []).append((v, start, axis))
    gathers, targets = [], []
    for size, rows in by_size.items():
        var_ids, sep_starts, sep_axes = (np.array(x, dtype=np.int64) for x in zip(*rows))
        gathers.append((_entries_with_bit(size)[sep_axes] + sep_starts[:, None]).ravel())
        targets.append(np.repeat(var_ids, 1 << (size - 1)))
    per_clique: dict[int, list[tuple[int, int]]] = {}
    for v, (c, axis) in enumerate(home):
        if c >= 0 and best_sep[v][0] == (1 << 62):
            per_clique.setdefault(c, []).append((v, axis))
    by_k: dict[int, list[int]] = {}
    for c in per_clique:
        by_k.setdefault(len(lay.cliques[c]), []).append(c)
    starts = lay.offsets.tolist()
    groups = []
    for k, cs in sorted(by_k.items()):
        axes = sorted({axis for c in cs for _, axis in per_clique[c]})
        column = {axis: j for j, axis in enumerate(axes)}
        gather = (np.array([starts[c] for c in cs], dtype=np.int64)[:, None]
                  + np.arange(1 << k, dtype=np.int64)[None, :]).ravel()
        pos, var = [], []
        for row, c in enumerate(cs):
            for v, axis in per_clique[c]:
                pos.append(row * len(axes) + column[axis])
                var.append(v)
        groups.append((k, gather, tuple(axes), np.array(pos, dtype=np.int64), np.array(var, dtype=np.int64)))

    def cat(xs):
        return np.concatenate(xs) if xs else np.zeros(0, dtype=np.int64)

    return MarginalPlan(cat(gathers), cat(targets), tuple(groups))


def too_large(variables: list[str], largest, entries: int, memory_budget: int, early: bool,
              width: int | None = None) -> NetworkTooLarge:
    """The refusal of a join tree over budget, naming its width, its size and the gates of its largest clique."""
    names = sorted({variables[i].split(DERIVED)[0] for i in largest})
    shown = ", ".join(names[:12]) + (" ..." if len(names) > 12 else "")
    need = entries * (_BYTES_PER_ENTRY + _PLAN_BYTES_PER_ENTRY)
    more = " or more" if early else ""
    width = max(len(largest) - 1, width or 0)
    return NetworkTooLarge(
        f"the join tree would need {need / 1024**2:,.0f} MiB{more} (budget {memory_budget / 1024**2:,.0f} MiB): "
        f"width {width}{more}, {entries:,} table entries{more}; the largest clique so far joins {shown}. "
        "Split checks with many causes, or remove repeated events shared across these gates"
    )


def check_budget(variables: list[str], neighbours: list[frozenset[int]], memory_budget: int) -> None:
    """Raise NetworkTooLarge, before anything is allocated, if the elimination cliques exceed the budget.

    The tables (base, working copy, messages) and their index plans are counted.
    """
    sizes = [len(nb) + 1 for nb in neighbours]
    entries = sum(1 << s for s in sizes)
    if entries * (_BYTES_PER_ENTRY + _PLAN_BYTES_PER_ENTRY) <= memory_budget:
        return
    v = max(range(len(sizes)), key=sizes.__getitem__)
    raise too_large(variables, neighbours[v] | {v}, entries, memory_budget, early=False)


# -- the compiled tree ------------------------------------------------------------


class JoinTree:
    """A compiled join tree over a :class:`~troubleshoot.engine.network.Network`.

    Parameters
    ----------
    network : Network
        The network; check nodes are not carried (findings on checks enter as
        likelihoods over their cause sets, which compilation keeps together).
    memory_budget : int
        Bytes the tables may take; a larger tree raises NetworkTooLarge
        before any table is allocated.
    merge_entries : int
        Neighbouring cliques are merged while the merged table has at most
        this many entries.
    families : dict, optional
        (check id, epoch) -> CheckFamily whose cause sets must share a clique
        (default: all of the network's).
    variables : list of str, optional
        The nodes to carry, closed under parents (default: all but checks).

    Attributes
    ----------
    variables : list of str
        Node ids carried, in index order.
    cliques : list of tuple of int
        Variable indices of each clique, in its table's axis order.
    parent : list of int
        Parent clique of each clique (-1 for a root).
    width : int
        Largest clique size minus one.
    table_entries : int
        Total entries of all clique tables.
    touched_entries : int
        Table entries the arithmetic of one propagation visits (every sum,
        multiply and division of an entry counted once): the size of the
        work, against which the benchmark's floor is timed.
    """

    def __init__(self, network: Network, memory_budget: int = DEFAULT_MEMORY_BUDGET,
                 merge_entries: int = MERGE_ENTRIES, families=None, variables=None):
        self.network = network
        graph = network.graph
        self.variables = network.inference_nodes() if variables is None else list(variables)
        self.families = dict(network.families if families is None else families)
        self.index = {v: i for i, v in enumerate(self.variables)}
        n = len(self.variables)

        adjacency = moral_graph(network, self.variables, self.families)
        try:
            order, neighbours = min_fill_order(adjacency, memory_budget / (_BYTES_PER_ENTRY + _PLAN_BYTES_PER_ENTRY))
        except _OverBudget as over:
            raise too_large(self.variables, over.clique, over.entries, memory_budget, early=True,
                            width=over.width_bound) from None
        check_budget(self.variables, neighbours, memory_budget)
        position = [0] * n
        for i, v in enumerate(order):
            position[v] = i
        self._position = position
        kept, members, tree_parent, merged_into = merge_cliques(
            order, neighbours, elimination_tree(order, neighbours), merge_entries)
        number = {v: i for i, v in enumerate(kept)}
        parent = centre_roots([number[tree_parent[v]] if tree_parent[v] >= 0 else -1 for v in kept])
        lay, slot = layout([members[v] for v in kept], parent, [position[v] for v in kept])
        self._layout = lay
        self.cliques = lay.cliques
        self.parent = lay.parent
        self.offsets = lay.offsets
        self.shapes = [(2,) * len(c) for c in self.cliques]
        sizes = [len(c) for c in self.cliques]
        self.width = max(sizes) - 1 if sizes else 0
        self.table_entries = int(lay.offsets[-1]) if sizes else 0

        # Any factor over a set that was a clique in the graph lives where the
        # elimination clique of its earliest-eliminated member went.
        def host(v: int) -> int:
            while v in merged_into:
                v = merged_into[v]
            return slot[number[v]]

        self.var_host = np.array([host(v) for v in range(n)], dtype=np.int64)

        data = dict(graph.nodes(data=True))
        index = self.index
        families_idx = [tuple(index[x] for x in (*data[v]["parents"], v)) for v in self.variables]
        self.base = base_potentials(lay, [data[v]["table"] for v in self.variables], families_idx,
                                    [self._host_of_group(f) for f in families_idx])
        self._levels, self._sep_offsets = propagation_plan(lay)
        self._roots_end = lay.level_start[1] if len(lay.level_start) > 1 else 0
        self._root_sizes = np.diff(lay.offsets[: self._roots_end + 1])
        self._root_starts = lay.offsets[: self._roots_end].copy()
        self._marginal_plan = marginal_plan(lay, self._sep_offsets, n)
        self.touched_entries = self._count_touched()
        self._joint_plans: dict = {}
        self._evidence_plans: dict = {}
        self._batch_plans: dict = {}
        self._containing: list[list[int]] | None = None

    def _count_touched(self) -> int:
        """Table entries the arithmetic of one propagation visits (see ``touched_entries``).

        Roots: a sum and a division per entry. Each level: collect sums the
        senders' entries into messages, scales the messages and multiplies
        every parent entry once per child; distribute sums every parent entry
        once per child onto the separators, divides the separators and scales
        every child entry. Then the marginals' reads.
        """
        roots = int(self.offsets[self._roots_end]) if self.cliques else 0
        total = 2 * roots
        for lev in self._levels:
            rounds = sum(length for length, _ in lev.rounds)
            total += 2 * (lev.hi - lev.lo) + 2 * (lev.sep_hi - lev.sep_lo) + 2 * rounds
        return total + self._marginal_plan.entries

    @property
    def roots(self) -> list[int]:
        return [c for c, p in enumerate(self.parent) if p < 0]

    @property
    def depth(self) -> int:
        """Levels below the roots: the number of sequential steps of each pass."""
        return len(self._levels)

    # -- placing factors and reading joints ---------------------------------
    def _host_of_group(self, idx) -> int:
        """A clique holding every variable of idx, a set made adjacent in the graph.

        It is where the elimination clique of the earliest-eliminated member went.
        """
        first = min(idx, key=self._position.__getitem__)
        c = int(self.var_host[first])
        if len(idx) > 1 and not set(idx) <= set(self.cliques[c]):
            raise AssertionError("no clique holds a family; the triangulation is broken")
        return c

    def evidence_on_variables(self, variables: tuple[str, ...], likelihood: np.ndarray) -> Evidence:
        """A likelihood over some variables (axes in the given order), placed in a clique holding them all."""
        c, order, shape = self.evidence_placement(tuple(variables))
        factor = np.transpose(likelihood, order) if len(order) > 1 else likelihood
        return Evidence(c, np.ascontiguousarray(factor).reshape(shape))

    def evidence_placement(self, variables: tuple[str, ...]) -> tuple[int, tuple[int, ...], tuple[int, ...]]:
        """(clique, axis order, shape) of a likelihood over ``variables`` in this tree; cached.

        The structure alone decides it, so every finding on the same
        variables (and every refitted copy of the tree) reuses it.
        """
        plan = self._evidence_plans.get(variables)
        if plan is None:
            idx = [self.index[v] for v in variables]
            c = self._host_of_group(idx)
            local = {x: i for i, x in enumerate(self.cliques[c])}
            shape = [1] * len(self.cliques[c])
            for i in idx:
                shape[local[i]] = 2
            plan = (c, tuple(sorted(range(len(idx)), key=lambda i: local[idx[i]])), tuple(shape))
            self._evidence_plans[variables] = plan
        return plan

    def joint_plan(self, variables: tuple[str, ...]):
        """(clique, axes to sum out, transpose or None) for a joint of variables; cached."""
        plan = self._joint_plans.get(variables)
        if plan is None:
            idx = [self.index[v] for v in variables]
            c = self._host_of_group(idx)
            members = self.cliques[c]
            wanted = set(idx)
            drop = tuple(i for i, x in enumerate(members) if x not in wanted)
            kept = [x for x in members if x in wanted]
            perm = [kept.index(i) for i in idx]
            plan = (c, drop, perm if perm != sorted(perm) else None)
            self._joint_plans[variables] = plan
        return plan

    def smallest_table(self, idx: list[int]) -> tuple[int, bool]:
        """(clique, in its separator?) of the smallest calibrated table holding every variable of idx."""
        if self._containing is None:
            self._containing = [[] for _ in self.variables]
            for c, clique in enumerate(self.cliques):
                for v in clique:
                    self._containing[v].append(c)
        wanted = set(idx)
        best = (1 << 62, self._host_of_group(idx) if idx else 0, False)
        for c in self._containing[idx[0]] if idx else ():
            clique = self.cliques[c]
            if len(clique) < best[0] and wanted <= set(clique):
                best = (len(clique), c, False)
            s = self._layout.sep_size[c] if self.parent[c] >= 0 else 0
            if s < best[0] and wanted <= set(clique[:s]):
                best = (s, c, True)
        return best[1], best[2]

    def joints_plan(self, groups: tuple[tuple[str, ...], ...]):
        """Index plan for the joints of many variable sets of one size m, read in two calls.

        Each set is read from the smallest calibrated table holding it (a
        clique or a separator); a single variable from its marginal. Returns (clique gather, clique target,
        separator gather, separator target, states): the sum of
        ``bincount(target, buffer[gather])`` over both buffers, reshaped to
        (len(groups), 2**m), is every joint, states in C order over each
        set's variables as given. Cached.
        """
        plan = self._batch_plans.get(groups)
        if plan is not None:
            return plan
        m = len(groups[0]) if groups else 0
        states = 1 << m
        if m == 1:  # one variable: its marginal, already read by the propagation
            plan = (None, np.array([self.index[v] for (v,) in groups], dtype=np.int64), None, None, states)
            self._batch_plans[groups] = plan
            return plan
        parts: dict[bool, tuple[list, list]] = {False: ([], []), True: ([], [])}
        for row, variables in enumerate(groups):
            idx = [self.index[v] for v in variables]
            c, in_sep = self.smallest_table(idx)
            clique = self.cliques[c]
            if in_sep:
                size = self._layout.sep_size[c]
                start = int(self._sep_offsets[c])
            else:
                size = len(clique)
                start = int(self.offsets[c])
            local = {x: i for i, x in enumerate(clique[:size])}
            entries = np.arange(1 << size, dtype=np.int64)
            parts[in_sep][0].append(entries + start)
            parts[in_sep][1].append(row * states + _bits(entries, size, np.array([local[i] for i in idx],
                                                                                dtype=np.int64)))

        def cat(xs):
            return np.concatenate(xs) if xs else np.zeros(0, dtype=np.int64)

        plan = (cat(parts[False][0]), cat(parts[False][1]), cat(parts[True][0]), cat(parts[True][1]), states)
        self._batch_plans[groups] = plan
        return plan

    # -- propagation -----------------------------------------------------
    def propagate(self, evidence: list[Evidence]) -> Calibrated:
        """Collect and distribute with the given likelihoods; raises ZeroProbability.

        Returns the calibrated clique tables and log P(evidence).
        """
        work = self.base.copy()
        offsets, shapes = self.offsets, self.shapes
        for ev in evidence:
            c = ev.clique
            work[offsets[c] : offsets[c + 1]].reshape(shapes[c])[...] *= ev.factor
        n_sep = int(self._sep_offsets[-1])
        old = np.empty(n_sep)  # each message as sent, unnormalised
        new = np.empty(n_sep)  # each separator's posterior
        z = np.empty(len(self.cliques))
        with np.errstate(divide="ignore", invalid="ignore"):
            # Collect, deepest level first: messages are block sums, normalised as sent.
            for lev in reversed(self._levels):
                raw = old[lev.sep_lo : lev.sep_hi]
                np.add.reduceat(work[lev.lo : lev.hi], lev.block_starts, out=raw)
                zl = z[lev.first : lev.last]
                np.add.reduceat(raw, lev.sep_starts, out=zl)
                msg = raw / zl.repeat(lev.sep_counts)
                for length, gather in lev.rounds:
                    work[lev.parent_lo : lev.parent_lo + length] *= msg[gather]
            roots = work[: self.offsets[self._roots_end]]
            zr = z[: self._roots_end]
            np.add.reduceat(roots, self._root_starts, out=zr)
            roots /= zr.repeat(self._root_sizes)
            if not z.min(initial=1.0) > 0.0:  # also catches NaN from 0/0 below an impossible finding
                raise ZeroProbability
            log_p = float(np.log(z).sum())
            # Where a message was zero the child's block is zero too: divide by one there.
            old += old == 0.0
            # Distribute, shallowest level first.
            for lev in self._levels:
                count = lev.sep_hi - lev.sep_lo
                sep = new[lev.sep_lo : lev.sep_hi]
                sep[...] = 0.0
                for length, gather in lev.rounds:
                    sep += np.bincount(gather, weights=work[lev.parent_lo : lev.parent_lo + length],
                                       minlength=count)
                ratio = sep / old[lev.sep_lo : lev.sep_hi]
                work[lev.lo : lev.hi] *= ratio.repeat(lev.block_sizes)
        return Calibrated(self, work, new, log_p)

    def separator_sum_plans(self) -> list:
        """Per level, per round of :meth:`propagate`'s distribute pass: (length, order, block starts, targets).

        The gather of a round sorted once (stable), so each separator entry's sum over many rows is one
        ``reduceat`` block. Built on first use and kept (a shallow copy of the tree shares it).
        """
        plans = self.__dict__.get("_many_plans")
        if plans is None:
            plans = []
            for lev in self._levels:
                rounds = []
                for length, gather in lev.rounds:
                    order = np.argsort(gather, kind="stable")
                    ordered = gather[order]
                    change = np.ones(len(ordered), dtype=bool)
                    change[1:] = ordered[1:] != ordered[:-1]
                    starts = np.flatnonzero(change)
                    rounds.append((length, order, starts, ordered[starts]))
                plans.append(rounds)
            self.__dict__["_many_plans"] = plans
        return plans

    def propagate_many(self, count: int, evidence) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """:meth:`propagate` for ``count`` sets of evidence at once, each a row of one array per table.

        Parameters
        ----------
        count : int
            Rows (sets of evidence).
        evidence : iterable of (Evidence, rows)
            Each likelihood with the rows (integer array) it belongs to.

        Returns
        -------
        work : numpy.ndarray, shape (count, entries)
            Row r: the calibrated clique tables of row r's evidence (layout of :attr:`base`).
        log_p : numpy.ndarray, shape (count,)
            log P(evidence) per row.
        possible : numpy.ndarray of bool, shape (count,)
            False where a row's evidence has probability zero (its tables mean nothing).

        Notes
        -----
        The same level plans as :meth:`propagate`, each step one whole-array
        operation over every row (so a fleet of sessions sharing a tree costs
        a handful of numpy calls per level, not per session); separator sums
        that :meth:`propagate` gathers with ``bincount`` are sorted once into
        ``reduceat`` blocks. Rows never mix: each row's numbers do not depend
        on the other rows.
        """
        offsets, shapes = self.offsets, self.shapes
        work = np.tile(self.base, (count, 1))
        for ev, rows in evidence:
            c = ev.clique
            lo, hi = int(offsets[c]), int(offsets[c + 1])
            block = work[rows, lo:hi].reshape((len(rows),) + tuple(shapes[c]))
            work[rows, lo:hi] = (block * ev.factor[None]).reshape(len(rows), hi - lo)
        plans = self.separator_sum_plans()
        n_sep = int(self._sep_offsets[-1])
        old = np.empty((count, n_sep))
        z = np.empty((count, len(self.cliques)))
        with np.errstate(divide="ignore", invalid="ignore"):
            for lev in reversed(self._levels):
                raw = np.add.reduceat(work[:, lev.lo : lev.hi], lev.block_starts, axis=1)
                old[:, lev.sep_lo : lev.sep_hi] = raw
                zl = np.add.reduceat(raw, lev.sep_starts, axis=1)
                z[:, lev.first : lev.last] = zl
                msg = raw / np.repeat(zl, lev.sep_counts, axis=1)
                for length, gather in lev.rounds:
                    work[:, lev.parent_lo : lev.parent_lo + length] *= msg[:, gather]
            end = int(self.offsets[self._roots_end])
            zr = np.add.reduceat(work[:, :end], self._root_starts, axis=1) if end else np.zeros((count, 0))
            z[:, : self._roots_end] = zr
            work[:, :end] /= np.repeat(zr, self._root_sizes, axis=1)
            possible = np.all(z > 0.0, axis=1)  # also catches NaN from 0/0 below an impossible finding
            log_p = np.log(np.where(possible[:, None], z, 1.0)).sum(axis=1)
            old += old == 0.0
            for lev, rounds in zip(self._levels, plans):
                sep = np.zeros((count, lev.sep_hi - lev.sep_lo))
                for length, order, starts, targets in rounds:
                    block = work[:, lev.parent_lo : lev.parent_lo + length][:, order]
                    sep[:, targets] += np.add.reduceat(block, starts, axis=1)
                ratio = sep / old[:, lev.sep_lo : lev.sep_hi]
                work[:, lev.lo : lev.hi] *= np.repeat(ratio, lev.block_sizes, axis=1)
        return work, log_p, possible

    def max_propagate(self, evidence: list[Evidence]) -> tuple[dict[int, int], float]:
        """The most probable joint state of every variable with the evidence: max-product collect, then decode.

        Returns (variable index -> state, log max P(state, evidence)). One
        collect pass with max in place of sum, level by level over the same
        plans as :meth:`propagate` (block maxima into messages, each
        normalised as it is sent); the decoding walks the tree from the
        roots, each clique taking its best state given what its parent
        chose. Memory: one copy of the tables. Raises ZeroProbability.

        References
        ----------
        A. P. Dawid, "Applications of a general propagation algorithm for
        probabilistic expert systems", Statistics and Computing 2, 1992
        (max-propagation in a join tree).
        """
        work = self.base.copy()
        offsets, shapes = self.offsets, self.shapes
        for ev in evidence:
            c = ev.clique
            work[offsets[c] : offsets[c + 1]].reshape(shapes[c])[...] *= ev.factor
        z = np.empty(len(self.cliques))
        with np.errstate(divide="ignore", invalid="ignore"):
            for lev in reversed(self._levels):
                raw = np.maximum.reduceat(work[lev.lo : lev.hi], lev.block_starts)
                zl = z[lev.first : lev.last]
                np.maximum.reduceat(raw, lev.sep_starts, out=zl)
                msg = raw / zl.repeat(lev.sep_counts)
                for length, gather in lev.rounds:
                    work[lev.parent_lo : lev.parent_lo + length] *= msg[gather]
            roots = work[: self.offsets[self._roots_end]]
            np.maximum.reduceat(roots, self._root_starts, out=z[: self._roots_end])
            if not z.min(initial=1.0) > 0.0:
                raise ZeroProbability
            log_m = float(np.log(z).sum())
        state: dict[int, int] = {}
        for c, members in enumerate(self.cliques):  # numbered level by level: parents first
            table = work[offsets[c] : offsets[c + 1]].reshape(shapes[c])
            index = tuple(state[v] if v in state else slice(None) for v in members)
            sub = table[index]
            free = [v for v in members if v not in state]
            best = np.unravel_index(int(np.argmax(sub)), sub.shape) if free else ()
            for v, s in zip(free, best):
                state[v] = int(s)
        return state, log_m


class Calibrated:


    """Clique and separator tables after propagation: each is the posterior of its variables."""

    def __init__(self, tree: JoinTree, work: np.ndarray, separators: np.ndarray, log_p: float):
        self.tree = tree
        self.work = work
        self.separators = separators
        self.log_p = log_p
        self._marginals: np.ndarray | None = None

    def marginals(self) -> np.ndarray:
        """P(variable = 1 | evidence) for every variable, in ``tree.variables`` order."""
        if self._marginals is None:
            plan = self.tree._marginal_plan
            n = len(self.tree.variables)
            m = np.bincount(plan.sep_target, weights=self.separators[plan.sep_gather],
                            minlength=n).astype(float, copy=False)
            for k, gather, axes, pos, var in plan.groups:
                tables = self.work[gather].reshape(-1, 1 << k)
                count = len(tables)
                ones = np.empty((count, len(axes)))
                for j, axis in enumerate(axes):
                    # Entries with this axis at 1: a strided view, summed without a copy.
                    ones[:, j] = tables.reshape(count, 1 << axis, 2, -1)[:, :, 1, :].sum(axis=(1, 2))
                m[var] = ones.ravel()[pos]
            self._marginals = np.clip(m, 0.0, 1.0, out=m)
        return self._marginals

    def clique_table(self, c: int) -> np.ndarray:
        t = self.tree
        return self.work[t.offsets[c] : t.offsets[c + 1]].reshape(t.shapes[c])

    def joint(self, variables: tuple[str, ...]) -> np.ndarray:
        """Posterior joint of variables that share a clique, axes in the given order."""
        if not variables:
            return np.ones(())
        c, drop, perm = self.tree.joint_plan(tuple(variables))
        table = self.clique_table(c)
        summed = table.sum(axis=drop) if drop else table
        return np.transpose(summed, perm) if perm is not None else summed

    def joints(self, plan, count: int) -> np.ndarray:
        """Joints of ``count`` variable sets of one size from :meth:`JoinTree.joints_plan`, shape (count, states)."""
        gather_c, target_c, gather_s, target_s, states = plan
        if gather_c is None:  # single variables: [P(v = 0), P(v = 1)] from the marginals
            p = self.marginals()[target_c]
            return np.stack([1.0 - p, p], axis=1)
        out = np.bincount(target_c, weights=self.work[gather_c], minlength=count * states).astype(float, copy=False)
        if len(gather_s):
            out += np.bincount(target_s, weights=self.separators[gather_s], minlength=count * states)
        return out.reshape(count, states)
