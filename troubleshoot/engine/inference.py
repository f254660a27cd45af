"""Exact posteriors for a model: findings in, every marginal and check family out.

:class:`Engine` compiles one join tree per set of repairs (cached: findings
never recompile it) and turns findings into likelihoods. A finding on a check
or symptom multiplies P(outcome | causes) (noisy-OR with leak) onto the clique
that holds the check's causes; a finding on an event or gate id is an exact
observation of it. A finding carries its epoch, the number of repairs made
before it, so it reads the gate logic as it was when the finding was made.

References
----------
Lauritzen & Spiegelhalter 1988 (join tree); Pearl 1988 (noisy-OR).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from troubleshoot.errors import ImpossibleFindings, SessionError
from troubleshoot.engine.jointree import DEFAULT_MEMORY_BUDGET, Evidence, JoinTree, ZeroProbability, gc_paused
from troubleshoot.model import Model
from troubleshoot.engine.network import CheckFamily, Network, build_network


@dataclass(frozen=True)
class Finding:
    """One observation.

    Parameters
    ----------
    target : str
        A check or symptom id (outcome 0 = its first, normal outcome; 1 = its
        second, abnormal one), or an event or gate id observed exactly
        (0 = ok, 1 = failed).
    outcome : int
        0 or 1.
    epoch : int
        Repairs made before the finding.
    """

    target: str
    outcome: int
    epoch: int = 0


def describe_finding(model: Model, finding: Finding, repairs: tuple[str, ...] = ()) -> str:
    """A finding in words, e.g. ``capacitor_test=reads low`` or ``top=failed (after repairing X)``."""
    if finding.target in model.check_by_id:
        value = model.check_by_id[finding.target].outcomes[finding.outcome]
    else:
        value = ("ok", "failed")[finding.outcome]
    text = f"{finding.target}={value}"
    if finding.epoch:
        text += f" (after repairing {', '.join(repairs[: finding.epoch])})"
    return text


class Engine:
    """Compiles a model's join tree(s) and answers propagations.

    Parameters
    ----------
    model : Model
    memory_budget : int
        Bytes the join tree's tables may take (see NetworkTooLarge).
    """

    #: Compiled trees kept (a session moves forward; undo goes back one step).
    cache_size = 6
    #: Memory the kept posteriors may take: a propagation of findings already
    #: seen (undo, a note, weighing a check's outcomes again) is answered from it.
    posterior_cache_bytes = 64 * 1024**2

    def __init__(self, model: Model, memory_budget: int = DEFAULT_MEMORY_BUDGET):
        self.model = model
        self.memory_budget = memory_budget
        self._trees: dict = {}
        self._networks: dict = {}
        self._coherent = all(g.kind != "not" for g in model.gates)
        self._posteriors: dict = {}
        #: Propagations actually run (not answered from memory).
        self.propagations = 0
        self.compiled(())  # compile now, so a model too large is refused at once

    def compiled(self, repairs: tuple[str, ...], past_targets=frozenset()) -> tuple[Network, JoinTree]:
        """The network and join tree for a sequence of repairs, compiled once and cached.

        ``past_targets`` are the (target, epoch) pairs of findings made before
        the last repair: only what they read of the old logic is carried, so
        findings made now never recompile, and the tree stays as small as the
        evidence allows. The cache keeps the most recent few trees.
        """
        repairs = tuple(repairs)
        key = (repairs, frozenset(past_targets))
        if key in self._trees:
            self._trees[key] = self._trees.pop(key)  # most recently used last
            return self._trees[key]
        for r in repairs:
            if r not in self.model.hypotheses:
                raise SessionError(f"cannot repair {r!r}: it is not a basic event of model {self.model.name!r}")
        with gc_paused():
            if repairs not in self._networks:
                self._networks[repairs] = build_network(self.model, repairs, with_checks=False)
            net = self._networks[repairs]
            variables, families = net.relevant(key[1])
            tree = JoinTree(net, self.memory_budget, families=families, variables=variables)
        self._trees[key] = (net, tree)
        while len(self._trees) > self.cache_size:
            self._trees.pop(next(iter(self._trees)))
        while len(self._networks) > self.cache_size:
            self._networks.pop(next(iter(self._networks)))
        return net, tree

    def forget(self) -> None:
        """Drop the posteriors kept in memory (the next propagation runs afresh)."""
        self._posteriors.clear()

    @property
    def tree(self) -> JoinTree:
        """The join tree with no repairs (for reports: width, table size)."""
        return self.compiled(())[1]

    def _evidence(self, net: Network, tree: JoinTree, finding: Finding) -> Evidence | None:
        model = self.model
        if finding.outcome not in (0, 1):
            raise SessionError(f"outcome of {finding.target!r} must be 0 or 1, not {finding.outcome!r}")
        if not 0 <= finding.epoch <= net.epochs:
            raise SessionError(f"finding on {finding.target!r} is dated after {finding.epoch} repairs, "
                               f"but only {net.epochs} were made")
        if finding.target in model.check_by_id:
            fam = net.families[(finding.target, finding.epoch)]
            lik = fam.p_abnormal() if finding.outcome == 1 else fam.p_normal()
            if not fam.nodes:
                return _ConstantLikelihood(float(lik))
            return tree.evidence_on_variables(fam.nodes, lik)
        if finding.target in model.gate_by_id or finding.target in model.event_by_id \
                or finding.target in model.hypotheses:
            node = net.node_for(finding.target, finding.epoch)
            if isinstance(node, bool):
                return _ConstantLikelihood(1.0 if int(node) == finding.outcome else 0.0)
            lik = np.array([0.0, 1.0]) if finding.outcome == 1 else np.array([1.0, 0.0])
            return tree.evidence_on_variables((node,), lik)
        raise SessionError(f"unknown check, symptom or event {finding.target!r} in model {self.model.name!r}")

    def implied_dropped(self, findings) -> list[Finding]:
        """The findings without exact observations that other findings already imply.

        In a coherent tree (no NOT gate) a gate or event that still fails
        after more repairs failed after fewer too, and one that was ok stays
        ok after more repairs. So "top failed" at epoch j is implied by "top
        failed" at a later epoch, and "ok" at a later epoch by "ok" at an
        earlier one. An implied finding has likelihood one wherever the
        others hold, so dropping it changes neither the posterior nor
        P(findings); it keeps the old epochs' logic out of the join tree.
        """
        if not self._coherent:
            return list(findings)
        exact = [f for f in findings if f.target not in self.model.check_by_id]
        kept = []
        for f in findings:
            if f.target not in self.model.check_by_id:
                if f.outcome == 1 and any(g.target == f.target and g.outcome == 1 and g.epoch > f.epoch
                                          for g in exact):
                    continue
                if f.outcome == 0 and any(g.target == f.target and g.outcome == 0 and g.epoch < f.epoch
                                          for g in exact):
                    continue
            kept.append(f)
        return kept

    def _run(self, findings, repairs):
        findings = self.implied_dropped(findings)
        now = len(repairs)
        net, tree = self.compiled(repairs, frozenset((f.target, f.epoch) for f in findings if f.epoch < now))
        evidence, log_constant = [], 0.0
        for f in findings:
            ev = self._evidence(net, tree, f)
            if isinstance(ev, _ConstantLikelihood):
                if ev.value <= 0.0:
                    raise ZeroProbability
                log_constant += float(np.log(ev.value))
            else:
                evidence.append(ev)
        calibrated = tree.propagate(evidence)
        return net, tree, calibrated, log_constant

    def propagate(self, findings=(), repairs: tuple[str, ...] = ()) -> "Posterior":
        """Posterior given findings (in order) and the repairs made so far.

        Raises
        ------
        ImpossibleFindings
            The findings have probability zero; names a smallest conflicting subset.
        SessionError
            A finding names an unknown target or an epoch beyond the repairs.
        """
        findings = tuple(findings)
        repairs = tuple(repairs)
        key = (findings, repairs)
        if key in self._posteriors:
            self._posteriors[key] = self._posteriors.pop(key)  # most recently used last
            return self._posteriors[key]
        try:
            net, tree, calibrated, log_constant = self._run(findings, repairs)
        except ZeroProbability:
            raise ImpossibleFindings([describe_finding(self.model, f, repairs)
                                      for f in self.conflict(findings, repairs)]) from None
        self.propagations += 1
        post = Posterior(self.model, net, tree, calibrated, calibrated.log_p + log_constant, findings, repairs)
        self._posteriors[key] = post
        keep = max(8, self.posterior_cache_bytes // max(1, 8 * tree.table_entries))
        while len(self._posteriors) > keep:
            self._posteriors.pop(next(iter(self._posteriors)))
        return post

    def conflict(self, findings, repairs=()) -> list[Finding]:
        """A minimal subset of findings with probability zero (deletion filter)."""
        kept = list(findings)
        i = 0
        while i < len(kept):
            trial = kept[:i] + kept[i + 1 :]
            try:
                self._run(trial, repairs)
            except ZeroProbability:
                kept = trial
                continue
            i += 1
        return kept


@dataclass(frozen=True)
class FamilyBatch:
    """Checks whose cause families have the same shape, stacked.

    Attributes
    ----------
    checks : tuple of str
        Check ids, one per row.
    joint : ndarray, shape (n, S)
        P(c | findings) over the S joint states of each check's causes.
    likelihood : ndarray, shape (n, K, S)
        P(outcome | c), K outcomes (the first is the normal one).
    """

    checks: tuple[str, ...]
    joint: np.ndarray
    likelihood: np.ndarray


def outcome_table(family: CheckFamily) -> np.ndarray:
    """P(outcome | c) of one check family, shape (K, 2**m): outcomes by states of the causes (C order)."""
    return np.stack([family.p_normal().reshape(-1), family.p_abnormal().reshape(-1)])


@dataclass(frozen=True)
class _BatchGroup:
    checks: tuple[str, ...]
    plan: tuple
    likelihood: np.ndarray


@dataclass(frozen=True)
class _BatchPlans:
    groups: dict  # (states, outcomes) -> _BatchGroup
    where: dict  # check id -> ((states, outcomes), row)


def _batch_plans(net: Network, tree: JoinTree, epoch: int) -> _BatchPlans:
    """Every check family of one epoch the tree carries, grouped by shape; built once per tree and epoch."""
    cached = tree._batch_plans.get(("families", epoch))
    if cached is not None:
        return cached
    members: dict[tuple[int, int], list] = {}
    for (check_id, e), fam in tree.families.items():
        if e == epoch:
            table = outcome_table(fam)
            members.setdefault(table.shape[::-1], []).append((check_id, fam, table))
    groups, where = {}, {}
    for key, items in members.items():
        checks = tuple(c for c, _, _ in items)
        plan = tree.joints_plan(tuple(f.nodes for _, f, _ in items))
        groups[key] = _BatchGroup(checks, plan, np.stack([t for _, _, t in items]))
        for row, c in enumerate(checks):
            where[c] = (key, row)
    plans = _BatchPlans(groups, where)
    tree._batch_plans[("families", epoch)] = plans
    return plans


@dataclass(frozen=True)
class _ConstantLikelihood:
    value: float


class Posterior:
    """Everything one propagation gives: log P(findings), marginals, check families.

    Attributes
    ----------
    log_p : float
        Natural log of P(findings).
    findings, repairs : tuple
        What it was computed from.
    epoch : int
        The current epoch (number of repairs); gate marginals and check
        families default to it.
    """

    def __init__(self, model, net, tree, calibrated, log_p, findings, repairs):
        self.model = model
        self.network = net
        self.tree = tree
        self._calibrated = calibrated
        self.log_p = float(log_p)
        self.findings = findings
        self.repairs = repairs
        self.epoch = len(repairs)
        self._node_marginals = calibrated.marginals()
        self._families: dict = {}

    def p_failed(self, node_id: str, epoch: int | None = None) -> float:
        """P(event or gate failed | findings), at an epoch (default: now)."""
        epoch = self.epoch if epoch is None else epoch
        node = self.network.node_for(node_id, epoch)
        if isinstance(node, bool):
            return float(node)
        if node not in self.tree.index:
            raise SessionError(f"{node_id!r} as it was after {epoch} repair(s) is not carried: no finding "
                               "of that time reads it")
        return float(self._node_marginals[self.tree.index[node]])

    def root_marginals(self) -> np.ndarray:
        """P(failed | findings) of every hypothesis, in ``model.hypotheses`` order."""
        idx = [self.tree.index[r] for r in self.model.hypotheses]
        return self._node_marginals[idx]

    @property
    def marginals(self) -> dict[str, float]:
        """P(failed | findings) of every root and every gate (gates at the current epoch)."""
        out = {r: float(p) for r, p in zip(self.model.hypotheses, self.root_marginals())}
        for g in self.model.gates:
            out[g.id] = self.p_failed(g.id)
        return out

    def node_marginals(self) -> dict[str, float]:
        """P(state 1) of every node the join tree carries, derived nodes included."""
        return {v: float(p) for v, p in zip(self.tree.variables, self._node_marginals)}

    def family(self, check_id: str, epoch: int | None = None) -> CheckFamily:
        """What a check reads at an epoch (nodes, detections, leak)."""
        epoch = self.epoch if epoch is None else epoch
        return self.network.families[(check_id, epoch)]

    def family_batches(self, check_ids, epoch: int | None = None) -> list["FamilyBatch"]:
        """The cause joint and outcome table of many checks at once, grouped by shape.

        Parameters
        ----------
        check_ids : iterable of str
            Checks or symptoms of the model.
        epoch : int, optional
            Default: now.

        Returns
        -------
        list of FamilyBatch
            One per (number of joint cause states, number of outcomes), in
            first-seen order; every check appears in exactly one.

        Notes
        -----
        Each group's joints come out of the calibrated tables in one gather
        and one ``bincount`` over index plans the join tree keeps, whatever
        the number of checks.
        """
        epoch = self.epoch if epoch is None else epoch
        plans = _batch_plans(self.network, self.tree, epoch)
        wanted: dict[tuple[int, int], list[int]] = {}
        for check_id in check_ids:
            found = plans.where.get(check_id)
            if found is None:
                raise SessionError(f"{check_id!r} is not a check or symptom of model {self.model.name!r} "
                                   f"read after {epoch} repair(s)")
            key, row = found
            wanted.setdefault(key, []).append(row)
        out = []
        for key, rows in wanted.items():
            group = plans.groups[key]
            joint = self._calibrated.joints(group.plan, len(group.checks))
            if len(rows) != len(group.checks) or rows != list(range(len(rows))):
                pick = np.array(rows, dtype=np.int64)
                out.append(FamilyBatch(tuple(group.checks[r] for r in rows), joint[pick], group.likelihood[pick]))
            else:
                out.append(FamilyBatch(group.checks, joint, group.likelihood))
        return out

    def check_family(self, check_id: str, epoch: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """(P(c | findings), P(abnormal | c)) over the joint states c of the check's causes.

        Both are flat arrays of length 2**m, in the same order; m is the
        number of distinct non-constant causes at that epoch (m = 0 gives
        arrays of length 1).
        """
        epoch = self.epoch if epoch is None else epoch
        key = (check_id, epoch)
        if key not in self._families:
            fam = self.network.families[key]
            # The clique table is already normalised, so its marginal sums to one.
            joint = self._calibrated.joint(fam.nodes).ravel()
            self._families[key] = (joint, fam.p_abnormal().reshape(-1))
        return self._families[key]
