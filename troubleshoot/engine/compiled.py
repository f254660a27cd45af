"""Exact diagnosis on a compiled decision diagram, for trees whose join tree is too wide.

The gate logic is compiled once into a reduced ordered decision diagram over
the root events (Bryant 1986), built with one if-then-else operation (Brace,
Rudell & Bryant 1990). A set of findings becomes one more diagram, the
*evidence diagram*: an algebraic decision diagram (real-valued leaves,
Bahar et al. 1993) equal, for every joint state F of the roots, to
P(findings | F).

Why this is exact. A check's noise is a set of independent auxiliary causes
(Pearl 1988 for noisy-OR, Díez 1993 for noisy-MAX): one "shows" cause per
(cause, outcome) with the detection probability and one leak. A finding is a
constraint over the auxiliary causes and the cause states: "normal" holds
when no present cause shows and the leak is off, "abnormal" otherwise. Given
the cause states c the auxiliary causes of one finding are independent of
everything else, so summing them out in closed form gives P(outcome | c) at
each leaf of the diagram of c: the constraint enters the compiled logic with
its auxiliary causes already summed. That sum is taken from the model's
likelihood table (:class:`~troubleshoot.engine.network.CheckFamily`), so a
check with more outcomes only changes the table. An exact observation of a
gate or event is the gate's own diagram (or its complement).

One upward pass over the evidence diagram gives P(findings) (weighted model
counting); one downward pass gives every root's posterior; a max pass gives
the most probable joint state of the roots exactly (the auxiliary causes are
already summed, so it is the MAP state of the roots, not of the noise). A
check's cause states are conditioned on by one walk of the pair (evidence
diagram, cause diagrams) restricted to the causes' levels: above them the
downward pass, below them the upward pass already hold the answer.

Repairs are interventions, as in the join-tree path: a finding made after the
j-th repair reads the gate logic restricted to the first j repaired roots
held working; the roots themselves are shared by every epoch.

Roots and gates have two states; a check's likelihood is read from
:meth:`CheckFamily.p_outcome`, the table P(outcome | c) over the 2^m cause
states for any of its K outcomes (:mod:`troubleshoot.engine.observation`).

References
----------
R. E. Bryant, "Graph-based algorithms for Boolean function manipulation",
IEEE Trans. Computers C-35(8), 1986.
K. S. Brace, R. L. Rudell and R. E. Bryant, "Efficient implementation of a
BDD package", DAC 1990 (the if-then-else operation).
R. I. Bahar et al., "Algebraic decision diagrams and their applications",
ICCAD 1993.
J. Pearl, *Probabilistic Reasoning in Intelligent Systems*, 1988 (noisy-OR
as independent inhibitors).
F. J. Díez, "Parameter adjustment in Bayes networks. The generalized noisy
OR-gate", UAI 1993.
A. Darwiche, "A differential approach to inference in Bayesian networks",
JACM 50(3), 2003 (marginals from one upward and one downward pass).
A. Rauzy, Reliability Engineering and System Safety 40(3), 1993
(depth-first variable order for fault trees).
"""

from __future__ import annotations

import math
import operator
import sys
from contextlib import contextmanager

import numpy as np

from troubleshoot.errors import NetworkTooLarge
from troubleshoot.engine.observation import CheckFamily, check_family
from troubleshoot.model import Model
from troubleshoot.model.gates import AND, ATLEAST, NOT, OR, bottom_up, connective, depth_first_roots

#: The name this path reports (``suggest --json`` key ``engine``).
ENGINE_NAME = "decision diagram"
#: Bytes one diagram node costs in this store: three list slots, the unique
#: table's key tuple and entry, and a share of the operation caches (measured
#: with tracemalloc on the generated hard trees: about 230 bytes).
BYTES_PER_NODE = 256
#: Operation-cache entries kept before a cache is dropped (recomputed on demand).
CACHE_ENTRIES = 1_000_000
#: A check with more distinct causes than this has its family grouped by
#: likelihood (m + 1 entries for equal detections) instead of 2^m cause states.
MAX_CAUSE_STATES_BITS = 12


class ZeroEvidence(Exception):
    """Internal: the findings have probability zero."""


@contextmanager
def _deep(depth: int):
    # Apply recursion goes one frame per level; Python's default is 1,000.
    previous = sys.getrecursionlimit()
    if depth > previous:
        sys.setrecursionlimit(depth)
    try:
        yield
    finally:
        sys.setrecursionlimit(previous)


def root_order(model: Model) -> tuple[str, ...]:
    """Every root event, depth-first from the top (Rauzy 1993), then any root the top does not read."""
    order = depth_first_roots(model)
    under_top = set(order)
    return order + tuple(r for r in model.hypotheses if r not in under_top)


