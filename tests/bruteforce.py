"""Reference semantics by brute-force enumeration over every root state.

Independent of the engine: it never builds a network or a join tree. It
enumerates all 2^n joint states of the root events (basic events and
unlisted-cause events), evaluates every gate directly from the model for each
repair epoch, and weighs each state by its prior times the likelihood of the
findings. Small models only (n up to about 16).

Semantics it encodes (the contract the engine must meet):
- roots are independent with their priors;
- a gate is a deterministic function of its operands; an OR gate with
  unlisted causes also reads its unlisted-cause root;
- a finding made after the j-th repair (epoch j) sees the equipment with the
  first j repaired roots working, all other roots as they were;
- a check's abnormal outcome has probability
  1 - (1 - false_alarm) * prod over causes present (1 - detection);
- a finding on an event or gate id is an exact observation (0 ok, 1 failed).
"""

from __future__ import annotations

import math

import numpy as np

from troubleshoot.model import Model, unlisted_id


def root_states(model: Model) -> tuple[list[str], np.ndarray, np.ndarray]:
    """Every joint root state as rows of a bool matrix, with its prior weight."""
    roots = list(model.hypotheses)
    n = len(roots)
    codes = np.arange(2**n, dtype=np.int64)
    states = ((codes[:, None] >> np.arange(n)) & 1).astype(bool)
    priors = np.array([model.prior_of(r) for r in roots])
    weight = np.prod(np.where(states, priors, 1.0 - priors), axis=1)
    return roots, states, weight


def evaluate(model: Model, states: np.ndarray, roots: list[str], repaired: set[str]) -> dict:
    """Value of every root and gate for each state row, given repaired roots."""
    value: dict[str, np.ndarray] = {}
    for i, r in enumerate(roots):
        value[r] = np.zeros(len(states), bool) if r in repaired else states[:, i]

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
            raise ValueError(gate.kind)
        value[node] = v
        return v

    for g in model.gates:
        of(g.id)
    return value


def likelihood(model: Model, values_by_epoch: list[dict], finding) -> np.ndarray:
    """P(finding | root state) for each state row."""
    value = values_by_epoch[finding.epoch]
    if finding.target in model.check_by_id:
        check = model.check_by_id[finding.target]
        p_normal = np.full(len(next(iter(value.values()))), 1.0 - check.false_alarm)
        for cause in check.causes:
            p_normal = p_normal * np.where(value[cause.target], 1.0 - cause.detection, 1.0)
        return p_normal if finding.outcome == 0 else 1.0 - p_normal
    return (value[finding.target] == bool(finding.outcome)).astype(float)


def posterior(model: Model, findings, repairs=()):
    """Exact log P(findings), P(failed | findings) of every root and gate, and the joint.

    Returns
    -------
    dict with keys ``log_p``, ``marginals`` (gates at the last epoch),
    ``joint`` (posterior over root-state rows), ``states``, ``roots``,
    ``values`` (list per epoch), ``weight`` (prior per row).
    """
    roots, states, weight = root_states(model)
    epochs = len(repairs)
    values = [evaluate(model, states, roots, set(repairs[:j])) for j in range(epochs + 1)]
    w = weight.copy()
    for f in findings:
        w = w * likelihood(model, values, f)
    total = w.sum()
    if total <= 0:
        return {"log_p": -math.inf, "marginals": None, "joint": None}
    joint = w / total
    marginals = {}
    for i, r in enumerate(roots):
        marginals[r] = float(joint[states[:, i]].sum())
    for g in model.gates:
        marginals[g.id] = float(joint[values[epochs][g.id]].sum())
    return {
        "log_p": math.log(total),
        "marginals": marginals,
        "joint": joint,
        "states": states,
        "roots": roots,
        "values": values,
        "weight": weight,
    }


def entropy_bits(p: np.ndarray) -> float:
    p = p[p > 0]
    return float(-(p * np.log2(p)).sum())


def check_information_bits(model: Model, findings, repairs, check_id: str) -> float:
    """I(F; T | findings) in bits for the check done now (after every repair), by enumeration."""
    from types import SimpleNamespace

    post = posterior(model, findings, repairs)
    joint = post["joint"]
    f = SimpleNamespace(target=check_id, outcome=1, epoch=len(repairs))
    p_abn = likelihood(model, post["values"], f)
    h_t_given_f = float(np.sum(joint * _h2(p_abn)))
    p_t = float(np.sum(joint * p_abn))
    return float(_h2(np.array([p_t]))[0]) - h_t_given_f


def _h2(p: np.ndarray) -> np.ndarray:
    p = np.clip(p, 0.0, 1.0)
    out = np.zeros_like(p, dtype=float)
    m = (p > 0) & (p < 1)
    q = p[m]
    out[m] = -(q * np.log2(q) + (1 - q) * np.log2(1 - q))
    return out
