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

import sys
from collections.abc import Callable
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np

from troubleshoot.errors import TroubleshootError
from troubleshoot.model import Model, unlisted_id

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


@contextmanager
def deep_recursion(depth: int):
    """Let the recursive diagram operations go ``depth`` frames deep, then restore.

    The apply operations recurse once per variable level, so a tree with many
    root events needs more than Python's default of 1000 frames.
    """
    previous = sys.getrecursionlimit()
    if depth > previous:
        sys.setrecursionlimit(depth)
    try:
        yield
    finally:
        sys.setrecursionlimit(previous)


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
    order: list[str] = []
    seen: set[str] = set()
    stack = [model.top]
    gates = model.gate_by_id
    while stack:
        node = stack.pop()
        if node in seen:
            continue
        seen.add(node)
        gate = gates.get(node)
        if gate is None:
            order.append(node)
            continue
        children = list(gate.operands)
        if gate.unlisted is not None:
            children.append(unlisted_id(gate.id))
        # Pushed in reverse so the first operand is visited first.
        stack.extend(reversed(children))
    return tuple(order)


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

    def and_(self, f: int, g: int) -> int:
        """Conjunction of two functions (Bryant's apply)."""
        if f == FALSE or g == FALSE:
            return FALSE
        if f == TRUE:
            return g
        if g == TRUE or f == g:
            return f
        if f > g:
            f, g = g, f
        key = (f, g)
        found = self._and_cache.get(key)
        if found is not None:
            return found
        vf, vg = self.var[f], self.var[g]
        if vf == vg:
            result = self.node(vf, self.and_(self.low[f], self.low[g]), self.and_(self.high[f], self.high[g]))
        elif vf < vg:
            result = self.node(vf, self.and_(self.low[f], g), self.and_(self.high[f], g))
        else:
            result = self.node(vg, self.and_(f, self.low[g]), self.and_(f, self.high[g]))
        self._and_cache[key] = result
        return result

    def or_(self, f: int, g: int) -> int:
        """Disjunction of two functions (Bryant's apply)."""
        if f == TRUE or g == TRUE:
            return TRUE
        if f == FALSE:
            return g
        if g == FALSE or f == g:
            return f
        if f > g:
            f, g = g, f
        key = (f, g)
        found = self._or_cache.get(key)
        if found is not None:
            return found
        vf, vg = self.var[f], self.var[g]
        if vf == vg:
            result = self.node(vf, self.or_(self.low[f], self.low[g]), self.or_(self.high[f], self.high[g]))
        elif vf < vg:
            result = self.node(vf, self.or_(self.low[f], g), self.or_(self.high[f], g))
        else:
            result = self.node(vg, self.or_(f, self.low[g]), self.or_(f, self.high[g]))
        self._or_cache[key] = result
        return result

    def not_(self, f: int) -> int:
        """Negation of a function."""
        found = self._not_cache.get(f)
        if found is not None:
            return found
        result = self.node(self.var[f], self.not_(self.low[f]), self.not_(self.high[f]))
        self._not_cache[f] = result
        return result

    def at_least(self, k: int, operands: list[int]) -> int:
        """At least ``k`` of the operand functions hold (a voting gate).

        Built by the counting recursion S_j <- S_j OR (f_i AND S_(j-1)), so the
        work grows as k times the number of operands, never as 2^n.
        """
        if k <= 0:
            return TRUE
        if k > len(operands):
            return FALSE
        at_least_j = [TRUE] + [FALSE] * k
        for i, f in enumerate(operands, start=1):
            for j in range(min(i, k), 0, -1):
                at_least_j[j] = self.or_(at_least_j[j], self.and_(f, at_least_j[j - 1]))
        return at_least_j[k]

    def reachable(self, root: int) -> list[int]:
        """Internal nodes reachable from ``root``, in increasing id (bottom-up) order."""
        seen = set()
        stack = [root]
        while stack:
            n = stack.pop()
            if n <= TRUE or n in seen:
                continue
            seen.add(n)
            stack.append(self.low[n])
            stack.append(self.high[n])
        return sorted(seen)

    def is_monotone(self, root: int) -> bool:
        """True when the function never goes from failed to working as a root fails.

        A function is monotone (the tree is coherent) exactly when at every
        node the low branch implies the high branch: low AND NOT high = FALSE.
        """
        implies: dict[tuple[int, int], bool] = {}

        def low_implies_high(f: int, g: int) -> bool:
            # Does f imply g?  Same recursion as apply, without building nodes.
            if f == FALSE or g == TRUE or f == g:
                return True
            if f == TRUE and g == FALSE:
                return False
            key = (f, g)
            found = implies.get(key)
            if found is not None:
                return found
            vf, vg = self.var[f], self.var[g]
            v = min(vf, vg)
            f0, f1 = (self.low[f], self.high[f]) if vf == v else (f, f)
            g0, g1 = (self.low[g], self.high[g]) if vg == v else (g, g)
            result = low_implies_high(f0, g0) and low_implies_high(f1, g1)
            implies[key] = result
            return result

        with deep_recursion(4 * self.n_vars + 1000):
            return all(low_implies_high(self.low[n], self.high[n]) for n in self.reachable(root))


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
        built once. ``inhibit`` is its input AND its condition; an OR gate's
        unlisted causes are one more input.

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

        # Post-order over the gates under the top, without Python recursion.
        post_order: list[str] = []
        visited: set[str] = set()
        stack: list[tuple[str, bool]] = [(model.top, False)]
        while stack:
            node, expanded = stack.pop()
            if node not in gates:
                continue
            if expanded:
                post_order.append(node)
                continue
            if node in visited:
                continue
            visited.add(node)
            stack.append((node, True))
            for child in reversed(gates[node].operands):
                if child in gates and child not in visited:
                    stack.append((child, False))

        def operand_function(node_id: str) -> int:
            if node_id in gates:
                return function[node_id]
            return diagram.variable(level_of[node_id])

        with deep_recursion(4 * len(order) + 1000):
            if model.top not in gates:
                function[model.top] = diagram.variable(level_of[model.top])
            for done, gate_id in enumerate(post_order, start=1):
                gate = gates[gate_id]
                inputs = [operand_function(i) for i in gate.inputs]
                if gate.kind == "and":
                    f = TRUE
                    for g in inputs:
                        f = diagram.and_(f, g)
                elif gate.kind == "or":
                    f = FALSE
                    for g in inputs:
                        f = diagram.or_(f, g)
                elif gate.kind == "atleast":
                    f = diagram.at_least(int(gate.k or 0), inputs)
                elif gate.kind == "not":
                    has_not = True
                    f = diagram.not_(inputs[0])
                elif gate.kind == "inhibit":
                    f = TRUE
                    for g in inputs:
                        f = diagram.and_(f, g)
                    if gate.condition is not None:
                        f = diagram.and_(f, operand_function(gate.condition))
                else:  # pragma: no cover - validate_model rejects other kinds
                    raise ValueError(f"unknown gate kind {gate.kind!r}")
                if gate.unlisted is not None:
                    f = diagram.or_(f, diagram.variable(level_of[unlisted_id(gate.id)]))
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