class DiagramStore:
    """Hash-consed decision-diagram nodes with real-valued leaves.

    Node 0 is the leaf 0.0 (also "false"), node 1 the leaf 1.0 ("true"). An
    inner node ``i`` tests the root at level ``var[i]``: ``high[i]`` when it
    has failed, ``low[i]`` when it works. Leaves have level ``n_levels``.

    Parameters
    ----------
    n_levels : int
        Number of root events.
    node_limit : int
        Nodes the store may hold; one more raises NetworkTooLarge before it is made.
    """

    def __init__(self, n_levels: int, node_limit: int):
        self.n_levels = n_levels
        self.node_limit = node_limit
        self.var: list[int] = [n_levels, n_levels]
        self.low: list[int] = [-1, -1]
        self.high: list[int] = [-1, -1]
        self.value: list[float] = [0.0, 1.0]
        self._unique: dict[tuple[int, int, int], int] = {}
        self._leaves: dict[float, int] = {0.0: 0, 1.0: 1}
        self._ite: dict[tuple[int, int, int], int] = {}
        self._mul: dict[tuple[int, int], int] = {}

    def __len__(self) -> int:
        return len(self.var)

    def _grow(self) -> int:
        new = len(self.var)
        if new >= self.node_limit:
            raise NetworkTooLarge(
                f"the decision diagram of the diagnosis passed {self.node_limit:,} nodes "
                f"({self.node_limit * BYTES_PER_NODE / 1024**2:,.0f} MiB): too large for the memory budget; "
                "raise the budget, or remove repeated events shared across distant gates")
        return new

    def leaf(self, value: float) -> int:
        found = self._leaves.get(value)
        if found is not None:
            return found
        new = self._grow()
        self.var.append(self.n_levels)
        self.low.append(-1)
        self.high.append(-1)
        self.value.append(float(value))
        self._leaves[value] = new
        return new

    def node(self, level: int, low: int, high: int) -> int:
        if low == high:
            return low
        key = (level, low, high)
        found = self._unique.get(key)
        if found is not None:
            return found
        new = self._grow()
        self.var.append(level)
        self.low.append(low)
        self.high.append(high)
        self.value.append(math.nan)
        self._unique[key] = new
        return new

    def variable(self, level: int) -> int:
        return self.node(level, 0, 1)

    def _cofactors(self, f: int, level: int) -> tuple[int, int]:
        if self.var[f] == level:
            return self.low[f], self.high[f]
        return f, f

    def ite(self, f: int, g: int, h: int) -> int:
        """If ``f`` (a 0/1 diagram) then ``g`` else ``h``; ``g``, ``h`` may have any leaves."""
        if f == 1:
            return g
        if f == 0:
            return h
        if g == h:
            return g
        if g == 1 and h == 0:
            return f
        key = (f, g, h)
        found = self._ite.get(key)
        if found is not None:
            return found
        var = self.var
        level = min(var[f], var[g], var[h])
        f0, f1 = self._cofactors(f, level)
        g0, g1 = self._cofactors(g, level)
        h0, h1 = self._cofactors(h, level)
        result = self.node(level, self.ite(f0, g0, h0), self.ite(f1, g1, h1))
        if len(self._ite) >= CACHE_ENTRIES:
            self._ite.clear()
        self._ite[key] = result
        return result

    def and_(self, f: int, g: int) -> int:
        return self.ite(f, g, 0)

    def or_(self, f: int, g: int) -> int:
        return self.ite(f, 1, g)

    def not_(self, f: int) -> int:
        return self.ite(f, 0, 1)

    def times(self, a: int, b: int) -> int:
        """Pointwise product of two diagrams."""
        if a == 0 or b == 0:
            return 0
        if a == 1:
            return b
        if b == 1:
            return a
        if a > b:
            a, b = b, a
        key = (a, b)
        found = self._mul.get(key)
        if found is not None:
            return found
        var, n = self.var, self.n_levels
        va, vb = var[a], var[b]
        if va == n and vb == n:
            result = self.leaf(self.value[a] * self.value[b])
        else:
            level = min(va, vb)
            a0, a1 = self._cofactors(a, level)
            b0, b1 = self._cofactors(b, level)
            result = self.node(level, self.times(a0, b0), self.times(a1, b1))
        if len(self._mul) >= CACHE_ENTRIES:
            self._mul.clear()
        self._mul[key] = result
        return result

    def difference(self, a: int, b: int) -> int:
        """Pointwise max(a - b, 0) of two diagrams (a difference of cumulative probabilities)."""
        if b == 0:
            return a
        if a == b:
            return 0
        key = (a, -1 - b)  # its own keys in the product cache's table
        found = self._mul.get(key)
        if found is not None:
            return found
        var, n = self.var, self.n_levels
        va, vb = var[a], var[b]
        if va == n and vb == n:
            result = self.leaf(max(self.value[a] - self.value[b], 0.0))
        else:
            level = min(va, vb)
            a0, a1 = self._cofactors(a, level)
            b0, b1 = self._cofactors(b, level)
            result = self.node(level, self.difference(a0, b0), self.difference(a1, b1))
        if len(self._mul) >= CACHE_ENTRIES:
            self._mul.clear()
        self._mul[key] = result
        return result

    def restrict(self, f: int, working: frozenset, memo: dict) -> int:
        """``f`` with the roots at levels ``working`` held working (a repair)."""
        if self.var[f] == self.n_levels:
            return f
        found = memo.get(f)
        if found is not None:
            return found
        level = self.var[f]
        if level in working:
            result = self.restrict(self.low[f], working, memo)
        else:
            result = self.node(level, self.restrict(self.low[f], working, memo),
                               self.restrict(self.high[f], working, memo))
        memo[f] = result
        return result


