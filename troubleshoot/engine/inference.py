"""Exact posteriors for a model: findings in, every marginal and check family out.

:class:`Engine` compiles one join tree per set of repairs (cached: findings
never recompile it) and turns findings into likelihoods. A finding on a check
or symptom multiplies P(outcome | causes) (noisy-OR or noisy-MAX with leak,
:mod:`troubleshoot.engine.observation`) onto the clique
that holds the check's causes; a finding on an event or gate id is an exact
observation of it. A finding carries its epoch, the number of repairs made
before it, so it reads the gate logic as it was when the finding was made.

References
----------
Lauritzen & Spiegelhalter 1988 (join tree); Pearl 1988 (noisy-OR); Díez 1993 (noisy-MAX).

Where the join tree's tables would pass the memory budget, the engine answers
the same questions on a compiled decision diagram
(:mod:`troubleshoot.engine.compiled`); :attr:`Engine.name` says which.
"""


from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from troubleshoot.errors import ImpossibleFindings, NetworkTooLarge, SessionError
from troubleshoot.engine.compiled import (
    ENGINE_NAME as COMPILED,
    MAX_CAUSE_STATES_BITS,
    CompiledModel,
    OneMore,
    Passes,
    ZeroEvidence,
)
from troubleshoot.engine.observation import table_from_log_cdf
from troubleshoot.engine.jointree import DEFAULT_MEMORY_BUDGET, Evidence, JoinTree, ZeroProbability, gc_paused
from troubleshoot.model import Model
from troubleshoot.engine.network import CheckFamily, Network, build_network

#: The name of the join-tree path (``suggest --json`` key ``engine``).
JOIN_TREE = "join tree"
#: What ``Engine(kind=...)`` accepts.
ENGINE_KINDS = ("auto", JOIN_TREE, COMPILED)


