"""Simulated troubleshooting: sampled faults, answers drawn from the model, a strategy through a Session.

Each case is one failed unit. Its true state (which root events have failed)
is drawn exactly from the model given that the top event occurred; every
check the strategy asks for is answered by drawing from the check's own
noise (noisy-OR with leak) given the true state at the epoch the check is
made; the strategy is run through a :class:`~troubleshoot.session.Session`
exactly as a technician would drive it.

The protocol of a case (the same for every strategy):

1. The complaint (the top event occurred) opens the session; every symptom
   is read at once (symptoms cost nothing).
2. Diagnosis: while the strategy names a check, the check is done and its
   outcome recorded. The strategy stops by naming none (the tool's rule
   stops when a suspect is isolated or no check gives ``min_bits`` bits).
3. Finish: when the strategy names no check, the policy
   (:func:`troubleshoot.advice.policy.decide` with no check to weigh) says
   whether to repair the next suspect of the repair order (P / (repair +
   verification cost), Kadane & Simon 1977) or to escalate; a repair is
   verified as the session asks (the repair's own check if the model names
   one, then the unit itself). A failed verification sends the case back to
   step 2 with the repair taken into account (``checks_after_repair``, the
   tool's own behaviour), or, in the repair-only protocol, straight to the
   next finishing step. When the repair's own check read abnormal, the unit
   may work all the same: finishing may then also mean trying the unit
   (the policy weighs it, :func:`troubleshoot.advice.policy.weigh_unit_check`).

A case ends ``confirmed`` (the unit verified working), ``escalated`` (the
policy hands the unit over: the cause lies outside the model, or escalating
is expected to cost less than going on; its price is counted), or
``capped`` (the step cap: counted, and charged as an escalation, never cut
short). A model without an escalation price is charged, for an escalation,
its dearest repair with its verification
(:func:`troubleshoot.advice.policy.escalation_charge`), so stopping early is
never free. ``left-failed`` (a noisy verifying check passed while the unit
still fails) and ``engine-refused`` (the network after a repair exceeded the
engine's memory budget, charged as an escalation) are rare.

Common random numbers: every draw of a case comes from generators seeded by
(seed, case index, stream), so every strategy meets the same true state and,
for the same check at the same epoch, the same uniform draw, hence the same
outcome; the results do not depend on how the cases are spread over worker
processes.

References
----------
D. Heckerman, J. S. Breese and K. Rommelse, "Decision-theoretic
troubleshooting", Communications of the ACM 38(3), 1995 (observe, repair,
verify; expected cost of repair).
P. L'Ecuyer, "Efficiency improvement and variance reduction", Winter
Simulation Conference 1994 (common random numbers).
"""

from __future__ import annotations

import math
import os
from collections import OrderedDict
from dataclasses import dataclass, replace
from itertools import combinations
from typing import Any

import numpy as np

from troubleshoot.advice.diagnosis import is_unlisted
from troubleshoot.advice.repair import CLEARED_P, next_repair, repair_cost, verification_cost  # noqa: F401 (re-exported)
from troubleshoot.errors import NetworkTooLarge
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.engine.observation import outcome_probabilities, sample_outcome
from troubleshoot.model.gates import gate_values
from troubleshoot.model import Model
from troubleshoot.advice.policy import Action, escalation_charge
from troubleshoot.session import (
    OBSERVATION,
    Session,
    SessionSettings,
    settings_for,
)
from troubleshoot.session.session import Record, SessionView

# Streams of a case's random numbers (the third word of the seed sequence).
STREAM_TRUE_STATE, STREAM_OUTCOMES, STREAM_STRATEGY = 0, 1, 2

#: How a case can end (see :class:`CaseResult`).
OUTCOMES = ("confirmed", "escalated", "capped", "left-failed", "engine-refused")
# What a simulated unit's log says when it is handed over.
HAND_OVER_REASONS = {
    "escalated": "simulated unit: the strategy hands it over",
    "capped": "simulated unit: the step cap was reached",
    "engine-refused": "simulated unit: a repair's gate logic would not fit the memory budget",
}