class CompiledModel:
    """A model's gate logic as decision diagrams, compiled once.

    Parameters
    ----------
    model : Model
    memory_budget : int
        Bytes the diagrams may take; the node store refuses the node that
        would pass it, before making it.

    Raises
    ------
    NetworkTooLarge
        The gate logic alone does not fit in the budget.
    """

    def __init__(self, model: Model, memory_budget: int):
        self.model = model
        self.memory_budget = memory_budget
        self.order = root_order(model)
        self.level = {r: i for i, r in enumerate(self.order)}
        self.priors = np.array([model.prior_of(r) for r in self.order], dtype=float)
        # The store holds nodes; the passes' arrays (about ten floats per
        # reachable node) are charged in BYTES_PER_NODE as well.
        self.store = DiagramStore(len(self.order), max(16, memory_budget // BYTES_PER_NODE))
        self._gates: dict[str, int] = {}
        self._restrict_memo: dict[frozenset, dict] = {}
        self._evidence: dict = {}
        self._prior: dict[int, tuple[float, int]] = {}
        self._arrays: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None = None
        self._families: dict = {}
        self._conjunctions: dict[tuple[int, ...], list[int]] = {}
        with _deep(4 * len(self.order) + 2000):
            for gate in model.gates:
                self.function(gate.id)
        # log max(p, 1 - p) by level, summed from the top: a max over free roots.
        self._free_log = np.concatenate(([0.0], np.cumsum(np.log(np.maximum(self.priors, 1.0 - self.priors)))))

    @property
    def nodes(self) -> int:
        return len(self.store)

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(level, low, high, prior probability, deepest level) of every node in the store, as arrays.

        Nodes are made children first, so one pass in id order fills the
        prior probability and the deepest level tested; the arrays grow with
        the store and are never recomputed for old nodes.
        """
        s = self.store
        done = 0 if self._arrays is None else len(self._arrays[0])
        n = len(s)
        if done < n:
            var = np.array(s.var[done:], dtype=np.int64)
            low = np.array(s.low[done:], dtype=np.int64)
            high = np.array(s.high[done:], dtype=np.int64)
            if self._arrays is None:
                old = (np.zeros(0, np.int64),) * 3 + (np.zeros(0), np.zeros(0, np.int64))
            else:
                old = self._arrays
            var, low, high = (np.concatenate((old[0], var)), np.concatenate((old[1], low)),
                              np.concatenate((old[2], high)))
            prior = np.concatenate((old[3], np.zeros(n - done)))
            deepest = np.concatenate((old[4], np.full(n - done, -1, dtype=np.int64)))
            values, levels, lows, highs, p = s.value, s.var, s.low, s.high, self.priors
            n_levels = s.n_levels
            pr = prior.tolist()
            dp = deepest.tolist()
            for i in range(done, n):
                lv = levels[i]
                if lv == n_levels:
                    pr[i] = values[i]
                    continue
                lo, hi = lows[i], highs[i]
                pr[i] = (1.0 - p[lv]) * pr[lo] + p[lv] * pr[hi]
                dp[i] = max(lv, dp[lo], dp[hi])
            self._arrays = (var, low, high, np.array(pr), np.array(dp, dtype=np.int64))
        assert self._arrays is not None  # built above when nodes were added
        return self._arrays

    def prior(self, f: int) -> tuple[float, int]:
        """(P(f) under the priors alone, the deepest level f tests; -1 for a leaf), cached per node."""
        found = self._prior.get(f)
        if found is not None:
            return found
        s = self.store
        stack = [f]
        while stack:  # children first, without recursion
            n = stack[-1]
            if n in self._prior:
                stack.pop()
                continue
            if s.var[n] == s.n_levels:
                self._prior[n] = (s.value[n], -1)
                stack.pop()
                continue
            lo, hi = s.low[n], s.high[n]
            if lo in self._prior and hi in self._prior:
                p = self.priors[s.var[n]]
                (a, da), (b, db) = self._prior[lo], self._prior[hi]
                self._prior[n] = ((1.0 - p) * a + p * b, max(s.var[n], da, db))
                stack.pop()
            else:
                stack.extend(x for x in (lo, hi) if x not in self._prior)
        return self._prior[f]

    # -- gate logic ------------------------------------------------------
    def function(self, node_id: str) -> int:
        """The diagram of a gate or root (failed = 1) with no repair."""
        s = self.store
        if node_id in self.level:
            return s.variable(self.level[node_id])
        found = self._gates.get(node_id)
        if found is not None:
            return found
        # Children first, without Python recursion; what a gate computes is
        # read from model/gates.py, the one statement of gate semantics.
        gates = self.model.gate_by_id
        for gid in bottom_up(self.model, [node_id], skip=self._gates.__contains__):
            conn = connective(gates[gid])
            ins = [self.function(x) for x in conn.operands]
            if conn.op == AND:
                f = 1
                for g in ins:
                    f = s.and_(f, g)
            elif conn.op == OR:
                f = 0
                for g in ins:
                    f = s.or_(f, g)
            elif conn.op == ATLEAST:
                f = self._at_least(conn.threshold(), ins)
            elif conn.op == NOT:
                f = s.not_(ins[0])
            else:  # pragma: no cover - connective() knows no other
                raise ValueError(f"unknown connective {conn.op!r}")
            self._gates[gid] = f
        return self._gates[node_id]

    def _at_least(self, k: int, ins: list[int]) -> int:
        # S_j <- S_j or (f_i and S_(j-1)): k times n operations, never 2^n.
        if k <= 0:
            return 1
        if k > len(ins):
            return 0
        s = self.store
        if k in (1, len(ins)):  # an OR or an AND: n applies, not k times n
            f = 1 if k > 1 else 0
            for g in ins:
                f = s.and_(f, g) if k > 1 else s.or_(f, g)
            return f
        at_least = [1] + [0] * k
        for i, f in enumerate(ins, start=1):
            for j in range(min(i, k), 0, -1):
                at_least[j] = s.or_(at_least[j], s.and_(f, at_least[j - 1]))
        return at_least[k]

    def function_at(self, node_id: str, repairs: tuple[str, ...], epoch: int) -> int:
        """The diagram of a gate or root as a finding made after ``epoch`` repairs reads it."""
        f = self.function(node_id)
        working = frozenset(self.level[r] for r in repairs[:epoch])
        if not working:
            return f
        memo = self._restrict_memo.setdefault(working, {})
        if len(memo) > CACHE_ENTRIES:
            memo.clear()
        with _deep(4 * len(self.order) + 2000):
            return self.store.restrict(f, working, memo)

    # -- findings --------------------------------------------------------
    def family(self, check_id: str, repairs: tuple[str, ...], epoch: int) -> tuple[tuple[int, ...], CheckFamily]:
        """The check's distinct non-constant cause diagrams at an epoch, and its likelihood table.

        Constant causes fold as in the network (:func:`check_family`):
        always present into the leak, never present dropped; two causes
        with one diagram (canonical, so also two gates of one function)
        have their cumulative tables multiplied.
        """
        key = (check_id, tuple(repairs[:epoch]), epoch)
        found = self._families.get(key)
        if found is not None:
            return found

        def node_of(target: str) -> str | bool:
            f = self.function_at(target, repairs, epoch)
            return True if f == 1 else False if f == 0 else str(f)

        fam = check_family(self.model.check_by_id[check_id], epoch, node_of)
        result = (tuple(int(n) for n in fam.nodes), fam)
        self._families[key] = result
        return result

    def conjunctions(self, causes: tuple[int, ...]) -> list[int]:
        """The diagram of "every cause of S present" for each non-empty subset S (C order bits), cached."""
        found = self._conjunctions.get(causes)
        if found is not None:
            return found
        s, m = self.store, len(causes)
        out = []
        with _deep(4 * s.n_levels + 2000):
            for subset in range(1, 1 << m):
                f = 1
                for i in range(m):
                    if subset >> (m - 1 - i) & 1:
                        f = s.and_(f, causes[i])
                out.append(f)
        self._conjunctions[causes] = out
        return out

    def likelihood(self, causes: tuple[int, ...], table: np.ndarray) -> int:
        """The diagram equal to table[c] where c is the state of the cause diagrams (C order)."""
        s = self.store
        flat = np.asarray(table, dtype=float).reshape(-1)
        m = len(causes)

        def build(i: int, index: int) -> int:
            if i == m:
                return s.leaf(float(flat[index]))
            hi = build(i + 1, 2 * index + 1)
            lo = build(i + 1, 2 * index)
            return s.ite(causes[i], hi, lo)

        return build(0, 0)

    def likelihood_by_product(self, causes: tuple[int, ...], fam: CheckFamily, outcome: int) -> int:
        """P(outcome | c) of a check with many causes, without its 2^m table.

        Noisy-MAX is multiplicative in cumulative form (Díez 1993):
        P(level <= l | c) = Q_leak(l) prod_i Q_i(l)^(c_i), one diagram
        ite(c_i, Q_i(l), 1) per cause multiplied together; the outcome's
        level is the difference of two such products.
        """
        s = self.store
        level = fam.order.index(outcome)

        def cdf(at: int) -> int:
            if at < 0:
                return 0
            if at >= fam.n_outcomes - 1:
                return 1
            f = s.leaf(math.exp(fam.leak_log_cdf[at]))
            for c, q in zip(causes, fam.log_cdfs):
                f = s.times(f, s.ite(c, s.leaf(math.exp(q[at])), 1))
            return f

        return s.difference(cdf(level), cdf(level - 1))

    def finding_diagram(self, target: str, outcome: int, epoch: int, repairs: tuple[str, ...]) -> int:
        """P(finding | root states) as a diagram."""
        s = self.store
        with _deep(4 * len(self.order) + 2000):
            if target in self.model.check_by_id:
                causes, fam = self.family(target, repairs, epoch)
                if len(causes) <= MAX_CAUSE_STATES_BITS:
                    return self.likelihood(causes, fam.p_outcome(outcome))
                return self.likelihood_by_product(causes, fam, outcome)
            f = self.function_at(target, repairs, epoch)
            return f if outcome == 1 else s.not_(f)

    def evidence(self, findings, repairs: tuple[str, ...]) -> int:
        """The evidence diagram of findings (in order) under repairs; prefixes are kept."""
        key = (tuple(findings), tuple(repairs))
        found = self._evidence.get(key)
        if found is not None:
            return found
        prev = self.evidence(key[0][:-1], repairs) if key[0] else 1
        f = key[0][-1] if key[0] else None
        if f is None:
            result = 1
        else:
            with _deep(4 * len(self.order) + 2000):
                result = self.store.times(prev, self.finding_diagram(f.target, f.outcome, f.epoch, repairs))
        if len(self._evidence) > 256:
            self._evidence.pop(next(iter(self._evidence)))
        self._evidence[key] = result
        return result


class OneMore:
    """What :meth:`Passes.one_more` gives: P(findings) and every root's posterior, by level.

    Attributes
    ----------
    p_evidence : float
    root_marginals : numpy.ndarray
    nodes : int
        Nodes and pairs the passes went over.
    """

    #: Not a pass over a diagram of all the findings: pair walks go elsewhere.
    weighted = True

    def __init__(self, p_evidence: float, root_marginals: np.ndarray, nodes: int):
        self.p_evidence = p_evidence
        self.root_marginals = root_marginals
        self.nodes = nodes


class Passes:
    """The upward, downward and max passes over one evidence diagram.

    Attributes
    ----------
    p_evidence : float
        P(findings), the weighted model count of the evidence diagram.
    root_marginals : numpy.ndarray
        P(root failed | findings) by level.
    """

    def __init__(self, cm: CompiledModel, root: int, priors: np.ndarray | None = None,
                 like: Passes | None = None):
        self.cm, self.root = cm, root
        #: P(root failed) by level that the passes weigh with: the model's
        #: priors, or (``weighted``) with some roots fixed by exact observations.
        self.p = cm.priors if priors is None else np.asarray(priors, dtype=float)
        self.weighted = priors is not None
        if like is not None and like.root == root:
            self._share(like)
        else:
            self._structure()
        self._values()

    def _structure(self) -> None:
        """The reachable nodes bottom-up and their children, which depend on the diagram only."""
        cm, root = self.cm, self.root
        s = cm.store
        n_levels = s.n_levels
        # Reachable nodes, bottom-up (by level, deepest first).
        seen = {root}
        stack = [root]
        var, low, high = s.var, s.low, s.high
        while stack:
            n = stack.pop()
            if var[n] == n_levels:
                continue
            for c in (low[n], high[n]):
                if c not in seen:
                    seen.add(c)
                    stack.append(c)
        ids = np.fromiter(seen, dtype=np.int64, count=len(seen))
        lv = np.array([var[i] for i in ids], dtype=np.int64)
        order = np.lexsort((ids, -lv))
        ids, lv = ids[order], lv[order]
        pos = {int(n): i for i, n in enumerate(ids)}
        inner = lv < n_levels
        lo = np.array([pos[low[i]] if inner_i else -1 for i, inner_i in zip(ids.tolist(), inner.tolist())], np.int64)
        hi = np.array([pos[high[i]] if inner_i else -1 for i, inner_i in zip(ids.tolist(), inner.tolist())], np.int64)
        self.ids, self.lv, self.lo, self.hi, self.pos = ids, lv, lo, hi, pos
        count = len(ids)
        leaves = ~inner
        self._leaf_values = np.array([s.value[i] for i in ids[leaves]], dtype=float)
        # Groups of one level, deepest first.
        bounds = np.flatnonzero(np.diff(lv)) + 1
        starts = np.concatenate(([0], bounds))
        ends = np.concatenate((bounds, [count]))
        self._groups = [(int(lv[a]), a, b) for a, b in zip(starts, ends) if lv[a] < n_levels]
        deepest = np.full(count, -1, dtype=np.int64)
        for level, a, b in self._groups:
            deepest[a:b] = np.maximum(level, np.maximum(deepest[hi[a:b]], deepest[lo[a:b]]))
        self.deepest = deepest
        self.deepest_list = deepest.tolist()
        self._inner = inner

    def _share(self, other: Passes) -> None:
        """The structure of another pass over the same diagram (only the weights differ)."""
        for name in ("ids", "lv", "lo", "hi", "pos", "_leaf_values", "_groups", "deepest", "deepest_list",
                     "_inner"):
            setattr(self, name, getattr(other, name))

    def _values(self) -> None:
        """The upward pass (P(findings)), the downward pass and every root's posterior, with weights ``p``."""
        n_levels = self.cm.store.n_levels
        ids, lv, lo, hi, pos, inner = self.ids, self.lv, self.lo, self.hi, self.pos, self._inner
        groups = self._groups
        count = len(ids)
        up = np.zeros(count)
        up[~inner] = self._leaf_values
        p = self.p
        for level, a, b in groups:
            up[a:b] = p[level] * up[hi[a:b]] + (1.0 - p[level]) * up[lo[a:b]]
        self.up_list = up.tolist()
        self._pairs: dict = {}
        r = pos[self.root]
        self.up = up
        self.p_evidence = float(up[r])
        if not self.p_evidence > 0.0:
            raise ZeroEvidence
        down = np.zeros(count)
        down[r] = 1.0
        for level, a, b in reversed(groups):
            d = down[a:b]
            np.add.at(down, hi[a:b], d * p[level])
            np.add.at(down, lo[a:b], d * (1.0 - p[level]))
        self.down = down
        # Root marginals: mass through nodes of that level plus edges skipping it.
        par = np.arange(count)[inner]
        plv = lv[inner]
        pw = p[plv]
        self._edges = (np.concatenate((plv, plv)),
                       np.concatenate((hi[inner], lo[inner])),
                       np.concatenate((down[par] * pw, down[par] * (1.0 - pw))))
        e_lv, e_child, e_flow = self._edges
        c_lv = lv[e_child]
        through = e_flow * up[e_child]
        diff = np.zeros(n_levels + 2)
        np.add.at(diff, e_lv + 1, through)
        np.add.at(diff, c_lv, -through)
        diff[0] += up[r]
        diff[lv[r]] -= up[r]
        skipped = np.cumsum(diff)[:n_levels]
        failed = p * skipped
        np.add.at(failed, plv, down[par] * pw * up[hi[inner]])
        self.root_marginals = np.clip(failed / self.p_evidence, 0.0, 1.0)

    def max_state(self) -> tuple[np.ndarray, float]:
        """The most probable joint state of the roots with the findings, and log P(state, findings).

        Max over the roots of prod prior * leaf, with every root the path skips
        at its likelier value: one pass up, one walk down.
        """
        cm, lv, lo, hi, ids = self.cm, self.lv, self.lo, self.hi, self.ids
        n_levels = cm.store.n_levels
        p = self.p
        if self.weighted:
            free = np.concatenate(([0.0], np.cumsum(np.log(np.maximum(p, 1.0 - p)))))
        else:
            free = cm._free_log
        count = len(ids)
        with np.errstate(divide="ignore"):
            best = np.full(count, -np.inf)
            leaves = lv == n_levels
            vals = np.array([cm.store.value[i] for i in ids[leaves]])
            best[leaves] = np.log(vals)
            take_high = np.zeros(count, dtype=bool)
            lp, lq = np.log(p), np.log1p(-p)
        bounds = np.flatnonzero(np.diff(lv)) + 1
        starts = np.concatenate(([0], bounds))
        ends = np.concatenate((bounds, [count]))
        for a, b in zip(starts, ends):
            level = int(lv[a])
            if level == n_levels:
                continue
            h, l_ = hi[a:b], lo[a:b]
            via_h = lp[level] + free[lv[h]] - free[level + 1] + best[h]
            via_l = lq[level] + free[lv[l_]] - free[level + 1] + best[l_]
            take_high[a:b] = via_h > via_l
            best[a:b] = np.maximum(via_h, via_l)
        state = (p > 0.5).astype(np.int8)  # the likelier value wherever the path skips a root
        n = self.pos[self.root]
        while lv[n] < n_levels:
            if take_high[n]:
                state[lv[n]] = 1
                n = hi[n]
            else:
                state[lv[n]] = 0
                n = lo[n]
        r = self.pos[self.root]
        return state, float(best[r] + free[lv[r]])

    def one_more(self, finding: int) -> OneMore:
        """P(findings, one more finding) and every root's posterior with it, without its evidence diagram.

        Parameters
        ----------
        finding : int
            The diagram of P(new finding | roots) (leaves in [0, 1]), e.g.
            :meth:`CompiledModel.finding_diagram`.

        Notes
        -----
        The product of the evidence diagram E with the finding's diagram L
        is walked, never built (Darwiche 2003: marginals are derivatives of
        the weighted count, read from one upward and one downward pass over
        the circuit). Above L's top level a the product is E itself with new
        upward values, and the downward values there are E's; from a on, the
        pairs (node of E, node of L) are walked until L reaches a leaf q,
        where the rest is E's node weighted by q, with E's upward values and
        new downward values. The passes run over E's level groups; only the
        pairs of L's few levels are new nodes.
        """
        cm = self.cm
        s = cm.store
        n_levels = s.n_levels
        p = self.p
        up, down, lv, lo, hi, pos = self.up, self.down, self.lv, self.lo, self.hi, self.pos
        if s.var[finding] == n_levels:
            q = s.value[finding]
            if not self.p_evidence * q > 0.0:
                raise ZeroEvidence
            return OneMore(self.p_evidence * q, self.root_marginals, len(self.ids))
        top = s.var[finding]
        svar, slow, shigh, sval = s.var, s.low, s.high, s.value
        count = len(self.ids)
        r = pos[self.root]
        # Pairs (E position, L node), numbered as met in a walk from where
        # E's edges cross level `top`. For pair k: its level, and per branch
        # (0 works, 1 failed) the child: a pair (kind 0) or, once L reaches a
        # leaf q, E's node weighted by q (kind 1).
        size = len(s)
        index: dict[int, int] = {}
        e_of: list[int] = []
        f_of: list[int] = []
        above = lv < top
        inner = self._inner
        cross_parent = np.flatnonzero(above & inner)
        seeds: set[int] = set()
        for child in (hi[cross_parent], lo[cross_parent]):
            seeds.update(child[lv[child] >= top].tolist())
        if lv[r] >= top:
            seeds.add(r)
        for n in sorted(seeds):
            index[n * size + finding] = len(e_of)
            e_of.append(n)
            f_of.append(finding)
        levels: list[int] = []
        kind0: list[int] = []
        kid0: list[int] = []
        scale0: list[float] = []
        kind1: list[int] = []
        kid1: list[int] = []
        scale1: list[float] = []
        lv_list, lo_list, hi_list = lv.tolist(), lo.tolist(), hi.tolist()
        k = 0
        while k < len(e_of):  # every pair once, in the order met
            n, f = e_of[k], f_of[k]
            ln, lf = lv_list[n], svar[f]
            if ln <= lf:
                level, e0, e1 = ln, lo_list[n], hi_list[n]
            else:
                level, e0, e1 = lf, n, n
            if lf == level:
                f0, f1 = slow[f], shigh[f]
            else:
                f0 = f1 = f
            levels.append(level)
            for e, g, kinds, kids, scales in ((e0, f0, kind0, kid0, scale0), (e1, f1, kind1, kid1, scale1)):
                if svar[g] == n_levels:
                    kinds.append(1)
                    kids.append(e)
                    scales.append(sval[g])
                else:
                    key = e * size + g
                    found = index.get(key)
                    if found is None:
                        found = len(e_of)
                        index[key] = found
                        e_of.append(e)
                        f_of.append(g)
                    kinds.append(0)
                    kids.append(found)
                    scales.append(1.0)
            k += 1
        n_pairs = len(e_of)
        # Upward values of the pairs, deepest first.
        order = sorted(range(n_pairs), key=levels.__getitem__, reverse=True)
        up_list = self.up_list
        pl_list = p.tolist()
        pair_up = [0.0] * n_pairs
        for k in order:
            pl = pl_list[levels[k]]
            i0, i1 = kid0[k], kid1[k]
            v0 = (up_list[i0] if kind0[k] else pair_up[i0]) * scale0[k]
            v1 = (up_list[i1] if kind1[k] else pair_up[i1]) * scale1[k]
            pair_up[k] = (1.0 - pl) * v0 + pl * v1
        # Upward values above `top`: E's groups there, with the crossing children's pair values.
        new_up = up.copy()
        seed_pos = np.array(sorted(seeds), dtype=np.int64)
        if len(seed_pos):
            new_up[seed_pos] = [pair_up[index[int(n) * size + finding]] for n in seed_pos]
        for level, a, b in self._groups:
            if level < top:
                new_up[a:b] = p[level] * new_up[hi[a:b]] + (1.0 - p[level]) * new_up[lo[a:b]]
        p_evidence = float(new_up[r])
        if not p_evidence > 0.0:
            raise ZeroEvidence
        # Downward values: E's above `top`; the pairs' from E's crossing edges; E's below from the pairs.
        pair_down = [0.0] * n_pairs
        if lv[r] >= top:
            pair_down[index[r * size + finding]] += 1.0
        for child, weight in ((hi, p), (lo, 1.0 - p)):
            c = child[cross_parent]
            w = weight[lv[cross_parent]] * down[cross_parent]
            crossing = lv[c] >= top
            for n, m in zip(c[crossing].tolist(), w[crossing].tolist()):
                pair_down[index[n * size + finding]] += m
        e_down = np.zeros(count)
        for k in reversed(order):  # parents first
            d = pair_down[k]
            pl = pl_list[levels[k]]
            flow = d * (1.0 - pl) * scale0[k]
            if kind0[k]:
                e_down[kid0[k]] += flow
            else:
                pair_down[kid0[k]] += flow
            flow = d * pl * scale1[k]
            if kind1[k]:
                e_down[kid1[k]] += flow
            else:
                pair_down[kid1[k]] += flow
        for level, a, b in reversed(self._groups):
            if level >= top:
                mass = e_down[a:b]
                np.add.at(e_down, hi[a:b], mass * p[level])
                np.add.at(e_down, lo[a:b], mass * (1.0 - p[level]))
        # Root marginals: mass through each level's nodes plus edges skipping it (as in the passes).
        diff = np.zeros(n_levels + 2)
        failed = np.zeros(n_levels)
        root_up = p_evidence
        root_lv = int(lv[r]) if lv[r] < top else top
        diff[0] += root_up
        diff[root_lv] -= root_up

        def edges(parent_lv, child_lv, flow, child_up, high):
            through = flow * child_up
            np.add.at(diff, parent_lv + 1, through)
            np.add.at(diff, child_lv, -through)
            np.add.at(failed, parent_lv[high], through[high])

        # E above `top` (downward values unchanged; children's upward values new).
        for child, weight, high in ((hi, p, True), (lo, 1.0 - p, False)):
            c = child[cross_parent]
            plv = lv[cross_parent]
            child_lv = np.where(lv[c] >= top, top, lv[c])
            edges(plv, child_lv, down[cross_parent] * weight[plv], new_up[c], np.full(len(c), high))
        # The pairs.
        if n_pairs:
            pair_lv = np.array(levels, dtype=np.int64)
            pair_up_arr = np.array(pair_up)
            pair_down_arr = np.array(pair_down)
            for kinds, kids, scales, weight, high in ((kind0, kid0, scale0, 1.0 - p, False),
                                                      (kind1, kid1, scale1, p, True)):
                to_e = np.array(kinds, dtype=bool)
                kid = np.array(kids, dtype=np.int64)
                e_kid = np.where(to_e, kid, 0)
                p_kid = np.where(to_e, 0, kid)
                c_lv = np.where(to_e, lv[e_kid], pair_lv[p_kid])
                c_up = np.where(to_e, up[e_kid], pair_up_arr[p_kid])
                flow = pair_down_arr * weight[pair_lv] * np.array(scales)
                edges(pair_lv, c_lv, flow, c_up, np.full(n_pairs, high))
        # E from `top` on (upward values E's, downward values new).
        below = np.flatnonzero(~above & inner)
        for child, weight, high in ((hi, p, True), (lo, 1.0 - p, False)):
            c = child[below]
            plv = lv[below]
            edges(plv, lv[c], e_down[below] * weight[plv], up[c], np.full(len(c), high))
        skipped = np.cumsum(diff)[:n_levels]
        failed += p * skipped
        return OneMore(p_evidence, np.clip(failed / p_evidence, 0.0, 1.0), count + n_pairs)

    def grouped(self, causes: tuple[int, ...], addends: tuple, zero=0, add=operator.add) -> dict:
        """P(findings)-normalised mass of the cause states, grouped by the sum of the present causes' addends.

        With addends 2^(m-1-i) the sum is the index of the cause state (C
        order); with the log misses of a noisy-OR it is what the likelihood
        depends on, so the family has as many entries as distinct sums.

        Notes
        -----
        The walk starts where the first cause's top level cuts the evidence
        diagram: the mass arriving there comes from the downward pass. It
        pairs an evidence node with the causes still undecided; a cause that
        is decided adds its addend (if present) and leaves the pair, so the
        pairs never multiply by the number of causes. Once none is left, the
        upward pass gives the rest.
        """
        s = self.cm.store
        n_levels = s.n_levels
        var, low, high = s.var, s.low, s.high
        assert not self.weighted, "pair walks read the priors of the cause diagrams"
        up, pos, ids, p = self.up, self.pos, self.ids, self.cm.priors
        memo: dict = {}

        def split(cs, level, branch):
            kept, shift = [], zero
            for c, w in cs:
                if var[c] == level:
                    c = branch[c]
                if c == 1:
                    shift = add(shift, w)
                elif c != 0:
                    kept.append((c, w))
            return tuple(kept), shift

        def walk(e: int, cs: tuple) -> dict:
            key = (e, cs)
            found = memo.get(key)
            if found is not None:
                return found
            if not cs:
                out = {zero: float(up[pos[e]])}
            else:
                level = min(var[e], min(var[c] for c, _ in cs))
                pl = p[level]
                e0, e1 = (low[e], high[e]) if var[e] == level else (e, e)
                k0, s0 = split(cs, level, low)
                k1, s1 = split(cs, level, high)
                out = {}
                for k, v in walk(e0, k0).items():
                    out[add(k, s0)] = (1.0 - pl) * v
                for k, v in walk(e1, k1).items():
                    key1 = add(k, s1)
                    out[key1] = out.get(key1, 0.0) + pl * v
            memo[key] = out
            return out

        start, shift = split(tuple(zip(causes, addends)), -1, low)
        if not start:
            return {shift: 1.0}
        inflow = self._inflow(min(var[c] for c, _ in start))
        acc: dict = {}
        with _deep(4 * n_levels + 2000):
            for i in np.flatnonzero(inflow):
                for k, v in walk(int(ids[i]), start).items():
                    key1 = add(k, shift)
                    acc[key1] = acc.get(key1, 0.0) + float(inflow[i]) * v
        return {k: min(max(v / self.p_evidence, 0.0), 1.0) for k, v in acc.items()}

    def joint_by_likelihood(self, causes: tuple[int, ...], log_cdfs) -> tuple[list[tuple], np.ndarray]:
        """A wide check's family grouped by what its likelihood depends on: (sums of log Q, masses).

        Under noisy-MAX the likelihood of a cause state depends on it only
        through the sum of the present causes' log Q vectors, so grouping by
        that sum gives as many entries as distinct sums (m + 1 when every
        cause has the same Q), never 2^m.
        """
        width = len(log_cdfs[0]) if log_cdfs else 0

        def add(a, b):
            return tuple(x + y for x, y in zip(a, b))

        acc = self.grouped(causes, tuple(tuple(q) for q in log_cdfs), (0.0,) * width, add)
        keys = sorted(acc)
        return keys, np.array([acc[k] for k in keys])

    def _inflow(self, top: int) -> np.ndarray:
        """Mass arriving at each evidence node from above level ``top`` (the downward pass cut there)."""
        e_lv, e_child, e_flow = self._edges
        cross = (e_lv < top) & (self.lv[e_child] >= top)
        inflow = np.bincount(e_child[cross], weights=e_flow[cross], minlength=len(self.ids))
        r = self.pos[self.root]
        if self.lv[r] >= top:
            inflow[r] += 1.0
        return inflow

    def both(self, g: int) -> float:
        """P(g, findings) / P(findings) for a 0/1 diagram g.

        Notes
        -----
        A walk of the pairs (evidence node, node of g) from where g's top
        level cuts the evidence diagram. A pair whose two parts test disjoint
        ranges of levels is independent: its mass is the evidence node's
        upward value times g's prior probability, so the walk stops there.
        """
        s, cm = self.cm.store, self.cm
        var, low, high = s.var, s.low, s.high
        if g in (0, 1):
            return float(g)
        if low[g] == 0 and high[g] == 1:
            return float(self.root_marginals[var[g]])
        assert not self.weighted, "pair walks read the priors of the cause diagrams"
        up, pos, p, deepest = self.up_list, self.pos, cm.priors, self.deepest_list
        prior, known = cm.prior, cm._prior
        # One memo for every walk over this evidence: the gates' diagrams
        # share their lower nodes, so a pair met for one gate is met again.
        memo = self._pairs

        def walk(e: int, f: int) -> float:
            if f == 0 or e == 0:
                return 0.0
            i = pos[e]
            if f == 1:
                return up[i]
            key = (e, f)
            found = memo.get(key)
            if found is not None:
                return found
            pf, df = known.get(f) or prior(f)
            ve, vf = var[e], var[f]
            if df < ve or deepest[i] < vf:  # disjoint levels: independent
                result = up[i] * pf
            elif ve == vf:
                pl = p[ve]
                result = (1.0 - pl) * walk(low[e], low[f]) + pl * walk(high[e], high[f])
            elif ve < vf:
                pl = p[ve]
                result = (1.0 - pl) * walk(low[e], f) + pl * walk(high[e], f)
            else:
                pl = p[vf]
                result = (1.0 - pl) * walk(e, low[f]) + pl * walk(e, high[f])
            memo[key] = result
            return result

        inflow = self._inflow(var[g])
        total = 0.0
        with _deep(4 * s.n_levels + 2000):
            for i in np.flatnonzero(inflow):
                total += float(inflow[i]) * walk(int(self.ids[i]), g)
        return min(max(total / self.p_evidence, 0.0), 1.0)

    def both_many(self, fs: list[int]) -> np.ndarray:
        """P(f, findings) / P(findings) for many 0/1 diagrams at once, in whole arrays.

        Notes
        -----
        The same pairs (evidence node, node of f) as :meth:`both`, but
        enumerated level by level for every f together and evaluated
        bottom-up in numpy: a pair whose parts test disjoint ranges of
        levels (a leaf of f included) is closed, its mass the evidence
        node's upward value times f's prior probability; any other splits
        on the first level either part tests. Each f starts where its top
        level cuts the evidence diagram, with the mass the downward pass
        brings there.
        """
        cm = self.cm
        assert not self.weighted, "pair walks read the priors of the cause diagrams"
        var, low, high, prior, deep_f = cm.arrays()
        size = len(var)
        epos = np.full(size, -1, dtype=np.int64)
        epos[self.ids] = np.arange(len(self.ids))
        up, deep_e, p = self.up, self.deepest, cm.priors
        out = np.zeros(len(fs))
        starts_key, starts_w, starts_owner = [], [], []
        inflows: dict[int, tuple[np.ndarray, np.ndarray]] = {}
        for j, f in enumerate(fs):
            if f in (0, 1):
                out[j] = float(f)
                continue
            if low[f] == 0 and high[f] == 1:
                out[j] = float(self.root_marginals[var[f]])
                continue
            top = int(var[f])
            if top not in inflows:
                inflow = self._inflow(top)
                nz = np.flatnonzero(inflow)
                inflows[top] = (self.ids[nz], inflow[nz])
            e_ids, w = inflows[top]
            starts_key.append(e_ids * size + f)
            starts_w.append(w)
            starts_owner.append(np.full(len(e_ids), j))
        if not starts_key:
            return out
        start_keys = np.concatenate(starts_key)
        n_starts = len(start_keys)

        # Every pair gets a slot in ``vals`` when it is met: closed pairs
        # (their value known at once, one slot per reference), open pairs
        # once per level after duplicates are merged. A reference is where a
        # slot is wanted: start j is -1 - j, branch b of open slot k is 2k + b.
        vals_parts: list[np.ndarray] = []
        n_slots = 0
        child = np.zeros(0, dtype=np.int64)  # 2k + b -> slot of that child
        start_slot = np.zeros(n_starts, dtype=np.int64)
        buckets: dict[int, list[tuple[np.ndarray, np.ndarray]]] = {}
        inner: list[tuple[int, int, int]] = []  # (level, first slot, end slot) of each level's open pairs

        def resolve(refs: np.ndarray, slots: np.ndarray) -> None:
            nonlocal child
            from_start = refs < 0
            start_slot[-1 - refs[from_start]] = slots[from_start]
            keep = ~from_start
            if keep.any():
                need = int(refs[keep].max()) + 1
                if need > len(child):
                    child = np.concatenate((child, np.zeros(max(need, 2 * len(child)) - len(child), np.int64)))
                child[refs[keep]] = slots[keep]

        def place(keys: np.ndarray, refs: np.ndarray) -> None:
            nonlocal n_slots
            pe, pf = keys // size, keys % size
            ve, vf = var[pe], var[pf]
            ie = epos[pe]
            closed = (deep_f[pf] < ve) | (deep_e[ie] < vf)
            if closed.any():
                count = int(closed.sum())
                vals_parts.append(up[ie[closed]] * prior[pf[closed]])
                resolve(refs[closed], np.arange(n_slots, n_slots + count))
                n_slots += count
            keep = ~closed
            if keep.any():
                lv = np.minimum(ve[keep], vf[keep])
                k, r = keys[keep], refs[keep]
                order = np.argsort(lv, kind="stable")
                lv, k, r = lv[order], k[order], r[order]
                cuts = (np.flatnonzero(lv[1:] != lv[:-1]) + 1).tolist()
                for a, b, part_lv in zip([0] + cuts, cuts + [len(lv)], lv[[0] + cuts].tolist()):
                    buckets.setdefault(part_lv, []).append((k[a:b], r[a:b]))

        place(start_keys, -1 - np.arange(n_starts, dtype=np.int64))
        while buckets:
            level = min(buckets)
            parts = buckets.pop(level)
            keys = np.concatenate([k for k, _ in parts]) if len(parts) > 1 else parts[0][0]
            refs = np.concatenate([r for _, r in parts]) if len(parts) > 1 else parts[0][1]
            order = np.argsort(keys, kind="stable")
            keys, refs = keys[order], refs[order]
            first = np.empty(len(keys), dtype=bool)
            first[0] = True
            np.not_equal(keys[1:], keys[:-1], out=first[1:])
            distinct = keys[first]
            m = len(distinct)
            base = n_slots
            resolve(refs, base + np.cumsum(first) - 1)
            n_slots += m
            vals_parts.append(np.zeros(m))
            inner.append((level, base, base + m))
            pe, pf = distinct // size, distinct % size
            at_e, at_f = var[pe] == level, var[pf] == level
            e0, e1 = np.where(at_e, low[pe], pe), np.where(at_e, high[pe], pe)
            f0, f1 = np.where(at_f, low[pf], pf), np.where(at_f, high[pf], pf)
            slot_refs = 2 * np.arange(base, base + m, dtype=np.int64)
            place(np.concatenate((e0 * size + f0, e1 * size + f1)), np.concatenate((slot_refs, slot_refs + 1)))
        vals = np.concatenate(vals_parts) if vals_parts else np.zeros(0)
        if len(child) < 2 * n_slots:
            child = np.concatenate((child, np.zeros(2 * n_slots - len(child), np.int64)))
        for level, first_slot, end_slot in reversed(inner):  # deepest first
            v0 = vals[child[2 * first_slot:2 * end_slot:2]]
            v1 = vals[child[2 * first_slot + 1:2 * end_slot:2]]
            vals[first_slot:end_slot] = (1.0 - p[level]) * v0 + p[level] * v1
        mass = vals[start_slot] * np.concatenate(starts_w)
        owner = np.concatenate(starts_owner)
        totals = np.bincount(owner, weights=mass, minlength=len(fs))
        done = np.zeros(len(fs), bool)
        done[owner] = True
        out[done] = np.clip(totals[done] / self.p_evidence, 0.0, 1.0)
        return out

    def joints_many(self, families: list[tuple[int, ...]]) -> list[np.ndarray]:
        """:meth:`joint` of many cause tuples (each of at most four causes), in one batch."""
        wanted: list[int] = []
        plans = []
        for causes in families:
            conj = self.cm.conjunctions(causes)
            plans.append((len(causes), list(range(len(wanted), len(wanted) + len(conj)))))
            wanted.extend(conj)
        values = self.both_many(wanted)
        out = []
        for m, subsets in plans:
            all_of = np.ones(1 << m)
            all_of[1:] = values[subsets]
            out.append(_moebius(all_of, m))
        return out

    def joint(self, causes: tuple[int, ...]) -> np.ndarray:
        """P(c | findings) over the 2^m joint states of the cause diagrams (C order).

        Up to four causes: from P(every cause of S present, findings) for
        each non-empty subset S (one walk each, on the conjunction's
        diagram), by Moebius inversion; more: one walk over all causes at once.
        """
        m = len(causes)
        s = self.cm.store
        if m == 0:
            return np.ones(1)
        if m <= 4:
            # all_of[S] = P(c_i = 1 for i in S | e); bit i of S is cause m-1-i (C order).
            all_of = np.ones(1 << m)
            with _deep(4 * s.n_levels + 2000):
                for subset in range(1, 1 << m):
                    f = 1
                    for i in range(m):
                        if subset >> (m - 1 - i) & 1:
                            f = s.and_(f, causes[i])
                    all_of[subset] = self.both(f)
            return _moebius(all_of, m)
        out = np.zeros(1 << m)
        for k, v in self.grouped(causes, tuple(1 << (m - 1 - i) for i in range(m))).items():
            out[k] = v
        return out


def _distinct(keys: np.ndarray) -> np.ndarray:
    """The distinct values of an integer array, sorted (``np.unique``, by sorting: its hash path
    costs about 0.2 ms per call on the small arrays of a level-by-level walk)."""
    keys = np.sort(keys)
    if len(keys) > 1:
        keep = np.empty(len(keys), dtype=bool)
        keep[0] = True
        np.not_equal(keys[1:], keys[:-1], out=keep[1:])
        keys = keys[keep]
    return keys


def _moebius(all_of: np.ndarray, m: int) -> np.ndarray:
    """P(exactly cause state x) from P(every cause of S present), S over the subsets (C order bits).

    P(x) = sum over S containing x of (-1)^|S - x| all_of[S] (Moebius inversion).
    """
    out = all_of.copy()
    for bit in range(m):
        step = 1 << bit
        for x in range(1 << m):
            if not x & step:
                out[x] -= out[x | step]
    return np.clip(out, 0.0, 1.0)
