"""Model -> Bayesian network: binary nodes, bounded fan-in, exact.

Roots are the basic events and the unlisted-cause events; gates are
deterministic nodes; checks and symptoms are noisy-OR (two outcomes) or
noisy-MAX (K outcomes) nodes over their causes with a false-alarm leak, as
:mod:`troubleshoot.engine.observation` says. Wide AND/OR gates become chains of nodes of at most
:data:`MAX_FANIN` inputs; an at-least-k gate becomes a Shannon decomposition
(x_i ? atleast(k-1, rest) : atleast(k, rest)) of three-input nodes; a wide
noisy-OR or noisy-MAX becomes a chain Y_j = max(Y_(j-1), what c_j shows), all exact, so
no table grows as 2^width.

Repairs are interventions. A finding made after the j-th repair (epoch j)
reads a copy of the gate logic in which the first j repaired roots are held
working; roots are shared by every epoch, so findings from before and after a
repair speak of the same components.

References
----------
J. Pearl, *Probabilistic Reasoning in Intelligent Systems*, 1988 (noisy-OR).
M. Henrion, "Some practical issues in constructing belief networks", UAI 1989 (leak).
D. Heckerman and J. Breese, "Causal independence for probability assessment
and inference using Bayesian networks", IEEE SMC 26(6), 1996 (exact
decomposition of noisy-OR).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import networkx as nx
import numpy as np

from troubleshoot.engine.observation import CheckFamily, check_family, max_table
from troubleshoot.model import DERIVED, Model
from troubleshoot.model.gates import AND, ATLEAST, NOT, OR, bottom_up, connective

__all__ = ["CheckFamily", "Network", "build_network", "MAX_FANIN"]

MAX_FANIN = 3

#: Node roles in the network.
ROOT, GATE, AUX, CHECK, CHECK_AUX = "root", "gate", "aux", "check", "check-aux"


@dataclass
class Network:
    """A Bayesian network built from a Model: binary event and gate nodes, K-state check nodes.

    Attributes
    ----------
    graph : networkx.DiGraph
        Node attributes: ``role``, ``parents`` (tuple, the table's axis
        order), ``table`` (numpy array with one axis per parent, of its
        number of states, then the node's own states:
        P(node | parents)), ``states`` (names).
    repairs : tuple of str
        The repaired roots, in order; epoch j sees the first j held working.
    families : dict
        (check id, epoch) -> CheckFamily, for every check and symptom at every epoch.
    gate_node : dict
        (gate or event id, epoch) -> the node id carrying it, or a bool constant.
    """

    model: Model
    repairs: tuple[str, ...]
    graph: nx.DiGraph = field(default_factory=nx.DiGraph)
    families: dict = field(default_factory=dict)
    gate_node: dict = field(default_factory=dict)

    @property
    def epochs(self) -> int:
        return len(self.repairs)

    def node_for(self, target: str, epoch: int) -> str | bool:
        """The network node (or constant) an event or gate id means at an epoch."""
        return self.gate_node[(target, epoch)]

    def inference_nodes(self) -> list[str]:
        """Nodes the join tree carries: everything but check nodes (absorbed as findings)."""
        return [n for n, r in self.graph.nodes(data="role") if r not in (CHECK, CHECK_AUX)]

    def relevant(self, past_targets) -> tuple[list[str], dict]:
        """The nodes and check families a join tree needs now; the rest is barren.

        Kept: every root, every gate at the current epoch, every check's
        family at the current epoch (to rank it), and for earlier epochs only
        what ``past_targets`` ((target id, epoch) pairs of findings made
        then) reads, each with all its ancestors. Leaving out an unobserved,
        unqueried part sums it to one, so nothing changes but the size.
        """
        model, now = self.model, self.epochs
        families = {key: fam for key, fam in self.families.items() if key[1] == now}
        wanted: set[str] = set(model.hypotheses)
        for gate in model.gates:
            node = self.gate_node.get((gate.id, now))
            if isinstance(node, str):
                wanted.add(node)
        for target, epoch in past_targets:
            if (target, epoch) in self.families:
                families[(target, epoch)] = self.families[(target, epoch)]
            else:
                node = self.gate_node.get((target, epoch))
                if isinstance(node, str):
                    wanted.add(node)
        for fam in families.values():
            wanted.update(fam.nodes)
        closure = set(wanted)
        stack = list(wanted)
        while stack:  # every ancestor, in one walk up the graph
            for parent in self.graph.nodes[stack.pop()]["parents"]:
                if parent not in closure:
                    closure.add(parent)
                    stack.append(parent)
        return [n for n in self.inference_nodes() if n in closure], families


def _deterministic_table(kind: str, arity: int) -> np.ndarray:
    """P(node | parents) for a deterministic function, shape (2,)*arity + (2,)."""
    bits = np.indices((2,) * arity).reshape(arity, -1).astype(bool) if arity else np.zeros((0, 1), bool)
    if kind == "and":
        value = bits.all(axis=0)
    elif kind == "or":
        value = bits.any(axis=0)
    elif kind == "not":
        value = ~bits[0]
    elif kind == "copy":
        value = bits[0]
    elif kind == "ite":  # parents (x, hi, lo): hi if x else lo
        value = np.where(bits[0], bits[1], bits[2])
    else:
        raise ValueError(kind)
    table = np.zeros((bits.shape[1], 2))
    table[np.arange(bits.shape[1]), value.astype(int)] = 1.0
    return table.reshape((2,) * arity + (2,))


class _Builder:
    def __init__(self, model: Model, repairs: tuple[str, ...], max_fanin: int):
        self.model = model
        self.net = Network(model=model, repairs=tuple(repairs))
        self.g = self.net.graph
        self.max_fanin = max_fanin
        self._depends: dict[str, frozenset] = {}
        self._tables: dict[tuple[str, int], np.ndarray] = {}  # one read-only table per (kind, arity)

    # -- nodes -----------------------------------------------------------
    def add_node(self, node_id, role, parents, table, label="", states=("ok", "failed")):
        assert node_id not in self.g, node_id
        self.g.add_node(node_id, role=role, parents=tuple(parents), table=table, label=label, states=states)
        for p in parents:
            self.g.add_edge(p, node_id)
        return node_id

    def det(self, node_id, kind, operands, role=AUX, label=""):
        key = (kind, len(operands))
        table = self._tables.get(key)
        if table is None:
            table = self._tables[key] = _deterministic_table(*key)
            table.setflags(write=False)
        return self.add_node(node_id, role, operands, table, label)

    def logic(self, name: str, kind: str, operands: list, named: bool) -> str | bool:
        """AND/OR over operands with constants folded and fan-in bounded.

        ``named``: the result must be a node called ``name`` (a model gate at
        epoch 0, so export and marginals find it by the model's id).
        """
        absorbing, neutral = (False, True) if kind == "and" else (True, False)
        ops: list[str] = []
        for op in operands:
            if op is absorbing:
                return self.constant(name, absorbing, named)
            if op is neutral:
                continue
            if op not in ops:
                ops.append(op)
        if not ops:
            return self.constant(name, neutral, named)
        if len(ops) == 1:
            return self.det(name, "copy", ops, GATE, self.model.label_of(name)) if named else ops[0]
        step = 0
        while len(ops) > self.max_fanin:
            step += 1
            head = self.det(f"{name}{DERIVED}{step}", kind, ops[: self.max_fanin])
            ops = [head] + ops[self.max_fanin :]
        return self.det(name, kind, ops, GATE if named else AUX, self.model.label_of(name.split(DERIVED)[0]))

    def constant(self, name: str, value: bool, named: bool) -> str | bool:
        if not named:
            return value
        table = np.array([0.0, 1.0]) if value else np.array([1.0, 0.0])
        return self.add_node(name, GATE, (), table, self.model.label_of(name))

    def atleast(self, name: str, k: int, operands: list, named: bool) -> str | bool:
        """k-of-n, exactly, in nodes of bounded fan-in.

        Constants fold first. A gate near OR or AND (k or n - k at most 3)
        becomes a Shannon decomposition into if-then-else nodes, whose join
        tree width grows with min(k, n - k); any other becomes a counter
        chain with the running count (saturated at k) in binary, whose width
        grows only with log2(k).
        """
        k -= sum(1 for op in operands if op is True)
        operands = [op for op in operands if not isinstance(op, bool)]
        if k <= 0 or k > len(operands):
            return self.constant(name, k <= 0, named)
        if min(k, len(operands) - k) <= 3:
            return self._atleast_shannon(name, k, operands, named)
        return self._atleast_counter(name, k, operands, named)

    def _atleast_counter(self, name: str, k: int, operands: list, named: bool) -> str:
        """Stage i holds min(count of failed among the first i inputs, k) in binary."""
        prev = [operands[0]]  # stage 1: the count is the first input itself
        for i, x in enumerate(operands[1:], start=2):
            bits_prev = len(prev)
            cap_here = min(i, k)
            bits_here = cap_here.bit_length()
            cap_prev = min(i - 1, k)
            # Every (prev bits, x) combination: the new saturated count.
            combos = np.indices((2,) * (bits_prev + 1)).reshape(bits_prev + 1, -1)
            weights = 1 << np.arange(bits_prev - 1, -1, -1)
            value_prev = np.minimum((combos[:bits_prev] * weights[:, None]).sum(axis=0), cap_prev)
            value = np.minimum(value_prev + combos[bits_prev], k)
            stage = []
            for j in range(bits_here):
                bit = (value >> (bits_here - 1 - j)) & 1
                table = np.zeros((combos.shape[1], 2))
                table[np.arange(combos.shape[1]), bit] = 1.0
                node = self.add_node(f"{name}{DERIVED}c{i}_{j}", AUX, prev + [x],
                                     table.reshape((2,) * (bits_prev + 1) + (2,)))
                stage.append(node)
            prev = stage
        # The gate: the saturated count has reached k.
        bits = len(prev)
        combos = np.indices((2,) * bits).reshape(bits, -1)
        value = (combos * (1 << np.arange(bits - 1, -1, -1))[:, None]).sum(axis=0) >= k
        table = np.zeros((combos.shape[1], 2))
        table[np.arange(combos.shape[1]), value.astype(int)] = 1.0
        node_id = name if named else f"{name}{DERIVED}c"
        return self.add_node(node_id, GATE if named else AUX, prev, table.reshape((2,) * bits + (2,)),
                             self.model.label_of(name.split(DERIVED)[0]))

    def _atleast_shannon(self, name: str, k: int, operands: list, named: bool) -> str | bool:
        """x_i ? atleast(k-1, rest) : atleast(k, rest), as three-input nodes.

        The sub-problems (need, i) are solved with an explicit stack, children
        before parents, so k and n are limited by memory, not by recursion.
        """
        memo: dict = {}
        n = len(operands)

        def known(need: int, i: int):
            if need <= 0:
                return True
            if n - i < need:
                return False
            return memo.get((need, i))

        stack = [(k, 0)]
        while stack:
            need, i = stack[-1]
            if known(need, i) is not None:
                stack.pop()
                continue
            hi, lo = known(need - 1, i + 1), known(need, i + 1)
            if hi is None or lo is None:
                if hi is None:
                    stack.append((need - 1, i + 1))
                if lo is None:
                    stack.append((need, i + 1))
                continue
            stack.pop()
            x = operands[i]
            if x is True:
                result = hi
            elif x is False:
                result = lo
            elif hi == lo:
                result = hi
            elif hi is True and lo is False:
                result = x
            elif hi is True:
                result = self.logic(f"{name}{DERIVED}k{need}_{i}", "or", [x, lo], False)
            elif lo is False:
                result = self.logic(f"{name}{DERIVED}k{need}_{i}", "and", [x, hi], False)
            else:
                result = self.det(f"{name}{DERIVED}k{need}_{i}", "ite", [x, hi, lo])
            memo[(need, i)] = result

        result = known(k, 0)
        if not named:
            return result
        if isinstance(result, bool):
            return self.constant(name, result, True)
        if isinstance(result, str) and result.startswith(f"{name}{DERIVED}k"):
            self._rename(result, name)
            self.g.nodes[name]["role"] = GATE
            self.g.nodes[name]["label"] = self.model.label_of(name)
            return name
        return self.det(name, "copy", [result], GATE, self.model.label_of(name))

    def _rename(self, old: str, new: str):
        """Rename a node in place, as networkx.relabel_nodes(copy=False) does, in time of its degree.

        (relabel_nodes scans the whole graph per call: quadratic over a
        large tree's voting gates.)
        """
        g = self.g
        preds, succs = list(g.predecessors(old)), list(g.successors(old))
        g.add_node(new, **g.nodes[old])
        g.add_edges_from((p, new) for p in preds)
        g.add_edges_from((new, c) for c in succs)
        g.remove_node(old)
        self._relabel_parents(old, new)

    def _relabel_parents(self, old: str, new: str):
        for child in self.g.successors(new):
            parents = self.g.nodes[child]["parents"]
            self.g.nodes[child]["parents"] = tuple(new if p == old else p for p in parents)

    # -- the model -------------------------------------------------------
    def depends_on(self, node_id: str) -> frozenset:
        """Roots a gate or event reads, transitively (gates visited children first)."""
        if node_id in self._depends:
            return self._depends[node_id]
        gates = self.model.gate_by_id
        if node_id not in gates:
            return frozenset([node_id])
        for gate_id in bottom_up(self.model, [node_id], skip=self._depends.__contains__):
            operands = connective(gates[gate_id]).operands
            self._depends[gate_id] = frozenset().union(
                *(self._depends[x] if x in gates else frozenset([x]) for x in operands))
        return self._depends[node_id]

    def gate_at(self, gate_id: str, epoch: int) -> str | bool:
        """The node (or constant) carrying a gate or root at an epoch, built if new.

        The gates under it are built first, children before parents, with an
        explicit stack (:func:`~troubleshoot.model.gates.bottom_up`).
        """
        key = (gate_id, epoch)
        if key in self.net.gate_node:
            return self.net.gate_node[key]
        if gate_id in self.model.gate_by_id:
            built = self.net.gate_node
            for below in bottom_up(self.model, [gate_id], skip=lambda g: (g, epoch) in built):
                self._build(below, epoch)
        else:
            self._build(gate_id, epoch)
        return self.net.gate_node[key]

    def _operand(self, node_id: str, epoch: int) -> str | bool:
        """An operand already built at this epoch (a root is looked up or held working)."""
        key = (node_id, epoch)
        if key not in self.net.gate_node:
            self._build(node_id, epoch)  # a root: no operands of its own
        return self.net.gate_node[key]

    def _build(self, gate_id: str, epoch: int) -> None:
        """Build one gate or root at an epoch; the gates it reads are built already."""
        repaired = set(self.net.repairs[:epoch])
        if epoch > 0 and not (self.depends_on(gate_id) & repaired):
            result = self.gate_at(gate_id, 0)
        elif gate_id not in self.model.gate_by_id:  # a root
            result = False if gate_id in repaired else gate_id
        else:
            conn = connective(self.model.gate_by_id[gate_id])
            name = gate_id if epoch == 0 else f"{gate_id}{DERIVED}r{epoch}"
            operands = [self._operand(x, epoch) for x in conn.operands]
            named = epoch == 0
            if conn.op in (AND, OR):
                result = self.logic(name, conn.op, operands, named)
            elif conn.op == ATLEAST:
                result = self.atleast(name, conn.threshold(), operands, named)
            elif conn.op == NOT:
                (op,) = operands
                if isinstance(op, bool):
                    result = self.constant(name, not op, named) if named else (not op)
                else:
                    result = self.det(name, "not", [op], GATE if named else AUX, self.model.label_of(gate_id))
            else:  # pragma: no cover - connective() knows no other
                raise ValueError(f"unknown connective {conn.op!r}")
        self.net.gate_node[(gate_id, epoch)] = result

    def family(self, check, epoch: int) -> CheckFamily:
        return check_family(check, epoch, lambda target: self.gate_at(target, epoch))

    def check_node(self, check):
        """The check as a noisy-MAX node over its epoch-0 causes (for export).

        A check with more causes than the fan-in becomes a chain: the first
        link reads the leak and the first causes, each next link the
        previous one and the next causes, Y_j = max(Y_(j-1), chunk j).
        """
        fam = self.net.families[(check.id, 0)]
        states = tuple(check.outcomes)
        positions = list(range(len(fam.nodes)))
        prev, step = None, 0
        while True:
            take = self.max_fanin if prev is None else self.max_fanin - 1
            chunk, positions = positions[:take], positions[take:]
            step += 1
            last = not positions
            name = check.id if last else f"{check.id}{DERIVED}{step}"
            parents = ([prev] if prev else []) + [fam.nodes[i] for i in chunk]
            table = max_table(fam, chunk, with_leak=prev is None, with_previous=prev is not None)
            self.add_node(name, CHECK if last else CHECK_AUX, parents, table,
                          check.label if last else "", states)
            if last:
                return
            prev = name


def build_network(model: Model, repairs: tuple[str, ...] = (), max_fanin: int = MAX_FANIN,
                  with_checks: bool = True) -> Network:
    """Convert a Model into a binary Bayesian network.

    Parameters
    ----------
    model : Model
        A validated model.
    repairs : tuple of str
        Roots repaired so far, in order; epoch copies of the gate logic are
        added for the gates each repair affects.
    max_fanin : int
        Largest number of parents of a gate node (at least 2; at-least-k
        nodes have 3).
    with_checks : bool
        Also add the check and symptom nodes (the inference absorbs findings
        directly, so it does not need them; export does).

    Returns
    -------
    Network

    References
    ----------
    NUREG-0492 (gate semantics); Pearl 1988, Henrion 1989 and Díez 1993 (noisy-OR and
    noisy-MAX with leak).
    """
    if max_fanin < 3:
        raise ValueError("max_fanin must be at least 3")
    b = _Builder(model, repairs, max_fanin)
    for root in model.hypotheses:
        p = model.prior_of(root)
        b.add_node(root, ROOT, (), np.array([1.0 - p, p]), model.label_of(root))
        b.net.gate_node[(root, 0)] = root
    for gate in model.gates:
        b.gate_at(gate.id, 0)
    for epoch in range(1, len(repairs) + 1):
        for gate in model.gates:
            b.gate_at(gate.id, epoch)
        for root in model.hypotheses:
            b.gate_at(root, epoch)
    for check in model.checks + model.symptoms:
        for epoch in range(len(repairs) + 1):
            b.net.families[(check.id, epoch)] = b.family(check, epoch)
    if with_checks:
        for check in model.checks + model.symptoms:
            b.check_node(check)
    return b.net