#: Session views a worker process remembers (see :class:`ViewMemo`).
VIEWS_PER_WORKER = 20000

#: z of the two-sided 95% normal interval.
Z95 = 1.96


def case_generator(seed: int, case: int, stream: int) -> np.random.Generator:
    """The generator of one stream of one case, from (seed, case index, stream) alone."""
    return np.random.default_rng(np.random.SeedSequence([int(seed), int(case), int(stream)]))


def sample_true_state(engine: Engine, rng: np.random.Generator, memo: dict | None = None) -> frozenset[str]:
    """Draw which roots have failed, exactly from P(roots | top event occurred).

    Parameters
    ----------
    engine : Engine
    rng : numpy.random.Generator
    memo : dict, optional
        P(F_i | top, F_1..F_(i-1)) already worked out with this engine, by the values drawn before:
        most units share their first draws, so one propagation serves many (the same numbers).

    Notes
    -----
    Sequential (chain-rule) sampling: root i is drawn from
    P(F_i | top, F_1..F_(i-1)), one propagation each, so the draw is exact
    however rare the top event is (rejection from the prior would need
    1 / P(top) tries). One uniform is drawn per root whatever happens, so
    the stream stays aligned.

    References
    ----------
    M. Henrion, "Propagating uncertainty in Bayesian networks by
    probabilistic logic sampling", UAI 1988 (sampling a network); the chain
    rule of probability.
    """
    model = engine.model
    memo = {} if memo is None else memo
    findings = [Finding(model.top, 1, 0)]
    posterior, posterior_of = None, -1
    failed = []
    for root in model.hypotheses:
        key = (tuple(findings), root)
        p = memo.get(key)
        if p is None:
            if posterior is None or posterior_of != len(findings):
                posterior, posterior_of = engine.propagate(findings), len(findings)
            p = memo[key] = posterior.p_failed(root, 0)
        u = rng.random()
        value = int(u < p)
        if value:
            failed.append(root)
        if 0.0 < p < 1.0:
            findings.append(Finding(root, value, 0))
    return frozenset(failed)


def true_values(model: Model, failed: frozenset[str], repaired: frozenset[str]) -> dict[str, bool]:
    """Whether each root and gate is failed in the true state, with the repaired roots working."""
    roots = {r: np.array([r in failed and r not in repaired]) for r in model.hypotheses}
    return {node: bool(v[0]) for node, v in gate_values(model, roots).items()}


class Equipment:
    """The unit under test in one case: its true state and the case's outcome draws.

    Parameters
    ----------
    model : Model
    failed : frozenset of str
        The roots truly failed.
    uniforms : numpy.ndarray
        Shape (epochs, checks): the uniform draw for check j done at epoch k.
    memo : dict, optional
        P(outcome) of a check by its causes' true values, shared between units of one model.
    """

    def __init__(self, model: Model, failed: frozenset[str], uniforms: np.ndarray, memo: dict | None = None):
        self.model = model
        self.failed = failed
        self.uniforms = uniforms
        self._memo = {} if memo is None else memo
        self._column = {c.id: j for j, c in enumerate(model.checks + model.symptoms)}
        self._values: dict[frozenset, dict[str, bool]] = {}

    def values(self, repaired: tuple[str, ...]) -> dict[str, bool]:
        key = frozenset(repaired)
        if key not in self._values:
            self._values[key] = true_values(self.model, self.failed, key)
        return self._values[key]

    def p_outcomes(self, check_id: str, repaired: tuple[str, ...]) -> np.ndarray:
        """P(outcome) of a check given the true state (:mod:`troubleshoot.engine.observation`)."""
        check = self.model.check_by_id[check_id]
        values = self.values(repaired)
        causes = tuple(values[c.target] for c in check.causes)
        key = (check_id, causes)
        found = self._memo.get(key)
        if found is None:
            found = self._memo[key] = outcome_probabilities(check, list(causes))
        return found

    def p_abnormal(self, check_id: str, repaired: tuple[str, ...]) -> float:
        """P(any abnormal outcome) of a check given the true state."""
        return float(1.0 - self.p_outcomes(check_id, repaired)[0])

    def answer(self, check_id: str, repaired: tuple[str, ...]) -> int:
        """The outcome index (0 normal) of a check done after ``repaired``."""
        u = self.uniforms[len(repaired), self._column[check_id]]
        return sample_outcome(self.p_outcomes(check_id, repaired), u)

    def top_fails(self, repaired: tuple[str, ...]) -> bool:
        return bool(self.values(repaired)[self.model.top])


