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


class ZeroProbability(Exception):
    """Internal: the findings have probability zero under the network."""


@dataclass(frozen=True)
class Evidence:
    """A likelihood over some variables of one clique, ready to multiply in."""

    clique: int
    factor: np.ndarray  # already shaped to broadcast against the clique table


def _min_fill_order(adjacency: dict[int, set[int]]) -> list[int]:
    """Greedy elimination order: least fill-in first, ties by fewest neighbours, then index."""
    adj = {v: set(n) for v, n in adjacency.items()}

    def fill(v: int) -> int:
        nbrs = list(adj[v])
        missing = 0
        for i, a in enumerate(nbrs):
            na = adj[a]
            for b in nbrs[i + 1 :]:
                if b not in na:
                    missing += 1
        return missing

    heap = [(fill(v), len(adj[v]), v) for v in adj]
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
        nbrs = adj.pop(v)
        for a in nbrs:
            adj[a].discard(v)
        nb = list(nbrs)
        for i, a in enumerate(nb):
            for b in nb[i + 1 :]:
                if b not in adj[a]:
                    adj[a].add(b)
                    adj[b].add(a)
        touched = set(nb)
        for a in nb:
            touched.update(adj[a])
        for a in touched:
            s = (fill(a), len(adj[a]))
            if s != score[a]:
                score[a] = s
                heapq.heappush(heap, (s[0], s[1], a))
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
        order = _min_fill_order(adjacency)
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
        need = entries * _BYTES_PER_ENTRY
        if need <= memory_budget:
            return
        largest = max(cliques, key=len)
        names = sorted({self.variables[i].split(DERIVED)[0] for i in largest})
        shown = ", ".join(names[:12]) + (" ..." if len(names) > 12 else "")
        raise NetworkTooLarge(
            f"the join tree would need {need / 1024**2:,.0f} MiB (budget {memory_budget / 1024**2:,.0f} MiB): "
            f"width {len(largest) - 1}, {entries:,} table entries; the largest clique joins {shown}. "
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
