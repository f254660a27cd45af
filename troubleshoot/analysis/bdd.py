"""The fault tree of a model as a reduced ordered binary decision diagram (BDD).

A BDD is an exact, canonical form of the top event as a Boolean function of
the root events (basic events and unlisted-cause events). Its probability
follows by Shannon decomposition, one pass over the nodes; the minimal cut
sets follow from it as a zero-suppressed diagram (:mod:`troubleshoot.analysis.cutsets`);
the importance measures follow from the same nodes with one root pinned
failed or working (:mod:`troubleshoot.analysis.importance`).

The diagram is pure data built once from a :class:`~troubleshoot.model.Model`;
nothing here reads files or the clock.

References
----------
R. E. Bryant, "Graph-based algorithms for Boolean function manipulation",
IEEE Transactions on Computers C-35(8), 1986 (reduced ordered BDDs, apply).
A. Rauzy, "New algorithms for fault trees analysis", Reliability Engineering
and System Safety 40(3), 1993 (BDDs for fault trees; depth-first variable order).
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981 (gates and the top event).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from troubleshoot.errors import TroubleshootError
from troubleshoot.model import Model
from troubleshoot.model.gates import AND, ATLEAST, NOT, OR, bottom_up, connective, depth_first_roots

#: Node id of the constant function "never fails".
FALSE = 0
#: Node id of the constant function "always fails".
TRUE = 1

#: Default ceiling on diagram nodes (each costs a few hundred bytes in Python).
DEFAULT_NODE_LIMIT = 5_000_000

Progress = Callable[[str], None]


class DiagramTooLarge(TroubleshootError):
    """The decision diagram of the fault tree outgrew its node budget.

    Raised while building, before memory runs out.
    """


def variable_order(model: Model) -> tuple[str, ...]:
    """Root events in depth-first, left-to-right order of first visit from the top.

    Roots the top event does not depend on are left out.

    Notes
    -----
    A gate's operands are visited in file order (the inhibit condition last),
    then its unlisted-cause event. Depth-first orders keep the events of one
    subtree together, which keeps the BDD small for fault trees built by hand.

    References
    ----------
    A. Rauzy, Reliability Engineering and System Safety 40(3), 1993 (section on
    variable ordering: depth-first left-most heuristic).
    """
    return depth_first_roots(model)


def fold_children_first(f: int, low, high, cache: dict, combine) -> Any:
    """``cache[n] = combine(n, cache[low[n]], cache[high[n]])`` for every node under ``f``, children first.

    An explicit stack, so a diagram's depth is limited by memory, not by
    Python's recursion limit; ``cache`` must already hold the terminals.
    """
    stack = [f]
    while stack:
        n = stack[-1]
        if n in cache:
            stack.pop()
            continue
        lo, hi = cache.get(low[n]), cache.get(high[n])
        if lo is None or hi is None:
            if lo is None:
                stack.append(low[n])
            if hi is None:
                stack.append(high[n])
            continue
        stack.pop()
        cache[n] = combine(n, lo, hi)
    return cache[f]


def internal_nodes_under(root: int, low, high, last_terminal: int) -> list[int]:
    """Nodes under ``root`` with an id above ``last_terminal``, in increasing id order.

    Children always have smaller ids than their parent in a hash-consed
    store, so increasing id order is children-first order.
    """
    seen = set()
    stack = [root]
    while stack:
        n = stack.pop()
        if n <= last_terminal or n in seen:
            continue
        seen.add(n)
        stack.append(low[n])
        stack.append(high[n])
    return sorted(seen)


class NodeStore:
    """Hash-consed nodes (level, low, high) in three parallel lists, with a size limit.

    Nodes 0 and 1 are the two terminals. Each diagram applies its own
    reduction rule before :meth:`intern` and words its own refusal in
    :meth:`too_large`.
    """

    def __init__(self, n_vars: int, node_limit: int):
        self.node_limit = node_limit
        self.var: list[int] = [n_vars, n_vars]
        self.low: list[int] = [-1, -1]
        self.high: list[int] = [-1, -1]
        self._unique: dict[tuple[int, int, int], int] = {}

    def intern(self, level: int, low: int, high: int) -> int:
        """The one node (level, low, high), made if new; too_large() past the limit."""
        key = (level, low, high)
        found = self._unique.get(key)
        if found is not None:
            return found
        new = len(self.var)
        if new >= self.node_limit:
            raise self.too_large()
        self.var.append(level)
        self.low.append(low)
        self.high.append(high)
        self._unique[key] = new
        return new

    def too_large(self) -> TroubleshootError:
        raise NotImplementedError


class Diagram(NodeStore):
    """A shared store of reduced ordered BDD nodes over ``n_vars`` levels.

    Node 0 is FALSE and node 1 is TRUE; every other node ``i`` tests the
    variable at level ``var[i]`` and goes to ``high[i]`` when it is failed,
    ``low[i]`` when it works. Nodes are created children first, so increasing
    ids are a bottom-up order.
    """

    def __init__(self, n_vars: int, node_limit: int = DEFAULT_NODE_LIMIT):
        self.n_vars = n_vars
        NodeStore.__init__(self, n_vars, node_limit)
        self._and_cache: dict[tuple[int, int], int] = {}
        self._or_cache: dict[tuple[int, int], int] = {}
        self._not_cache: dict[int, int] = {FALSE: TRUE, TRUE: FALSE}

    def __len__(self) -> int:
        return len(self.var)

    def node(self, level: int, low: int, high: int) -> int:
        """The unique node (level, low, high), reduced (low == high gives low)."""
        if low == high:
            return low
        return self.intern(level, low, high)

    def too_large(self) -> TroubleshootError:
        return DiagramTooLarge(
            f"the decision diagram of this fault tree passed {self.node_limit:,} nodes; "
            "the tree is too large for exact analysis in memory: analyse a subtree "
            "(a gate below the top) or simplify repeated events"
        )

    def variable(self, level: int) -> int:
        """The function "root event at ``level`` is failed"."""
        return self.node(level, FALSE, TRUE)

    @staticmethod
    def _and_terminal(f: int, g: int) -> int | None:
        if f == FALSE or g == FALSE:
            return FALSE
        if f == TRUE:
            return g
        if g == TRUE or f == g:
            return f
        return None

    @staticmethod
    def _or_terminal(f: int, g: int) -> int | None:
        if f == TRUE or g == TRUE:
            return TRUE
        if f == FALSE:
            return g
        if g == FALSE or f == g:
            return f
        return None

    def _apply(self, f: int, g: int, terminal, cache: dict[tuple[int, int], int]) -> int:
        """Bryant's apply of a commutative operator, with an explicit stack.

        Each pair (f, g) waits on the stack until both of its cofactor pairs
        are known, then becomes one node; the depth of the diagram is limited
        by memory, not by Python's recursion limit.
        """
        def known(a: int, b: int) -> int | None:
            found = terminal(a, b)
            if found is not None:
                return found
            return cache.get((a, b) if a <= b else (b, a))

        result = known(f, g)
        if result is not None:
            return result
        var, low, high = self.var, self.low, self.high
        stack = [(f, g)]
        while stack:
            a, b = stack[-1]
            if known(a, b) is not None:
                stack.pop()
                continue
            va, vb = var[a], var[b]
            level = min(va, vb)
            a0, a1 = (low[a], high[a]) if va == level else (a, a)
            b0, b1 = (low[b], high[b]) if vb == level else (b, b)
            lo, hi = known(a0, b0), known(a1, b1)
            if lo is None or hi is None:
                if lo is None:
                    stack.append((a0, b0))
                if hi is None:
                    stack.append((a1, b1))
                continue
            stack.pop()
            cache[(a, b) if a <= b else (b, a)] = self.node(level, lo, hi)
        return known(f, g)  # type: ignore[return-value]

    def and_(self, f: int, g: int) -> int:
        """Conjunction of two functions (Bryant's apply)."""
        return self._apply(f, g, self._and_terminal, self._and_cache)

    def or_(self, f: int, g: int) -> int:
        """Disjunction of two functions (Bryant's apply)."""
        return self._apply(f, g, self._or_terminal, self._or_cache)

    def not_(self, f: int) -> int:
        """Negation of a function (explicit stack, children first)."""
        return fold_children_first(f, self.low, self.high, self._not_cache,
                                    lambda n, lo, hi: self.node(self.var[n], lo, hi))

    def at_least(self, k: int, operands: list[int]) -> int:
        """At least ``k`` of the operand functions hold (a voting gate).

        Built by the counting recursion S_j <- S_j OR (f_i AND S_(j-1)), so the
        work grows as k times the number of operands, never as 2^n.
        """
        if k <= 0:
            return TRUE
        if k > len(operands):
            return FALSE
        if k in (1, len(operands)):  # an OR or an AND: n applies, not k times n
            f = TRUE if k > 1 else FALSE
            for g in operands:
                f = self.and_(f, g) if k > 1 else self.or_(f, g)
            return f
        at_least_j = [TRUE] + [FALSE] * k
        for i, f in enumerate(operands, start=1):
            for j in range(min(i, k), 0, -1):
                at_least_j[j] = self.or_(at_least_j[j], self.and_(f, at_least_j[j - 1]))
        return at_least_j[k]

    def reachable(self, root: int) -> list[int]:
        """Internal nodes reachable from ``root``, in increasing id (bottom-up) order."""
        return internal_nodes_under(root, self.low, self.high, TRUE)

    def is_monotone(self, root: int) -> bool:
        """True when the function never goes from failed to working as a root fails.

        A function is monotone (the tree is coherent) exactly when at every
        node the low branch implies the high branch: low AND NOT high = FALSE.
        """
        implies: dict[tuple[int, int], bool] = {}

        def known(f: int, g: int) -> bool | None:
            # Does f imply g?  Same cofactors as apply, without building nodes.
            if f == FALSE or g == TRUE or f == g:
                return True
            if f == TRUE and g == FALSE:
                return False
            return implies.get((f, g))

        for n in self.reachable(root):
            if known(self.low[n], self.high[n]) is False:
                return False
            stack = [(self.low[n], self.high[n])]
            while stack:
                f, g = stack[-1]
                if known(f, g) is not None:
                    stack.pop()
                    continue
                vf, vg = self.var[f], self.var[g]
                v = min(vf, vg)
                f0, f1 = (self.low[f], self.high[f]) if vf == v else (f, f)
                g0, g1 = (self.low[g], self.high[g]) if vg == v else (g, g)
                first, second = known(f0, g0), known(f1, g1)
                if first is False or second is False:
                    implies[(f, g)] = False
                elif first and second:
                    implies[(f, g)] = True
                else:
                    if first is None:
                        stack.append((f0, g0))
                    if second is None:
                        stack.append((f1, g1))
                    continue
                stack.pop()
            if not known(self.low[n], self.high[n]):
                return False
        return True


@dataclass
class FaultTreeBdd:
    """The top event of a model as a BDD over its root events.

    Attributes
    ----------
    model : Model
        The model it was built from.
    order : tuple of str
        Root event ids by level (level 0 is tested first).
    priors : numpy.ndarray
        Prior failure probability of each level's root event.
    diagram : Diagram
        The node store.
    root : int
        Node id of the top event.
    has_not_gates : bool
        A NOT gate is under the top event (the tree may be non-coherent).
    """

    model: Model
    order: tuple[str, ...]
    priors: np.ndarray
    diagram: Diagram
    root: int
    has_not_gates: bool

    @classmethod
    def from_model(
        cls,
        model: Model,
        *,
        node_limit: int = DEFAULT_NODE_LIMIT,
        progress: Progress | None = None,
    ) -> FaultTreeBdd:
        """Build the BDD of ``model``'s top event.

        Parameters
        ----------
        model : Model
            A validated model (acyclic gates, known operands).
        node_limit : int
            Refuse to grow the diagram past this many nodes.
        progress : callable, optional
            Called with a short message now and then while gates are built.

        Returns
        -------
        FaultTreeBdd

        Raises
        ------
        DiagramTooLarge
            The diagram passed ``node_limit`` nodes.

        Notes
        -----
        Gates are built bottom-up in a depth-first post-order from the top and
        each gate's function is kept, so a gate shared by several parents is
        built once. A gate is read through
        :func:`~troubleshoot.model.gates.connective` (INHIBIT is its input AND
        its condition; an OR gate's unlisted causes are one more input). Every
        walk uses an explicit stack, so depth is limited by memory only.

        References
        ----------
        R. E. Bryant, IEEE Trans. Computers C-35(8), 1986.
        A. Rauzy, Reliability Engineering and System Safety 40(3), 1993.
        """
        order = variable_order(model)
        level_of = {root_id: level for level, root_id in enumerate(order)}
        priors = np.array([model.prior_of(root_id) for root_id in order], dtype=float)
        diagram = Diagram(len(order), node_limit)
        gates = model.gate_by_id
        function: dict[str, int] = {}
        has_not = False

        def operand_function(node_id: str) -> int:
            if node_id in gates:
                return function[node_id]
            return diagram.variable(level_of[node_id])

        if model.top not in gates:
            function[model.top] = diagram.variable(level_of[model.top])
        post_order = bottom_up(model, [model.top])
        for done, gate_id in enumerate(post_order, start=1):
            conn = connective(gates[gate_id])
            inputs = [operand_function(i) for i in conn.operands]
            if conn.op == AND:
                f = TRUE
                for g in inputs:
                    f = diagram.and_(f, g)
            elif conn.op == OR:
                f = FALSE
                for g in inputs:
                    f = diagram.or_(f, g)
            elif conn.op == ATLEAST:
                f = diagram.at_least(conn.threshold(), inputs)
            elif conn.op == NOT:
                has_not = True
                f = diagram.not_(inputs[0])
            else:  # pragma: no cover - connective() knows no other
                raise ValueError(f"unknown connective {conn.op!r}")
            function[gate_id] = f
            if progress is not None and (done % 25 == 0 or done == len(post_order)):
                progress(f"decision diagram: {done}/{len(post_order)} gates, {len(diagram):,} nodes")
        return cls(model, order, priors, diagram, function[model.top], has_not)

    @property
    def size(self) -> int:
        """Number of internal nodes the top event's function uses."""
        return len(self.diagram.reachable(self.root))

    def _levels(self):
        """Reachable nodes grouped by level, deepest level first, as index arrays."""
        d = self.diagram
        nodes = self.diagram.reachable(self.root)
        by_level: dict[int, list[int]] = {}
        for n in nodes:
            by_level.setdefault(d.var[n], []).append(n)
        low = np.array(d.low, dtype=np.int64)
        high = np.array(d.high, dtype=np.int64)
        groups = []
        for level in sorted(by_level, reverse=True):
            idx = np.array(by_level[level], dtype=np.int64)
            groups.append((level, idx, low[idx], high[idx]))
        return groups

    def probability(self) -> float:
        """Exact probability of the top event, by Shannon decomposition.

        P(f) = p_x P(f | x failed) + (1 - p_x) P(f | x works), node by node,
        the root events independent.

        References
        ----------
        R. E. Bryant 1986; A. Rauzy 1993 (probability of a BDD in linear time).
        """
        values = np.zeros(len(self.diagram))
        values[TRUE] = 1.0
        for level, idx, lo, hi in self._levels():
            p = self.priors[level]
            values[idx] = p * values[hi] + (1.0 - p) * values[lo]
        return float(values[self.root])

    def conditional_probabilities(self) -> tuple[dict[str, float], dict[str, float]]:
        """P(top | root failed) and P(top | root works) for every root of the model.

        Returns
        -------
        failed, working : dict of str to float
            Keyed by every id in ``model.hypotheses``; a root the top does not
            depend on gets P(top) in both.

        Notes
        -----
        One upward pass (P of every node's function) and one downward pass
        (the probability mass reaching every node from the top) give both
        conditionals of every root at once: P(top | x failed) is the mass
        through the nodes testing x, each times its high child's value, plus
        the mass on edges that skip x's level (where x is free), and
        likewise with the low child for x working (Darwiche 2003, the
        differential approach). Every value is a sum of non-negative terms,
        so a conditional probability that is exactly zero comes out exactly
        zero (no cancellation).

        References
        ----------
        A. Darwiche, "A differential approach to inference in Bayesian
        networks", JACM 50(3), 2003.
        """
        groups = self._levels()
        n_levels = len(self.order)
        up = np.zeros(len(self.diagram))
        up[TRUE] = 1.0
        for level, idx, lo, hi in groups:
            p = self.priors[level]
            up[idx] = p * up[hi] + (1.0 - p) * up[lo]
        top = float(up[self.root])
        failed = {root_id: top for root_id in self.model.hypotheses}
        working = dict(failed)
        if self.root <= TRUE:
            return failed, working
        var = np.array(self.diagram.var, dtype=np.int64)
        down = np.zeros(len(self.diagram))
        down[self.root] = 1.0
        through1 = np.zeros(n_levels)
        through0 = np.zeros(n_levels)
        skip = np.zeros(n_levels + 1)  # difference array over levels
        skip[0] += up[self.root]
        skip[min(var[self.root], n_levels)] -= up[self.root]
        for level, idx, lo, hi in reversed(groups):  # top level first
            p = self.priors[level]
            d = down[idx]
            np.add.at(down, hi, d * p)
            np.add.at(down, lo, d * (1.0 - p))
            through1[level] = float(np.dot(d, up[hi]))
            through0[level] = float(np.dot(d, up[lo]))
            for child, weight in ((hi, p), (lo, 1.0 - p)):
                flow = d * weight * up[child]
                np.add.at(skip, np.full(len(idx), level + 1), flow)
                np.add.at(skip, np.minimum(var[child], n_levels), -flow)
        free = np.cumsum(skip)[:n_levels]
        tested = {level for level, _, _, _ in groups}
        for level, root_id in enumerate(self.order):
            if level not in tested:
                continue  # no node tests this root: the top does not depend on it
            failed[root_id] = float(through1[level] + free[level])
            working[root_id] = float(through0[level] + free[level])
        return failed, working