def draw_case(engine: Engine, seed: int, case: int, memo: dict | None = None) -> Equipment:
    """The true state and outcome draws of one case (from (seed, case) only).

    ``memo`` (a dict kept for one engine) holds probabilities already worked out for earlier units;
    the draws are the same with or without it.
    """
    model = engine.model
    memo = {} if memo is None else memo
    failed = sample_true_state(engine, case_generator(seed, case, STREAM_TRUE_STATE), memo.setdefault("roots", {}))
    n_checks = len(model.checks) + len(model.symptoms)
    uniforms = case_generator(seed, case, STREAM_OUTCOMES).random((len(model.hypotheses) + 1, max(n_checks, 1)))
    return Equipment(model, failed, uniforms, memo.setdefault("outcomes", {}))


@dataclass(frozen=True)
class CaseResult:
    """What one strategy did on one case.

    Attributes
    ----------
    cost : float
        Checks, repairs and verifications (the session's own count), plus the
        escalation when the unit was handed over, in the model's cost unit.
    checks : int
        Checks done (symptoms, read at the start for free, not counted).
    repairs : tuple of str
        In the order made.
    first_repair_right : bool
        The first repair was of a root truly failed.
    wrong_repairs : int
        Repairs of roots that had not failed.
    outcome : str
        ``confirmed`` (the unit works after the last repair), ``escalated``
        (handed over; the escalation is in ``cost``), ``capped`` (step cap
        hit; charged as an escalation), ``left-failed`` (a verification
        passed but the top event still occurs: possible when a repair is
        verified by a noisy check) or ``engine-refused`` (the engine could
        not compile the network after a repair within its memory budget;
        charged as an escalation).
    faults_known : float
        The unit's cost with its faults known (:func:`faults_known_cost`),
        the same for every strategy; NaN when not worked out.
    """

    cost: float
    checks: int
    repairs: tuple[str, ...]
    first_repair_right: bool
    wrong_repairs: int
    outcome: str
    faults_known: float = math.nan


#: Units with more failed repairable roots than this get no faults-known figure (2^n subsets).
FAULTS_KNOWN_MAX_ROOTS = 12


def faults_known_cost(model: Model, equipment: Equipment) -> float:
    """What the unit would cost with its faults known: a lower bound for any strategy on it.

    The cheapest set of the failed roots whose repairs (each with its
    verification, as the protocol asks) put the unit right, or the
    escalation when that is cheaper or no such set exists (a cause outside
    the model, a failed root with no repair), in the model's cost unit.
    Any strategy ends a unit by escalating or by repairs that include such a
    set, each verified, so it costs at least this much; only a unit left
    failed by a noisy verifying check can cost less. NaN when more than
    :data:`FAULTS_KNOWN_MAX_ROOTS` repairable roots failed.
    """
    charge = escalation_charge(model)
    if any(is_unlisted(model, r) for r in equipment.failed):
        return charge
    repairable = sorted(r for r in equipment.failed
                        if r in model.event_by_id and model.event_by_id[r].repair is not None)
    if len(repairable) > FAULTS_KNOWN_MAX_ROOTS:
        return math.nan
    full = {r: repair_cost(model, r) + verification_cost(model, r) for r in repairable}
    best = charge
    for k in range(1, len(repairable) + 1):
        for subset in combinations(repairable, k):
            cost = sum(full[r] for r in subset)
            if cost < best and not equipment.top_fails(subset):
                best = cost
    return best