@dataclass(frozen=True)
class Finding:
    """One observation.

    Parameters
    ----------
    target : str
        A check or symptom id (outcome = index into its ``outcomes``: 0 the
        normal one, 1..K-1 the abnormal ones), or an event or gate id
        observed exactly (0 = ok, 1 = failed).
    outcome : int
        0..K-1 for a check of K outcomes; 0 or 1 for an event or gate.
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

    def __init__(self, model: Model, memory_budget: int = DEFAULT_MEMORY_BUDGET, kind: str = "auto"):
        if kind not in ENGINE_KINDS:
            raise ValueError(f"engine kind must be one of {ENGINE_KINDS}, not {kind!r}")
        self.model = model
        self.memory_budget = memory_budget
        self.kind = kind
        self._trees: dict = {}
        self._networks: dict = {}
        self._coherent = all(g.kind != "not" for g in model.gates)
        self._posteriors: dict = {}
        self._diagram: CompiledModel | None = None
        # Passes over evidence diagrams, by diagram root: the structure that
        # weighted passes (exact observations of roots) share.
        self._base_passes: dict[int, Passes] = {}
        #: Propagations actually run (not answered from memory).
        self.propagations = 0
        # Compile now, so a model too large for both paths is refused at once.
        if kind == COMPILED:
            self._diagram = CompiledModel(model, memory_budget)
        else:
            try:
                self.compiled(())
            except NetworkTooLarge as exc:
                if kind != "auto":
                    raise
                self._switch(exc)

    def _switch(self, exc: NetworkTooLarge) -> None:
        """Go over to the compiled path, for good: the join tree would not fit."""
        self._trees.clear()
        self._networks.clear()
        self._posteriors.clear()
        self._base_passes.clear()
        try:
            self._diagram = CompiledModel(self.model, self.memory_budget)
        except NetworkTooLarge as second:
            raise NetworkTooLarge(f"{exc}; the compiled decision diagram does not fit either: {second}") from None

    @property
    def name(self) -> str:
        """Which path computes the figures: "join tree" or "decision diagram"."""
        return JOIN_TREE if self._diagram is None else COMPILED

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
            if r not in self.model.hypothesis_ids:
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
        self._base_passes.clear()

    @property
    def tree(self) -> JoinTree | None:
        """The join tree with no repairs (for reports: width, table size); None on the compiled path."""
        if self._diagram is not None:
            return None
        return self.compiled(())[1]

    @property
    def diagram(self) -> CompiledModel | None:
        """The compiled decision diagram, on that path (else None)."""
        return self._diagram

    def _validate(self, finding: Finding, epochs: int) -> None:
        model = self.model
        check = model.check_by_id.get(finding.target)
        n_outcomes = len(check.outcomes) if check is not None else 2
        if not isinstance(finding.outcome, (int, np.integer)) or not 0 <= finding.outcome < n_outcomes:
            names = (f"; its outcomes are {', '.join(f'{i} {o!r}' for i, o in enumerate(check.outcomes))}"
                     if check is not None else " (0 ok, 1 failed)")
            raise SessionError(f"outcome of {finding.target!r} must be 0..{n_outcomes - 1}, not "
                               f"{finding.outcome!r}{names}")
        if not 0 <= finding.epoch <= epochs:
            raise SessionError(f"finding on {finding.target!r} is dated after {finding.epoch} repairs, "
                               f"but only {epochs} were made")
        if not (finding.target in model.check_by_id or finding.target in model.gate_by_id
                or finding.target in model.event_by_id or finding.target in model.hypothesis_ids):
            raise SessionError(f"unknown check, symptom or event {finding.target!r} in model {model.name!r}")

    def _evidence(self, net: Network, tree: JoinTree, finding: Finding) -> Evidence | _ConstantLikelihood:
        model = self.model
        self._validate(finding, net.epochs)
        if finding.target in model.check_by_id:
            fam = net.families[(finding.target, finding.epoch)]
            lik = fam.p_outcome(finding.outcome)
            if not fam.nodes:
                return _ConstantLikelihood(float(lik))
            return tree.evidence_on_variables(fam.nodes, lik)
        if finding.target in model.gate_by_id or finding.target in model.event_by_id \
                or finding.target in model.hypothesis_ids:
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
        checks = self.model.check_by_id
        # Per target, the latest epoch seen failed and the earliest seen ok:
        # one pass, so a thousand exact findings (every unlisted cause ruled
        # out at once, outside_model) cost a thousand steps, not a million.
        latest_failed: dict[str, int] = {}
        earliest_ok: dict[str, int] = {}
        for g in findings:
            if g.target in checks:
                continue
            if g.outcome == 1:
                latest_failed[g.target] = max(g.epoch, latest_failed.get(g.target, g.epoch))
            elif g.outcome == 0:
                earliest_ok[g.target] = min(g.epoch, earliest_ok.get(g.target, g.epoch))
        kept = []
        for f in findings:
            if f.target not in checks:
                if f.outcome == 1 and latest_failed[f.target] > f.epoch:
                    continue
                if f.outcome == 0 and earliest_ok[f.target] < f.epoch:
                    continue
            kept.append(f)
        return kept

    def passes_for(self, root: int) -> Passes:
        """The passes over one evidence diagram (compiled path), kept for the next few propagations."""
        cm = self._diagram
        assert cm is not None
        base = self._base_passes.get(root)
        if base is None:
            base = Passes(cm, root)
            self._base_passes[root] = base
            while len(self._base_passes) > 2 * self.cache_size:
                self._base_passes.pop(next(iter(self._base_passes)))
        else:
            self._base_passes[root] = self._base_passes.pop(root)  # most recently used last
        return base

    def _run_compiled(self, findings, repairs) -> tuple[Passes | OneMore, float]:
        """The passes for findings under repairs, and the log of the factor the weights leave out.

        An exact observation of a root event does not enter the evidence
        diagram: it fixes that root's weight (prior 1 if seen failed, 0 if
        seen working) and multiplies P(findings) by its prior probability.
        The passes then reuse the structure of the other findings' diagram
        (kept from an earlier propagation), so "these findings and these
        roots ok" costs one pass over a diagram already built, not a product
        of diagrams.
        """
        cm = self._diagram
        assert cm is not None
        for r in repairs:
            if r not in self.model.hypothesis_ids:
                raise SessionError(f"cannot repair {r!r}: it is not a basic event of model {self.model.name!r}")
        for f in findings:
            self._validate(f, len(repairs))
        fixed: dict[int, int] = {}
        others = []
        for f in findings:
            if f.target in cm.level and f.target not in self.model.check_by_id \
                    and f.target not in self.model.gate_by_id:
                if f.target in repairs[: f.epoch]:  # held working since its repair
                    if f.outcome == 1:
                        raise ZeroProbability
                    continue
                level = cm.level[f.target]
                if fixed.setdefault(level, f.outcome) != f.outcome:
                    raise ZeroProbability
            else:
                others.append(f)
        try:
            last = others[-1] if others else None
            if not fixed and last is not None and last.target in self.model.check_by_id:
                # One check finding more than findings already propagated:
                # answered from their passes (Passes.one_more), no new diagram.
                before = self._base_passes.get(cm.evidence(tuple(others[:-1]), repairs))
                if before is not None:
                    lik = cm.finding_diagram(last.target, last.outcome, last.epoch, repairs)
                    with gc_paused():  # many small tuples, no cycles
                        return before.one_more(lik), 0.0
            root = cm.evidence(tuple(others), repairs)
            base = self.passes_for(root)
            if not fixed:
                return base, 0.0
            priors = cm.priors.copy()
            log_factor = 0.0
            for level, outcome in fixed.items():
                p = float(priors[level])
                weight = p if outcome == 1 else 1.0 - p
                if weight <= 0.0:
                    raise ZeroProbability
                log_factor += math.log(weight)
                priors[level] = float(outcome)
            return Passes(cm, root, priors=priors, like=base), log_factor
        except ZeroEvidence:
            raise ZeroProbability from None

    def _run(self, findings, repairs):
        if self._diagram is not None:
            return self._run_compiled(tuple(findings), tuple(repairs))
        findings = self.implied_dropped(findings)
        now = len(repairs)
        try:
            net, tree = self.compiled(repairs, frozenset((f.target, f.epoch) for f in findings if f.epoch < now))
        except NetworkTooLarge as exc:
            if self.kind != "auto":
                raise
            self._switch(exc)
            return self._run_compiled(tuple(findings), tuple(repairs))
        evidence: list[Evidence] = []
        log_constant = 0.0
        for f in findings:
            ev = self._evidence(net, tree, f)
            if isinstance(ev, _ConstantLikelihood):
                if ev.value <= 0.0:
                    raise ZeroProbability
                log_constant += float(np.log(ev.value))
            else:
                evidence.append(ev)
        calibrated = tree.propagate(evidence)
        return net, tree, calibrated, log_constant, evidence

    def propagate(self, findings=(), repairs: tuple[str, ...] = ()) -> AnyPosterior:
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
            run = self._run(findings, repairs)
        except ZeroProbability:
            raise ImpossibleFindings([describe_finding(self.model, f, repairs)
                                      for f in self.conflict(findings, repairs)]) from None
        self.propagations += 1
        post: AnyPosterior
        if self._diagram is not None and isinstance(run[0], (Passes, OneMore)):
            passes, log_factor = run
            post = CompiledPosterior(self.model, self._diagram, passes, findings, repairs, log_factor,
                                     self.passes_for)
            entries = len(passes.ids) if isinstance(passes, Passes) else passes.nodes
        else:
            net, tree, calibrated, log_constant, evidence = run
            post = Posterior(self.model, net, tree, calibrated, calibrated.log_p + log_constant, findings, repairs,
                             evidence, log_constant)
            entries = tree.table_entries
        self._posteriors[key] = post
        keep = max(8, self.posterior_cache_bytes // max(1, 8 * entries))
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
    likelihood : ndarray, shape (n, S, K)
        P(outcome | c) for each of the K outcomes (the first is the normal one).
    """

    checks: tuple[str, ...]
    joint: np.ndarray
    likelihood: np.ndarray


