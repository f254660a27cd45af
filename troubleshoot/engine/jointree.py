"""Join tree of a binary Bayesian network: compiled once, propagated per set of findings.

Compilation: moral graph (plus each check's cause set, so that one clique
holds every check's causes together), greedy min-fill elimination, the
elimination tree with non-maximal cliques removed, small neighbouring cliques
merged (fewer, larger tables cost less interpreter time than many tiny ones),
and each table's product folded into its clique's base potential. All clique
tables live in one flat buffer, grouped by size, so a propagation starts with
one copy and ends with one matrix product per clique size for every node's
marginal.

Propagation: Hugin-style collect and distribute over the tree with every
clique renormalised as it sends, so log P(findings) is a sum of logs and
never underflows.

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

import heapq
import math
from dataclasses import dataclass

import numpy as np

from troubleshoot.errors import NetworkTooLarge
from troubleshoot.model import DERIVED
from troubleshoot.engine.network import Network

#: Default ceiling on the memory the tables may take, in bytes.
DEFAULT_MEMORY_BUDGET = 2 * 1024**3
#: Bytes per table entry across the base buffer, a working copy and messages.
_BYTES_PER_ENTRY = 8 * 3
#: Cliques are merged while the merged table stays at most this many entries.
MERGE_ENTRIES = 256


def plan_bytes(clique_sizes) -> int:
    """Bytes of the index plans a join tree builds beside its tables.

    The marginal plan keeps, per distinct clique size s, a 2^s x s matrix of
    floats (the state bits); merging may grow a clique up to
    MERGE_ENTRIES entries, so small sizes are charged at that size.
    """
    sizes = {max(int(s), int(math.log2(MERGE_ENTRIES))) for s in clique_sizes}
    return sum((2**s) * s * 8 for s in sizes)


class ZeroProbability(Exception):
    """Internal: the findings have probability zero under the network."""


@dataclass(frozen=True)
class Evidence:
    """A likelihood over some variables of one clique, ready to multiply in."""

    clique: int
    factor: np.ndarray  # already shaped to broadcast against the clique table


class _OverBudget(Exception):
    """Internal: the elimination cliques made so far already pass the table budget."""

    def __init__(self, clique: frozenset, entries: int, width_bound: int | None = None):
        super().__init__()
        self.clique, self.entries, self.width_bound = clique, entries, width_bound


def _bits(x: int):
    """The set bits of x, lowest first."""
    while x:
        low = x & -x
        yield low.bit_length() - 1
        x ^= low


def _minor_min_width(nb: dict[int, int]) -> tuple[int, frozenset]:
    """A lower bound on the treewidth of a graph (bit-set neighbourhoods): minor-min-width.

    Repeatedly contract a vertex of least degree into its neighbour of least
    degree; the largest least degree met bounds the treewidth from below.
    Returns the bound and the vertex that met it with its neighbours then.

    References
    ----------
    V. Gogate and R. Dechter, "A complete anytime algorithm for treewidth",
    UAI 2004; H. L. Bodlaender and A. M. C. A. Koster, "Treewidth lower
    bounds", Computer Science Review 2(1), 2008 (MMW).
    """
    adj = dict(nb)
    heap = [(m.bit_count(), v) for v, m in adj.items()]
    heapq.heapify(heap)
    bound, where = 0, frozenset[int]()
    while len(adj) > 1 and heap:
        d, v = heapq.heappop(heap)
        if v not in adj or adj[v].bit_count() != d:
            continue
        m = adj.pop(v)
        if d > bound:
            bound, where = d, frozenset([v, *_bits(m)])
        if not m:
            continue
        u = min(_bits(m), key=lambda x: (adj[x].bit_count(), x))
        merged = (adj[u] | m) & ~(1 << u) & ~(1 << v)
        gone = ~(1 << v)
        for w in _bits(m):
            adj[w] &= gone
            if w != u:
                adj[w] |= 1 << u
        adj[u] = merged
        for w in _bits(merged | (1 << u)):
            heapq.heappush(heap, (adj[w].bit_count(), w))
    return bound, where


def _min_fill_order(adjacency: dict[int, set[int]], max_entries: float = math.inf) -> list[int]:
    """Greedy elimination order: least fill-in first, ties by fewest neighbours, then index.

    Neighbourhoods are bit sets (Python ints), so counting a vertex's fill-in
    is one AND and one popcount per neighbour. Stops (raises _OverBudget) as
    soon as the elimination cliques made so far hold more than
    ``max_entries`` table entries: a tree too large is refused without
    finishing the order.
    """
    nb = {v: sum(1 << u for u in n) for v, n in adjacency.items()}
    entries = 0
    largest: frozenset = frozenset()

    def fill(v: int) -> int:
        m = nb[v]
        missing = 0
        for a in _bits(m):
            missing += (m & ~nb[a]).bit_count() - 1  # a itself is in m, not in nb[a]
        return missing // 2

    if max_entries < math.inf:
        bound, where = _minor_min_width(nb)
        if 2 ** (bound + 1) > max_entries:
            raise _OverBudget(where, 2 ** (bound + 1), bound)
    fills = {v: fill(v) for v in nb}
    heap = [(fills[v], nb[v].bit_count(), v) for v in nb]
    heapq.heapify(heap)
    score = {v: (f, d) for f, d, v in heap}
    order: list[int] = []
    done: set[int] = set()
    while heap:
        f, d, v = heapq.heappop(heap)
        if v in done or score[v] != (f, d):
            continue
        order.append(v)
        done.add(v)
        nbrs = nb.pop(v)
        size = nbrs.bit_count() + 1
        entries += 2**size
        if size > len(largest):
            largest = frozenset([v, *_bits(nbrs)])
        if entries > max_entries:
            raise _OverBudget(largest, entries)
        gone = ~(1 << v)
        # The fill-in edges this elimination adds: each lowers by one the
        # fill of every vertex outside v's neighbourhood adjacent to both
        # ends (its neighbourhood is otherwise unchanged); v's neighbours get
        # new neighbourhoods and are scored afresh.
        changed = set()
        for a in _bits(nbrs):
            missing = nbrs & ~nb[a] & ~((2 << a) - 1)  # pairs (a, b > a) not yet adjacent
            for b in _bits(missing):
                for w in _bits(nb[a] & nb[b] & ~nbrs & gone):
                    fills[w] -= 1
                    changed.add(w)
        for a in _bits(nbrs):
            nb[a] = (nb[a] | nbrs) & gone & ~(1 << a)
        for a in _bits(nbrs):
            fills[a] = fill(a)
            changed.add(a)
        for a in changed:
            s_ = (fills[a], nb[a].bit_count())
            if s_ != score[a]:
                score[a] = s_
                heapq.heappush(heap, (s_[0], s_[1], a))
    return order


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

    Attributes
    ----------
    variables : list of str
        Node ids carried, in index order.
    cliques : list of tuple of int
        Variable indices of each clique, ascending.
    width : int
        Largest clique size minus one.
    table_entries : int
        Total entries of all clique tables.
    """

    def __init__(self, network: Network, memory_budget: int = DEFAULT_MEMORY_BUDGET,
                 merge_entries: int = MERGE_ENTRIES, families=None, variables=None):
        self.network = network
        graph = network.graph
        # Barren parts may be left out: ``variables`` (closed under parents)
        # and the check ``families`` whose cause sets must share a clique.
        self.variables = network.inference_nodes() if variables is None else list(variables)
        families = network.families if families is None else families
        self.index = {v: i for i, v in enumerate(self.variables)}
        n = len(self.variables)

        # Moral graph plus the cause sets that must share a clique.
        groups: list[tuple[int, ...]] = []
        for v in self.variables:
            groups.append(tuple(self.index[x] for x in (v, *graph.nodes[v]["parents"])))
        family_groups = {key: tuple(self.index[x] for x in fam.nodes) for key, fam in families.items()}
        groups.extend(g for g in family_groups.values() if g)
        adjacency: dict[int, set[int]] = {i: set() for i in range(n)}
        for grp in groups:
            for a in grp:
                adjacency[a].update(grp)
        for a in adjacency:
            adjacency[a].discard(a)
        try:
            order = _min_fill_order(adjacency, memory_budget / _BYTES_PER_ENTRY)
        except _OverBudget as over:
            raise self._too_large(over.clique, over.entries, memory_budget, early=True,
                                  width=over.width_bound) from None
        position = np.empty(n, dtype=np.int64)
        position[order] = np.arange(n)
        self._position = position

        # Elimination cliques and the elimination tree.
        adj = {v: set(s) for v, s in adjacency.items()}
        clique_of: dict[int, frozenset] = {}
        parent: dict[int, int | None] = {}
        for v in order:
            nbrs = adj.pop(v)
            for a in nbrs:
                adj[a].discard(v)
                adj[a].update(nbrs - {a})
            clique_of[v] = frozenset(nbrs | {v})
            parent[v] = min(nbrs, key=lambda x: position[x]) if nbrs else None
        self._check_budget(clique_of.values(), memory_budget)

        children: dict[int, list[int]] = {v: [] for v in order}
        for v in order:
            if parent[v] is not None:
                children[parent[v]].append(v)
        alive = set(order)
        self._merged_into: dict[int, int] = {}
        members = {v: set(clique_of[v]) for v in order}
        # Remove non-maximal cliques: one is always a child's separator.
        for v in order:
            for w in children[v]:
                if members[v] <= members[w]:
                    self._absorb(v, w, parent, children, alive, keep_child=True)
                    break
        # Merge small cliques into their parents (children first).
        for v in order:
            if v not in alive:
                continue
            p = parent[v]
            if p is None:
                continue
            union = members[p] | members[v]
            if 2 ** len(union) <= merge_entries:
                members[p] = union
                self._absorb(v, p, parent, children, alive, keep_child=False)

        # Cliques in a fixed order: by size, then by elimination position.
        kept = sorted(alive, key=lambda v: (len(members[v]), position[v]))
        slot = {v: i for i, v in enumerate(kept)}
        self.cliques = [tuple(sorted(members[v])) for v in kept]
        self.parent = [slot[parent[v]] if parent[v] is not None else -1 for v in kept]
        sizes = [len(c) for c in self.cliques]
        self.width = max(sizes) - 1 if sizes else 0
        self.table_entries = int(sum(2**s for s in sizes))

        # Where each variable's elimination clique went: any factor over a set
        # that was a clique in the graph lives in the representative of its
        # earliest-eliminated member.
        def rep(v: int) -> int:
            while v not in alive:
                v = self._merged_into[v]
            return slot[v]

        self.var_host = np.array([rep(v) for v in range(n)], dtype=np.int64)

        # Traversal orders: post-order for collect; the reverse for distribute.
        kids: list[list[int]] = [[] for _ in self.cliques]
        roots = []
        for c, p in enumerate(self.parent):
            (kids[p].append(c) if p >= 0 else roots.append(c))
        pre: list[int] = []
        stack = list(reversed(roots))
        while stack:
            c = stack.pop()
            pre.append(c)
            stack.extend(reversed(kids[c]))
        self.preorder = pre
        self.roots = roots

        # Flat layout: cliques already sorted by size.
        self.offsets = np.zeros(len(self.cliques) + 1, dtype=np.int64)
        self.offsets[1:] = np.cumsum([2**s for s in sizes])
        self.shapes = [(2,) * s for s in sizes]

        # Per tree edge: the axes to sum out on each side, and broadcast shapes.
        self._edges = []
        for c in pre:
            p = self.parent[c]
            if p < 0:
                continue
            sep = set(self.cliques[c]) & set(self.cliques[p])
            c_sum = tuple(i for i, x in enumerate(self.cliques[c]) if x not in sep)
            p_sum = tuple(i for i, x in enumerate(self.cliques[p]) if x not in sep)
            c_shape = tuple(2 if x in sep else 1 for x in self.cliques[c])
            p_shape = tuple(2 if x in sep else 1 for x in self.cliques[p])
            self._edges.append((c, p, c_sum, p_sum, c_shape, p_shape))

        self.base = self._base_potentials()
        self._joint_plans: dict = {}
        self._marginal_plan()

    # -- compilation -----------------------------------------------------
    def _absorb(self, v, into, parent, children, alive, keep_child):
        """Remove clique v from the tree, its place and children going to ``into``."""
        alive.discard(v)
        self._merged_into[v] = into
        if keep_child:  # into is a child of v: it takes v's place
            parent[into] = parent[v]
            if parent[v] is not None:
                siblings = children[parent[v]]
                siblings[siblings.index(v)] = into
        else:  # into is v's parent
            children[into].remove(v)
        for x in children[v]:
            if x != into and x in alive:
                parent[x] = into
                children[into].append(x)
        children[v] = []

    def _check_budget(self, cliques, memory_budget):
        cliques = list(cliques)
        entries = sum(2 ** len(c) for c in cliques)
        need = entries * _BYTES_PER_ENTRY + plan_bytes(len(c) for c in cliques)
        if need <= memory_budget:
            return
        raise self._too_large(max(cliques, key=len), entries, memory_budget, early=False,
                              need=need)

    def _too_large(self, largest, entries: int, memory_budget: int, early: bool, need: int | None = None,
                   width: int | None = None):
        names = sorted({self.variables[i].split(DERIVED)[0] for i in largest})
        shown = ", ".join(names[:12]) + (" ..." if len(names) > 12 else "")
        need = entries * _BYTES_PER_ENTRY if need is None else need
        more = " or more" if early else ""
        width = max(len(largest) - 1, width or 0)
        return NetworkTooLarge(
            f"the join tree would need {need / 1024**2:,.0f} MiB{more} (budget {memory_budget / 1024**2:,.0f} MiB): "
            f"width {width}{more}, {entries:,} table entries{more}; the largest clique so far joins {shown}. "
            "Split checks with many causes, or remove repeated events shared across these gates"
        )

    def _base_potentials(self) -> np.ndarray:
        base = np.ones(int(self.offsets[-1]))
        graph = self.network.graph
        for v in self.variables:
            parents = graph.nodes[v]["parents"]
            axes = [self.index[x] for x in (*parents, v)]  # the table's axis order
            c = self._host_of_group(axes)
            local = {x: i for i, x in enumerate(self.cliques[c])}
            local_axes = [local[a] for a in axes]
            table = np.transpose(graph.nodes[v]["table"], np.argsort(local_axes))
            shape = [1] * len(self.cliques[c])
            for a in local_axes:
                shape[a] = 2
            base[self.offsets[c] : self.offsets[c + 1]].reshape(self.shapes[c])[...] *= table.reshape(shape)
        return base

    def _host_of_group(self, idx) -> int:
        """A clique holding every variable of idx, a set made adjacent in the graph.

        It is where the elimination clique of the earliest-eliminated member went.
        """
        first = min(idx, key=lambda i: self._position[i])
        c = int(self.var_host[first])
        if len(idx) > 1 and not set(idx) <= set(self.cliques[c]):
            raise AssertionError("no clique holds a family; the triangulation is broken")
        return c

    def _marginal_plan(self):
        """Index arrays turning one matrix product per clique size into every marginal."""
        sizes = np.diff(self.offsets)
        self._blocks = []
        pos = np.empty(len(self.variables), dtype=np.int64)
        flat_start = 0
        for size in sorted(set(int(s) for s in sizes)):
            k = int(round(math.log2(size)))
            ids = [c for c in range(len(self.cliques)) if int(sizes[c]) == size]
            lo, hi = int(self.offsets[ids[0]]), int(self.offsets[ids[-1] + 1])
            bits = ((np.arange(size)[:, None] >> np.arange(k - 1, -1, -1)) & 1).astype(float) if k else np.zeros((1, 0))
            self._blocks.append((lo, hi, len(ids), size, bits))
            for row, c in enumerate(ids):
                for axis, var in enumerate(self.cliques[c]):
                    if self.var_host[var] == c:
                        pos[var] = flat_start + row * k + axis
            flat_start += len(ids) * k
        self._marginal_pos = pos

    # -- evidence --------------------------------------------------------
    def evidence_on_variables(self, variables: tuple[str, ...], likelihood: np.ndarray) -> Evidence:
        """A likelihood over some variables (axes in the given order), placed in a clique holding them all."""
        idx = [self.index[v] for v in variables]
        c = self._host_of_group(idx)
        local = {x: i for i, x in enumerate(self.cliques[c])}
        order = sorted(range(len(idx)), key=lambda i: local[idx[i]])
        factor = np.transpose(likelihood, order) if len(idx) > 1 else likelihood
        shape = [1] * len(self.cliques[c])
        for i in idx:
            shape[local[i]] = 2
        return Evidence(c, np.ascontiguousarray(factor).reshape(shape))

    def joint_plan(self, variables: tuple[str, ...]):
        """(clique, axes to sum out, transpose or None) for a joint of variables; cached."""
        plan = self._joint_plans.get(variables)
        if plan is None:
            idx = [self.index[v] for v in variables]
            c = self._host_of_group(idx)
            members = self.cliques[c]
            wanted = set(idx)
            drop = tuple(i for i, x in enumerate(members) if x not in wanted)
            kept = [x for x in members if x in wanted]  # ascending
            perm = [kept.index(i) for i in idx]
            plan = (c, drop, perm if perm != sorted(perm) else None)
            self._joint_plans[variables] = plan
        return plan

    # -- propagation -----------------------------------------------------
    def propagate(self, evidence: list[Evidence]) -> Calibrated:
        """Collect and distribute with the given likelihoods; raises ZeroProbability.

        Returns the calibrated clique tables and log P(evidence).
        """
        work = self.base.copy()
        offsets, shapes = self.offsets, self.shapes
        pots = [work[offsets[c] : offsets[c + 1]].reshape(shapes[c]) for c in range(len(shapes))]
        for ev in evidence:
            pots[ev.clique] *= ev.factor
        log_p = 0.0
        messages = {}
        for c, p, c_sum, _p_sum, _c_shape, p_shape in reversed(self._edges):
            pot = pots[c]
            z = pot.sum()
            if not z > 0.0:
                raise ZeroProbability
            pot /= z
            log_p += math.log(z)
            msg = pot.sum(axis=c_sum) if c_sum else pot.copy()
            messages[c] = msg
            pots[p] *= msg.reshape(p_shape)
        for r in self.roots:
            z = pots[r].sum()
            if not z > 0.0:
                raise ZeroProbability
            pots[r] /= z
            log_p += math.log(z)
        for c, p, _c_sum, p_sum, c_shape, _p_shape in self._edges:
            new = pots[p].sum(axis=p_sum) if p_sum else pots[p].copy()
            old = messages[c]
            ratio = np.divide(new, old, out=np.zeros_like(new), where=old > 0)
            pots[c] *= ratio.reshape(c_shape)
        return Calibrated(self, work, log_p)

    def max_propagate(self, evidence: list[Evidence]) -> tuple[dict[int, int], float]:
        """The most probable joint state of every variable with the evidence: max-product collect, then decode.

        Returns (variable index -> state, log max P(state, evidence)). One
        collect pass with max in place of sum, each clique renormalised as it
        sends; the decoding walks the tree from the roots, each clique taking
        its best state given what its parent chose. Memory: one copy of the
        tables, whatever the depth of the tree. Raises ZeroProbability.

        References
        ----------
        A. P. Dawid, "Applications of a general propagation algorithm for
        probabilistic expert systems", Statistics and Computing 2, 1992
        (max-propagation in a join tree).
        """
        work = self.base.copy()
        offsets, shapes = self.offsets, self.shapes
        pots = [work[offsets[c] : offsets[c + 1]].reshape(shapes[c]) for c in range(len(shapes))]
        for ev in evidence:
            pots[ev.clique] *= ev.factor
        log_m = 0.0
        for c, p, c_sum, _p_sum, _c_shape, p_shape in reversed(self._edges):
            pot = pots[c]
            z = pot.max()
            if not z > 0.0:
                raise ZeroProbability
            pot /= z
            log_m += math.log(z)
            msg = pot.max(axis=c_sum) if c_sum else pot.copy()
            pots[p] *= msg.reshape(p_shape)
        for r in self.roots:
            z = pots[r].max()
            if not z > 0.0:
                raise ZeroProbability
            pots[r] /= z
            log_m += math.log(z)
        state: dict[int, int] = {}
        for c in self.preorder:  # parents before children
            members = self.cliques[c]
            index = tuple(state[v] if v in state else slice(None) for v in members)
            sub = pots[c][index]
            free = [v for v in members if v not in state]
            best = np.unravel_index(int(np.argmax(sub)), sub.shape) if free else ()
            for v, s in zip(free, best):
                state[v] = int(s)
        return state, log_m


class Calibrated:
    """Clique tables after propagation: every one is the posterior of its clique."""

    def __init__(self, tree: JoinTree, work: np.ndarray, log_p: float):
        self.tree = tree
        self.work = work
        self.log_p = log_p
        self._marginals = None

    def marginals(self) -> np.ndarray:
        """P(variable = 1 | evidence) for every variable, in ``tree.variables`` order."""
        if self._marginals is None:
            parts = [
                (self.work[lo:hi].reshape(count, size) @ bits).ravel()
                for lo, hi, count, size, bits in self.tree._blocks
            ]
            flat = np.concatenate(parts) if parts else np.zeros(0)
            self._marginals = np.clip(flat[self.tree._marginal_pos], 0.0, 1.0)
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