class ViewMemo:
    """Session views by the content of their record, for one engine and one set of settings.

    Many simulated units walk the same first steps (the same complaint and
    symptoms, the same first checks with the same outcomes). A session's view
    (its posterior, ranking, suspects and the policy's decision) depends only
    on its record (findings in order, repairs, skipped checks), the model and
    the settings, all pure (:mod:`troubleshoot.advice`), so a record met again
    takes the view computed the first time: the same object, the same bits.
    Only the speed depends on what is remembered, never a result. The least
    recently used views are forgotten beyond ``capacity``.

    Parameters
    ----------
    capacity : int
        Views kept at most (each holds its posterior).
    """

    def __init__(self, capacity: int = 20000):
        self.capacity = int(capacity)
        self._views: OrderedDict[Record, SessionView] = OrderedDict()
        self.hits = 0
        self.misses = 0

    def get(self, record: Record) -> SessionView | None:
        view = self._views.get(record)
        if view is None:
            self.misses += 1
            return None
        self.hits += 1
        self._views.move_to_end(record)
        return view

    def put(self, record: Record, view: SessionView) -> None:
        self._views[record] = view
        if len(self._views) > self.capacity:
            self._views.popitem(last=False)


class _SimulationEngine(Engine):
    """An engine that keeps more compiled trees: a fleet of units needs one per repair sequence met."""

    cache_size = 256


class _RememberingSession(Session):
    """A Session whose views come from a :class:`ViewMemo` when its record was met before."""

    def __init__(self, model: Model, settings: SessionSettings, engine: Engine, views: ViewMemo):
        self._memo = views
        super().__init__(model, settings, engine)

    def _make_view(self, record: Record) -> SessionView:
        view = self._memo.get(record)
        if view is None:
            view = super()._make_view(record)
            self._memo.put(record, view)
        return view


def max_steps_for(model: Model) -> int:
    """Step cap of a case: every check after every repair, every root repaired and verified, and a margin."""
    return (len(model.checks) + 3) * (len(model.hypotheses) + 1) + 10


def run_case(engine: Engine, strategy, equipment: Equipment, rng: np.random.Generator,
             settings: SessionSettings, max_steps: int | None = None,
             checks_after_repair: bool = True, log=None, views: ViewMemo | None = None) -> CaseResult:
    """Drive a Session with one strategy on one unit until the repair is confirmed.

    Parameters
    ----------
    engine : Engine
        Compiled once per model and shared by every session.
    strategy : Strategy
    equipment : Equipment
        The case's true state and outcome draws.
    rng : numpy.random.Generator
        The case's strategy stream (only ``random`` uses it).
    settings : SessionSettings
    max_steps : int, optional
        Default :func:`max_steps_for`.
    checks_after_repair : bool
        After a failed verification, let the strategy check again (True),
        or go straight to the next repair (the repair-only protocol).
    log : callable, optional
        Called with the new Session before its first action; returns the
        session log writer it then writes every action to (a simulated unit
        logged as a real session is).
    views : ViewMemo, optional
        Views of records already met (same engine and settings): a record met
        again is not propagated nor decided again.

    Returns
    -------
    CaseResult
    """
    model = engine.model
    max_steps = max_steps_for(model) if max_steps is None else max_steps
    session = Session(model, settings, engine) if views is None else _RememberingSession(model, settings, engine,
                                                                                          views)
    if log is not None:
        session.log = log(session)
    for symptom in model.symptoms:
        session.record_finding(symptom.id, equipment.answer(symptom.id, ()))
    symptom_ids = {s.id for s in model.symptoms}
    outcome = "capped"
    try:
        outcome = _drive(session, strategy, equipment, rng, settings, max_steps, checks_after_repair)
    except NetworkTooLarge:
        # A repair whose epoch copy of the gate logic would not fit the memory
        # budget: the session refuses it, and so would a technician's.
        outcome = "engine-refused"
    checks = sum(1 for o in session.view.record.observations
                 if o.kind == OBSERVATION and o.finding.target not in symptom_ids)
    repairs = session.repairs
    cost = float(session.view.cost_spent)
    if outcome in ("escalated", "capped", "engine-refused"):
        # The unit is handed over: escalating is paid for, never left out.
        cost += escalation_charge(model)
        # Recorded as a technician's hand-over is, so a simulated fleet's logs
        # show it and learning counts it; its price is already in ``cost``.
        session.escalate(HAND_OVER_REASONS[outcome])
    unlisted_failed = any(is_unlisted(model, r) for r in equipment.failed)
    return CaseResult(
        cost=cost,
        checks=checks,
        repairs=repairs,
        first_repair_right=(repairs[0] in equipment.failed) if repairs else (
            outcome == "escalated" and unlisted_failed),
        wrong_repairs=sum(1 for r in repairs if r not in equipment.failed),
        outcome=outcome,
    )