def outcome_table(family: CheckFamily) -> np.ndarray:
    """P(outcome | c) of one check family, shape (2**m, K): states of the causes (C order) by outcomes."""
    return family.likelihood().reshape(-1, family.n_outcomes)


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
    members: dict[tuple[int, ...], list] = {}
    for (check_id, e), fam in tree.families.items():
        if e == epoch:
            table = outcome_table(fam)
            members.setdefault(table.shape, []).append((check_id, fam, table))
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

    engine = JOIN_TREE

    def __init__(self, model, net, tree, calibrated, log_p, findings, repairs, evidence=(), log_constant=0.0):
        self._evidence = list(evidence)
        self._log_constant = float(log_constant)
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

    def family_batches(self, check_ids, epoch: int | None = None) -> list[FamilyBatch]:
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
        and one ``bincount`` per source (cliques, separators) over index
        plans the join tree keeps, whatever the number of checks.
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
            if rows != list(range(len(group.checks))):
                pick = np.array(rows, dtype=np.int64)
                out.append(FamilyBatch(tuple(group.checks[r] for r in rows), joint[pick], group.likelihood[pick]))
            else:
                out.append(FamilyBatch(group.checks, joint, group.likelihood))
        return out

    def cause_joint(self, check_id: str, epoch: int | None = None) -> np.ndarray:
        """P(c | findings) over the joint states c of a check's causes, flat, length 2**m.

        m is the number of distinct non-constant causes at that epoch (m = 0
        gives length 1); C order over ``family(check_id).nodes``.
        """
        epoch = self.epoch if epoch is None else epoch
        key = (check_id, epoch)
        if key not in self._families:
            fam = self.network.families[key]
            # The clique table is already normalised, so its marginal sums to one.
            self._families[key] = self._calibrated.joint(fam.nodes).ravel()
        return self._families[key]

    def check_likelihood(self, check_id: str, epoch: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """(P(c | findings), P(outcome | c)): shapes (2**m,) and (2**m, K), rows in the same order."""
        epoch = self.epoch if epoch is None else epoch
        fam = self.network.families[(check_id, epoch)]
        return self.cause_joint(check_id, epoch), fam.likelihood().reshape(-1, fam.n_outcomes)

    def check_family(self, check_id: str, epoch: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """(P(c | findings), P(any abnormal outcome | c)) over the joint states c of the check's causes.

        Both are flat arrays of length 2**m, in the same order. For a check
        of more than two outcomes use :meth:`check_likelihood`.
        """
        epoch = self.epoch if epoch is None else epoch
        fam = self.network.families[(check_id, epoch)]
        return self.cause_joint(check_id, epoch), fam.p_abnormal().reshape(-1)

    def most_probable_state(self) -> tuple[tuple[str, ...], float]:
        """The most probable joint state of the roots given the findings: (failed roots, its probability).

        One max-product pass over the same join tree (Dawid 1992): gates are
        functions of the roots, so the best state of every variable carries
        the best state of the roots. Exact, at the cost of one propagation.
        """
        state, log_m = self.tree.max_propagate(self._evidence)
        index = self.tree.index
        failed = tuple(r for r in self.model.hypotheses if state.get(index[r], 0) == 1)
        return failed, float(np.exp(min(0.0, log_m + self._log_constant - self.log_p)))


class CompiledPosterior:
    """What one pass over the evidence diagram gives; the interface of :class:`Posterior`.

    Attributes
    ----------
    log_p : float
        Natural log of P(findings).
    findings, repairs : tuple
    epoch : int
    """

    engine = COMPILED

    def __init__(self, model: Model, compiled: CompiledModel, passes: Passes | OneMore, findings, repairs,
                 log_factor: float = 0.0, passes_for=None):
        self.model = model
        self.compiled = compiled
        self.passes = passes
        self.findings = findings
        self.repairs = repairs
        self.epoch = len(repairs)
        self.log_p = math.log(passes.p_evidence) + log_factor
        self._levels = np.array([compiled.level[r] for r in model.hypotheses], dtype=np.int64)
        self._families: dict = {}
        self._gates: dict = {}
        self._batched: set[int] = set()
        self._walks: Passes | None = None if passes.weighted else passes  # type: ignore[assignment]
        self._passes_for = passes_for

    @property
    def walks(self) -> Passes:
        """Passes whose pair walks answer gate marginals and check families.

        Pair walks read the cause diagrams' prior probabilities, so where
        the passes weigh roots fixed by exact observations, they run on the
        evidence diagram of every finding (the product, built once on first use).
        """
        if self._walks is None:
            cm = self.compiled
            root = cm.evidence(tuple(self.findings), tuple(self.repairs))
            self._walks = self._passes_for(root) if self._passes_for is not None else Passes(cm, root)
        return self._walks

    def root_marginals(self) -> np.ndarray:
        """P(failed | findings) of every hypothesis, in ``model.hypotheses`` order."""
        return self.passes.root_marginals[self._levels]

    def p_failed(self, node_id: str, epoch: int | None = None) -> float:
        """P(event or gate failed | findings), at an epoch (default: now)."""
        epoch = self.epoch if epoch is None else epoch
        if node_id not in self.model.gate_by_id and node_id not in self.compiled.level:
            raise SessionError(f"unknown event or gate {node_id!r}")
        key = (node_id, epoch)
        if key not in self._gates:
            f = self.compiled.function_at(node_id, self.repairs, epoch)
            store = self.compiled.store
            if f in (0, 1):
                self._gates[key] = float(f)
            elif store.low[f] == 0 and store.high[f] == 1:  # a root, not repaired by then
                self._gates[key] = float(self.passes.root_marginals[store.var[f]])
            else:
                self._gates[key] = float(self.walks.joint((f,))[1])
        return self._gates[key]

    @property
    def marginals(self) -> dict[str, float]:
        """P(failed | findings) of every root and every gate (gates at the current epoch)."""
        out = {r: float(p) for r, p in zip(self.model.hypotheses, self.root_marginals())}
        for g in self.model.gates:
            out[g.id] = self.p_failed(g.id)
        return out

    def family(self, check_id: str, epoch: int | None = None) -> CheckFamily:
        """What a check reads at an epoch (its distinct causes as diagram ids, their cumulative tables)."""
        epoch = self.epoch if epoch is None else epoch
        return self.compiled.family(check_id, self.repairs, epoch)[1]

    def check_likelihood(self, check_id: str, epoch: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """(P(c | findings), P(outcome | c)), rows in the same order (as :class:`Posterior`).

        Up to MAX_CAUSE_STATES_BITS distinct causes the rows are the 2**m
        cause states; a wider check's rows are its cause states grouped by
        likelihood (the consumers only pair the two arrays).
        """
        epoch = self.epoch if epoch is None else epoch
        key = (check_id, epoch)
        if key not in self._families and epoch not in self._batched:
            self._batch(epoch)
        if key not in self._families:
            causes, fam = self.compiled.family(check_id, self.repairs, epoch)
            if len(causes) <= MAX_CAUSE_STATES_BITS:
                self._families[key] = (self.walks.joint(causes), fam.likelihood().reshape(-1, fam.n_outcomes))
            else:
                sums, mass = self.walks.joint_by_likelihood(causes, fam.log_cdfs)
                log_cdf = np.array(fam.leak_log_cdf)[None, :] + np.array(sums).reshape(len(sums), -1)
                self._families[key] = (mass, table_from_log_cdf(log_cdf, fam.order))
        return self._families[key]

    def _batch(self, epoch: int) -> None:
        """Every check's family with at most four causes at an epoch, in one batch of whole-array walks.

        A ranking asks for nearly every check, so they are conditioned on
        together (:meth:`Passes.joints_many`).
        """
        self._batched.add(epoch)
        ids, causes_list, fams = [], [], []
        for check in self.model.checks + self.model.symptoms:
            causes, fam = self.compiled.family(check.id, self.repairs, epoch)
            if len(causes) <= 4:
                ids.append(check.id)
                causes_list.append(causes)
                fams.append(fam)
        for check_id, joint, fam in zip(ids, self.walks.joints_many(causes_list), fams):
            self._families[(check_id, epoch)] = (joint, fam.likelihood().reshape(-1, fam.n_outcomes))

    def family_batches(self, check_ids, epoch: int | None = None) -> list[FamilyBatch]:
        """As :meth:`Posterior.family_batches`: the checks' (joint, table) stacked by shape."""
        groups: dict[tuple[int, ...], list] = {}
        for check_id in check_ids:
            joint, table = self.check_likelihood(check_id, epoch)
            groups.setdefault(table.shape, []).append((check_id, joint, table))
        return [FamilyBatch(tuple(c for c, _, _ in items), np.stack([j for _, j, _ in items]),
                            np.stack([t for _, _, t in items])) for items in groups.values()]

    def cause_joint(self, check_id: str, epoch: int | None = None) -> np.ndarray:
        """P(c | findings) over the rows of :meth:`check_likelihood`."""
        return self.check_likelihood(check_id, epoch)[0]

    def check_family(self, check_id: str, epoch: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """(P(c | findings), P(any abnormal outcome | c)), rows as :meth:`check_likelihood`."""
        joint, table = self.check_likelihood(check_id, epoch)
        return joint, 1.0 - table[:, 0]

    def most_probable_state(self) -> tuple[tuple[str, ...], float]:
        """The most probable joint state of the roots given the findings: (failed roots, its probability).

        One max pass over the evidence diagram, whose leaves already hold the
        checks' noise summed out: exact, at the cost of one pass.
        """
        passes = self.passes if isinstance(self.passes, Passes) else self.walks
        state, log_joint = passes.max_state()
        failed = tuple(r for r, lv in zip(self.model.hypotheses, self._levels) if state[lv] == 1)
        # Both logs leave out the same factor of the fixed roots' priors.
        return failed, float(np.exp(min(0.0, log_joint - math.log(passes.p_evidence))))


#: What :meth:`Engine.propagate` gives: either posterior, read through the same interface.
AnyPosterior = Posterior | CompiledPosterior
