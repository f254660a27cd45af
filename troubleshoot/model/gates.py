"""The fault tree's logic evaluated directly: every gate's value for given root states.

Used where the whole joint state is at hand (the exact optimal policy over
every root state, a simulated unit's true state), not by the inference,
which never enumerates. Gate semantics as in NUREG-0492; an OR gate with
unlisted causes also reads its unlisted-cause root.
"""

from __future__ import annotations

import numpy as np

from troubleshoot.model import Model, unlisted_id


def gate_values(model: Model, roots: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Failed (True) or not of every root and gate, one entry per state row.

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

    def of(node: str) -> np.ndarray:
        if node in value:
            return value[node]
        gate = model.gate_by_id[node]
        ins = [of(x) for x in gate.inputs]
        if gate.kind == "and":
            v = np.logical_and.reduce(ins)
        elif gate.kind == "or":
            v = np.logical_or.reduce(ins)
            if gate.unlisted is not None:
                v = v | of(unlisted_id(gate.id))
        elif gate.kind == "atleast":
            v = np.sum(ins, axis=0) >= gate.k
        elif gate.kind == "not":
            v = ~ins[0]
        elif gate.kind == "inhibit":
            v = ins[0] & of(gate.condition)
        else:
            raise ValueError(f"unknown gate kind {gate.kind!r}")
        value[node] = v
        return v

    for g in model.gates:
        of(g.id)
    return value