def _drive(session: Session, strategy, equipment: Equipment, rng, settings: SessionSettings,
           max_steps: int, checks_after_repair: bool = True) -> str:
    """The steps of one case (see the module notes); returns how the case ended.

    Every choice that is not the strategy's own (verify, repair which
    suspect, escalate) is the policy's: :func:`troubleshoot.advice.policy.decide`
    with no check left to weigh.
    """
    model = session.model
    diagnosing = True
    epoch = session.epoch
    for _ in range(max_steps):
        view = session.view
        if session.epoch != epoch:  # a repair was made (and its verification is under way)
            epoch = session.epoch
            diagnosing = checks_after_repair
        decision = view.decision
        if decision.action == Action.DONE:
            return "left-failed" if equipment.top_fails(session.repairs) else "confirmed"
        request = view.repair_verification
        if request is not None:  # every repair is verified as the session asks
            if request.target == model.top:
                result = int(equipment.top_fails(session.repairs))
            else:
                result = equipment.answer(request.target, session.repairs)
            session.record_verification(result)
            continue
        if diagnosing:
            choice = strategy.choose(view, rng)
            if choice is not None:
                session.record_finding(choice, equipment.answer(choice, session.repairs))
                continue
            diagnosing = checks_after_repair
        finish = strategy.finish(view)
        if finish.action == Action.ESCALATE:
            return "escalated"
        if finish.action == Action.VERIFY:
            # The repair's own check read abnormal, yet the unit may work: the strategy tries it.
            assert view.unit_in_doubt is not None, "only a unit in doubt is verified outside a repair's verification"
            session.record_verification(int(equipment.top_fails(session.repairs)))
            continue
        session.record_repair(finish.target)
    return "capped"


# ---------------------------------------------------------------- many cases


@dataclass(frozen=True)
class StrategySummary:
    """Statistics of one strategy over the cases.

    Attributes
    ----------
    mean_cost, sd_cost : float
        In the model's cost unit (sd with n - 1).
    ci95 : tuple of float
        mean +- 1.96 sd / sqrt(n): the normal approximation to the 95%
        interval of the mean.
    mean_checks : float
        Checks per case.
    accuracy : float
        Share of cases whose first repair was of a truly failed root.
    wrong_repairs : float
        Wrong repairs (of a root that had not failed) per case.
    outcomes : dict
        Count of cases by outcome (:data:`OUTCOMES`).
    costs : tuple of float
        Every case's cost, in case order (for the plot).
    faults_known : tuple of float
        Every case's cost with its faults known (:func:`faults_known_cost`), in case order.
    """

    name: str
    cases: int
    mean_cost: float
    sd_cost: float
    ci95: tuple[float, float]
    mean_checks: float
    accuracy: float
    wrong_repairs: float
    outcomes: dict
    costs: tuple[float, ...]
    faults_known: tuple[float, ...] = ()


