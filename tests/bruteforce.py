"""Reference semantics by brute-force enumeration over every root state.

Independent of the engine: it never builds a network or a join tree. It
enumerates all 2^n joint states of the root events (basic events and
unlisted-cause events), evaluates every gate directly from the model for each
repair epoch, and weighs each state by its prior times the likelihood of the
findings. Small models only (n up to about 16).

Semantics it encodes (the contract the engine must meet):
- roots are independent with their priors;
- a gate is a deterministic function of its operands, looked up in a truth
  table per gate kind written from faulttrees/FORMAT.md ("occurs when");
  an OR gate with unlisted causes also reads its unlisted-cause root;
- a finding made after the j-th repair (epoch j) sees the equipment with the
  first j repaired roots working, all other roots as they were;
- a check (faulttrees/FORMAT.md, "checks with more than two outcomes"):
  each present cause independently produces one abnormal outcome with the
  probability it gives for it, or nothing; the false alarm does the same
  whatever the causes; the check shows, of the outcomes produced, the one
  listed last, and the normal outcome when none is produced. With two
  outcomes that is P(abnormal) = 1 - (1 - false_alarm) * prod over causes
  present (1 - detection). Enumerated here over every combination of what
  each source produces, never through cumulative probabilities;
- a finding on an event or gate id is an exact observation (0 ok, 1 failed).
"""

from __future__ import annotations

import functools
import itertools
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


# ---------------------------------------------------------------- gates
# One truth table per gate kind, written from faulttrees/FORMAT.md, section
# "Gates", column "occurs when" (never from the product's code). Each rule
# takes the tuple of its operands' values (True = occurs) in the order
# `gate_operands` lists them and says whether the gate occurs.

#: <and-gate>: "all inputs occur".
def _and_rule(values, gate):
    return all(values)


#: <or-gate>: "any input occurs"; with unlisted-causes="p" the gate also occurs
#: "through causes outside the model", the unlisted-cause root, listed last.
def _or_rule(values, gate):
    return any(values)


#: <atleast-gate k="2">: "at least k of the inputs occur".
def _atleast_rule(values, gate):
    return sum(values) >= gate.k


#: <not-gate>: "the input does not occur" (exactly one input).
def _not_rule(values, gate):
    (value,) = values
    return not value


#: <inhibit-gate>: "the input occurs while the condition event holds"
#: (one input, then the condition, listed last).
def _inhibit_rule(values, gate):
    value, condition = values
    return value and condition


GATE_RULES = {"and": _and_rule, "or": _or_rule, "atleast": _atleast_rule, "not": _not_rule,
              "inhibit": _inhibit_rule}


def gate_operands(gate) -> tuple[str, ...]:
    """What a gate reads, from FORMAT.md: its inputs, the INHIBIT condition, the OR unlisted-cause root."""
    operands = tuple(gate.inputs)
    if gate.kind == "inhibit":
        operands += (gate.condition,)
    if gate.kind == "or" and gate.unlisted is not None:
        operands += (unlisted_id(gate.id),)
    return operands


@functools.cache
def truth_table(gate) -> np.ndarray:
    """The gate's value for every combination of its operands, row b = sum_i value_i * 2^i."""
    m = len(gate_operands(gate))
    rule = GATE_RULES[gate.kind]
    return np.array([bool(rule(tuple(bool(code >> i & 1) for i in range(m)), gate)) for code in range(2**m)])


def evaluate(model: Model, states: np.ndarray, roots: list[str], repaired: set[str]) -> dict:
    """Value of every root and gate for each state row, given repaired roots.

    A repaired root is working. Each gate is looked up in its truth table
    (:func:`truth_table`) once all its operands have values; the gates are
    swept until none is left, so no order and no recursion is needed.
    """
    value: dict[str, np.ndarray] = {}
    for i, r in enumerate(roots):
        value[r] = np.zeros(len(states), bool) if r in repaired else states[:, i]
    pending = list(model.gates)
    while pending:
        waiting = []
        for gate in pending:
            operands = gate_operands(gate)
            if not all(x in value for x in operands):
                waiting.append(gate)
                continue
            code = np.zeros(len(states), dtype=np.int64)
            for i, x in enumerate(operands):
                code |= value[x].astype(np.int64) << i
            value[gate.id] = truth_table(gate)[code]
        if len(waiting) == len(pending):
            raise ValueError("the gates form a cycle")
        pending = waiting
    return value


def likelihood(model: Model, values_by_epoch: list[dict], finding) -> np.ndarray:
    """P(finding | root state) for each state row."""
    value = values_by_epoch[finding.epoch]
    if finding.target in model.check_by_id:
        return outcome_table(model.check_by_id[finding.target], value)[:, finding.outcome]
    return (value[finding.target] == bool(finding.outcome)).astype(float)


def _produces(check, pairs, total) -> list[tuple[int, float]]:
    """(outcome index, probability) of what one source produces; index 0 is "nothing"."""
    if pairs:
        out = [(check.outcomes.index(name), p) for name, p in pairs]
    else:  # a two-outcome check with one number
        out = [(1, total)]
    return [(0, 1.0 - sum(p for _, p in out))] + out


def outcome_table(check, value: dict) -> np.ndarray:
    """P(outcome | root state), shape (rows, K), by enumerating what every source produces."""
    rows = len(next(iter(value.values())))
    sources = [(_produces(check, check.leak, check.false_alarm), np.ones(rows, bool))]
    sources += [(_produces(check, c.shows, c.detection), value[c.target]) for c in check.causes]
    table = np.zeros((rows, len(check.outcomes)))
    for combo in itertools.product(*(options for options, _ in sources)):
        p = np.ones(rows)
        shown = np.zeros(rows, dtype=int)
        for (index, q), (_, present) in zip(combo, sources):
            # An absent cause produces nothing, surely.
            p = p * np.where(present, q, 1.0 if index == 0 else 0.0)
            # Outcomes are listed normal first, then weakest to strongest: the largest index shows.
            shown = np.maximum(shown, np.where(present, index, 0))
        np.add.at(table, (np.arange(rows), shown), p)
    return table


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
    table = np.stack([likelihood(model, post["values"], SimpleNamespace(target=check_id, outcome=o,
                                                                         epoch=len(repairs)))
                      for o in range(len(model.check_by_id[check_id].outcomes))], axis=1)
    # I(F;T) = H(T) - H(T|F) (Cover & Thomas 2006), over every outcome.
    with np.errstate(divide="ignore", invalid="ignore"):
        h_rows = -np.where(table > 0, table * np.log2(np.where(table > 0, table, 1.0)), 0.0).sum(axis=1)
    h_t_given_f = float(joint @ h_rows)
    return entropy_bits(joint @ table) - h_t_given_f


def noise_free_outcome(check, present) -> int:
    """The outcome index a check reads when every present cause shows its most likely reading.

    ``present(target)`` says whether a cause is present. Each present cause
    gives its most likely abnormal outcome (the later listed on a tie); of
    those, the check reads the one listed last (faulttrees/FORMAT.md); none,
    the normal outcome (index 0).
    """
    shown = 0
    for cause in check.causes:
        if present(cause.target):
            gives = [(p, check.outcomes.index(name)) for name, p in cause.shows] or [(cause.detection, 1)]
            shown = max(shown, max(gives)[1])
    return shown
