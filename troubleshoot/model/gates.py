"""Gate semantics, once: what each gate kind computes, and the order to compute gates in.

Every gate kind of the model format is one of four connectives over the
events and gates it reads:

========== ============ =============================================
kind       connective   operands
========== ============ =============================================
``and``    AND          its inputs
``or``     OR           its inputs, then its unlisted-cause root (if any)
``atleast`` AT-LEAST-k  its inputs
``not``    NOT          its one input
``inhibit`` AND         its one input, then its condition
========== ============ =============================================

The network builder (:mod:`troubleshoot.engine.network`), the decision
diagrams (:mod:`troubleshoot.analysis.bdd`) and the whole-state evaluator
:func:`gate_values` read a gate only through :func:`connective`, so the
meaning of a kind is written here and nowhere else. Gates are visited in
:func:`bottom_up` order, an explicit-stack walk, so a tree's depth is limited
by memory only, never by Python's recursion limit.

References
----------
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981, chapter IV (AND, OR,
k-out-of-n voting, INHIBIT gates); chapter VI (NOT in non-coherent trees).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass

import numpy as np

from troubleshoot.model.types import Gate, Model, unlisted_id

#: The connectives every gate kind reduces to.
AND, OR, ATLEAST, NOT = "and", "or", "atleast", "not"


@dataclass(frozen=True)
class Connective:
    """What a gate computes: ``op`` over ``operands`` (``k`` for AT-LEAST-k).

    Each connective is a threshold on the number of failed operands: AND
    needs all of them, OR one, AT-LEAST-k ``k``; NOT is the negation of its
    single operand. :meth:`threshold` and :attr:`negated` say so.
    """

    op: str
    operands: tuple[str, ...]
    k: int | None = None

    @property
    def negated(self) -> bool:
        """True for NOT: the gate occurs when its operand does not."""
        return self.op == NOT

    def threshold(self) -> int:
        """Failed operands needed (before negation): n for AND, 1 for OR and NOT, k for AT-LEAST-k."""
        if self.op == AND:
            return len(self.operands)
        if self.op == ATLEAST:
            return int(self.k or 0)
        return 1


def connective(gate: Gate) -> Connective:
    """The connective a gate computes, with every operand it reads.

    Parameters
    ----------
    gate : Gate
        A gate of a validated model.

    Returns
    -------
    Connective
        OR reads its unlisted-cause root last; INHIBIT is the AND of its input
        and its condition.

    Raises
    ------
    ValueError
        For a kind that is not a gate kind of the format.
    """
    if gate.kind == "and":
        return Connective(AND, tuple(gate.inputs))
    if gate.kind == "or":
        extra = (unlisted_id(gate.id),) if gate.unlisted is not None else ()
        return Connective(OR, tuple(gate.inputs) + extra)
    if gate.kind == "atleast":
        return Connective(ATLEAST, tuple(gate.inputs), gate.k)
    if gate.kind == "not":
        return Connective(NOT, tuple(gate.inputs))
    if gate.kind == "inhibit":
        return Connective(AND, tuple(gate.inputs) + ((gate.condition,) if gate.condition else ()))
    raise ValueError(f"unknown gate kind {gate.kind!r}")


def bottom_up(model: Model, start: Iterable[str] | None = None,
              skip: Callable[[str], bool] | None = None) -> list[str]:
    """Gate ids, every gate after all the gates it reads (children first).

    Parameters
    ----------
    model : Model
        A model whose gates form no cycle (validated).
    start : iterable of str, optional
        Visit only the gates under these ids (gate or event ids); default
        every gate of the model, in file order where the order is free.
    skip : callable, optional
        ``skip(gate_id)`` true for a gate already dealt with: it is neither
        listed nor entered (so repeated calls cost only the new part).

    Returns
    -------
    list of str
        A post-order of the gates reached, computed with an explicit stack.
    """
    gates = model.gate_by_id
    seeds = [g.id for g in model.gates] if start is None else list(start)
    order: list[str] = []
    done: set[str] = set()
    if skip is not None:
        done = _Skipped(skip)
    for seed in seeds:
        if seed not in gates or seed in done:
            continue
        stack: list[tuple[str, int]] = [(seed, 0)]
        on_path = {seed}
        while stack:
            node, i = stack[-1]
            operands = connective(gates[node]).operands
            while i < len(operands) and (operands[i] not in gates or operands[i] in done
                                         or operands[i] in on_path):
                i += 1
            if i < len(operands):
                stack[-1] = (node, i + 1)
                stack.append((operands[i], 0))
                on_path.add(operands[i])
                continue
            stack.pop()
            on_path.discard(node)
            done.add(node)
            order.append(node)
    return order


class _Skipped(set):
    """The visited set of :func:`bottom_up`, also holding every gate ``skip`` accepts."""

    def __init__(self, skip: Callable[[str], bool]):
        super().__init__()
        self.skip = skip

    def __contains__(self, item: object) -> bool:
        return super().__contains__(item) or self.skip(item)  # type: ignore[arg-type]


def depth_first_roots(model: Model) -> tuple[str, ...]:
    """The root events under the top, depth-first and left-most first, each once.

    A gate's operands are visited in file order (the inhibit condition last),
    then its unlisted-cause event; an explicit stack, so depth is limited by
    memory. Decision diagrams use it as their variable order: it keeps the
    events of one subtree together.

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
        # Pushed in reverse so the first operand is visited first.
        stack.extend(reversed(connective(gate).operands))
    return tuple(order)


def evaluate(conn: Connective, values: list[np.ndarray]) -> np.ndarray:
    """Failed (True) or not of a connective, from its operands' bool arrays (same shape)."""
    count = np.sum(values, axis=0) if values else np.zeros((), dtype=np.int64)
    occurs = count >= conn.threshold()
    return ~occurs if conn.negated else occurs


def gate_values(model: Model, roots: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Failed (True) or not of every root and gate, one entry per state row.

    Used where the whole joint state is at hand (the exact optimal policy over
    every root state, a simulated unit's true state); the inference never
    enumerates.

    Parameters
    ----------
    model : Model
    roots : dict
        Root id (every hypothesis) -> bool array, one value per state row.

    Returns
    -------
    dict
        The roots as given, and every gate id -> bool array.
    """
    value = dict(roots)
    for gate_id in bottom_up(model):
        conn = connective(model.gate_by_id[gate_id])
        value[gate_id] = evaluate(conn, [value[x] for x in conn.operands])
    return value