def summarise(name: str, results: list[CaseResult]) -> StrategySummary:
    """Mean cost with its 95% interval (normal approximation), checks, accuracy, wrong repairs."""
    costs = np.array([r.cost for r in results], dtype=float)
    n = len(costs)
    mean = float(costs.mean()) if n else math.nan
    sd = float(costs.std(ddof=1)) if n > 1 else 0.0
    half = Z95 * sd / math.sqrt(n) if n else math.nan
    outcomes = {k: 0 for k in OUTCOMES}
    for r in results:
        outcomes[r.outcome] += 1
    return StrategySummary(
        name=name, cases=n, mean_cost=mean, sd_cost=sd, ci95=(mean - half, mean + half),
        mean_checks=float(np.mean([r.checks for r in results])) if n else math.nan,
        accuracy=float(np.mean([r.first_repair_right for r in results])) if n else math.nan,
        wrong_repairs=float(np.mean([r.wrong_repairs for r in results])) if n else math.nan,
        outcomes=outcomes, costs=tuple(float(c) for c in costs),
        faults_known=tuple(float(r.faults_known) for r in results),
    )


@dataclass(frozen=True)
class SimulationJob:
    """Everything a worker needs to run cases (sent once per piece of work; compiled once per process)."""

    model: Model
    strategy_specs: tuple
    seed: int
    settings: SessionSettings
    checks_after_repair: bool = True
    truth: Model | None = None
    logs: bool = False


# Per worker process: the last job's engines, strategies and view memos, built once.
_WORKER: dict = {}


def _worker_for(job: SimulationJob) -> dict:
    from troubleshoot.study.strategies import make_strategy

    if _WORKER.get("job") != job:
        _WORKER.clear()
        _WORKER["job"] = job
        _WORKER["engine"] = _SimulationEngine(job.model)
        _WORKER["truth"] = _SimulationEngine(job.truth) if job.truth is not None else _WORKER["engine"]
        _WORKER["draws"] = {}
        _WORKER["strategies"] = [make_strategy(name, policy) for name, policy in job.strategy_specs]
        # A record's view is the same whichever strategy met it: one memo for them all.
        _WORKER["views"] = ViewMemo(VIEWS_PER_WORKER)
    return _WORKER


def _scratch_log() -> str:
    """A new private file for a session log being written, in memory where the system offers it."""
    import tempfile

    base = "/dev/shm" if os.path.isdir("/dev/shm") and os.access("/dev/shm", os.W_OK) else None
    handle, path = tempfile.mkstemp(prefix="troubleshoot-sim-", suffix=".jsonl", dir=base)
    os.close(handle)
    os.unlink(path)  # the log writer creates it afresh, exclusively
    return path


def _run_one_case(case: int, job: SimulationJob) -> tuple[list[CaseResult], bytes | None]:
    """Every strategy on one case; with ``job.logs``, the first strategy's session log as bytes."""
    from troubleshoot.session.logfile import LogWriter, create_log_file

    state = _worker_for(job)
    engine = state["engine"]
    # The unit obeys the truth (its faults and its checks' answers); the sessions reason with the model.
    equipment = draw_case(state["truth"], job.seed, case, state["draws"])
    known = faults_known_cost(job.model, equipment)  # priced as the sessions price it
    out, log_bytes = [], None
    for index, strategy in enumerate(state["strategies"]):
        # Each strategy gets its own copy of the case's strategy stream, so
        # adding a strategy never changes another one's draws.
        rng = case_generator(job.seed, case, STREAM_STRATEGY)
        writer = None
        factory = None
        if job.logs and index == 0:
            path = _scratch_log()

            def factory(session, path=path):
                nonlocal writer
                session.model_path = job.model.source
                log_path, fd = create_log_file(path)
                writer = LogWriter(log_path, fd)
                writer.write_header(session)
                return writer
        try:
            out.append(replace(run_case(engine, strategy, equipment, rng, job.settings,
                                        checks_after_repair=job.checks_after_repair, log=factory,
                                        views=state["views"]), faults_known=known))
        finally:
            if writer is not None:
                writer.close()
                try:
                    with open(writer.path, "rb") as fh:
                        log_bytes = fh.read()
                finally:
                    os.unlink(writer.path)
    return out, log_bytes


def _run_cases(span: tuple[int, int], job: SimulationJob) -> list[tuple[list[CaseResult], bytes | None]]:
    """One piece of work: the cases ``span[0]`` to ``span[1] - 1``."""
    return [_run_one_case(case, job) for case in range(span[0], span[1])]


#: Cases per piece of work (fixed, so the pieces do not depend on the workers).
CASES_PER_PIECE = 16


def simulate(model: Model, cases: int, seed: int, strategy_specs: list[tuple[str, Any]],
             settings: SessionSettings | None = None, workers: int = 1, progress=None,
             checks_after_repair: bool = True, *, truth: Model | None = None, log_sink=None,
             executor=None) -> dict[str, list[CaseResult]]:
    """Run every strategy on the same ``cases`` sampled units.

    Parameters
    ----------
    model : Model
        The model the sessions reason with.
    cases : int
    seed : int
        Non-negative; case i draws only from (seed, i).
    strategy_specs : list of (name, policy or None)
        ``policy`` is the table of the ``optimal`` strategy, None for the others.
    settings : SessionSettings, optional
        Default: :func:`~troubleshoot.session.settings_for` the model.
    workers : int
        Local processes when no ``executor`` is given; 1 runs in this process.
        The results are the same for any count.
    progress : callable, optional
        Called with (cases done, cases) now and then.
    checks_after_repair : bool
        See :func:`run_case`; False is the repair-only protocol of :mod:`troubleshoot.study.optimal`.
    truth : Model, optional
        The units' faults and the checks' answers are drawn from this model
        (same ids as ``model``) instead of ``model``: a fleet whose real
        figures differ from the model's, to test learning against a known truth.
    log_sink : callable, optional
        Called as ``log_sink(case, data)`` as the cases finish with each unit's
        session log (the first strategy's session, bytes of a log in the
        format of :mod:`troubleshoot.session.logfile`).
    executor : optional
        From :func:`troubleshoot.study.execution.executor_for` (local
        processes or a Dask cluster); default by ``workers``.

    Returns
    -------
    dict
        Strategy name -> list of CaseResult in case order.
    """
    from troubleshoot.study.execution import chunks, executor_for

    settings = settings or settings_for(model)
    specs = list(strategy_specs)
    job = SimulationJob(model, tuple(specs), int(seed), settings, checks_after_repair, truth, log_sink is not None)
    spans = [(piece[0], piece[-1] + 1) for piece in chunks(range(cases), CASES_PER_PIECE)]
    report = None
    if progress is not None:
        step, shown = max(1, cases // 20), [0]

        def report(done: int, total: int) -> None:
            now = min(cases, done * CASES_PER_PIECE)
            if now // step > shown[0] or done == total:
                shown[0] = now // step
                progress(now, cases)
    own = executor is None
    executor = executor_for(workers if workers and workers > 1 and cases > 1 else None) if own else executor

    def keep(index: int, piece) -> list:
        # Logs are written as each piece returns, so they never pile up in memory.
        start = spans[index][0]
        for offset, (_, log_bytes) in enumerate(piece):
            if log_sink is not None and log_bytes is not None:
                log_sink(start + offset, log_bytes)
        return [results for results, _ in piece]

    try:
        pieces = executor.map(_run_cases, spans, job, progress=report, on_result=keep)
    finally:
        if own:
            executor.close()
    per_case = [results for piece in pieces for results in piece]
    return {name: [row[i] for row in per_case] for i, (name, _) in enumerate(specs)}


def default_workers() -> int:
    """The cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not every platform has it
        return max(1, os.cpu_count() or 1)
