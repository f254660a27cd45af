"""What to do next: check, repair, verify, escalate or stop, with the reasons.

One pure function, :func:`decide`, holds the tool's decision rule. Given the
model (through its engine), the posterior after the findings and repairs so
far, the checks still available and the settings, it weighs

- the best few checks by bits per cost, each followed by the best way to
  finish (one check, or two, ahead), leaving out a check that reads only
  parts which cannot matter now (:func:`reads_only_idle_parts`),
- repairing the next suspect in the repair order (and, when escalation has
  a price, escalating after some of the repairs), and
- escalating at once (the cause may lie outside the model),

by their expected cost to finish, and returns a :class:`Decision`: the
action, its target, its expected cost, the alternatives weighed and the
reasons in structured form and in plain words. The session, the simulator,
the baseline strategies and the exact optimal policy call it or its parts
(:mod:`troubleshoot.advice.repair`); none re-derives a decision.

Status, in this order of precedence:

``confirmed``
    The verification after the last repair says the unit works: done.
``awaiting-verification``
    A repair was made and not yet verified: verify. Also when the repair's
    own check read abnormal but the unit may work all the same and trying
    it is expected to cost less than going on (:func:`weigh_unit_check`).
``isolated``
    A suspect (not repaired) has P(failed | findings) >= the isolation
    threshold: repair it (or escalate, when it is a cause outside the model
    or escalating is cheaper).
``ambiguity``
    No remaining check is worth doing (none gives at least ``min_bits``
    bits, none of the best few is expected to cost less than it saves, or
    none is left): repair in the repair order, or escalate.
``diagnosing``
    Otherwise: do the recommended check.

Escalation. A model of format 1.1 may price escalation (``<escalation>``
under the top event); it is then one more alternative, weighed by cost like
the others. While informative checks lie beyond the lookahead, a check is
weighed against repairing first (escalating later if cheaper), not against
escalating at once: one step ahead undervalues the checks after it. When
every informative check left is within the horizon (at most
:data:`FULL_HORIZON`), every order of them is weighed to the end and
escalating at once is weighed like any other course (:func:`complete_cost`).
Without a price, escalation is never chosen by cost. With or
without a price, when the probability that the cause lies outside the model
(every unlisted cause together) reaches the isolation threshold, the
decision is to escalate: no listed repair is expected to put the unit right.

References
----------
D. Heckerman, J. S. Breese and K. Rommelse, "Decision-theoretic
troubleshooting", Communications of the ACM 38(3), 1995 (observation versus
repair by expected cost; the myopic rule and its lookahead).
J. B. Kadane and H. A. Simon, "Optimal strategies for a class of constrained
sequential problems", Annals of Statistics 5(2), 1977 (repair order).
"""

from __future__ import annotations

import enum
import math
import weakref
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Protocol

import numpy as np

from troubleshoot.advice.diagnosis import Suspect, ambiguity_group, hypotheses_of, isolated_suspect, suspects
from troubleshoot.advice.ranking import Ranking, RankRow, rank
from troubleshoot.advice.repair import (
    RepairPlan,
    VerificationRequest,
    plan_from_reached,
    repair_cost,
    repair_plan,
    repair_plan_of,
    top_verification,
    verification_cost,
)
from troubleshoot.engine.inference import AnyPosterior, Engine, Finding
from troubleshoot.errors import ImpossibleFindings, SessionError
from troubleshoot.model import DERIVED, Model
from troubleshoot.model.gates import gate_values

#: Default: a check giving less than this many bits is not worth doing.
DEFAULT_MIN_BITS = 0.01
#: Default: suspects at or above this posterior form the ambiguity group.
DEFAULT_GROUP_MIN_P = 0.05
DEFAULT_VALUE_LOOKAHEAD = 3
DEFAULT_VALUE_DEPTH = 1
DEFAULT_VALUE_RUN = 8


class CheckList(Protocol):
    """What the decision reads of a ranking: the checks worth doing, best first (a :class:`Ranking`, or
    one less the checks that cannot matter now)."""

    def worth_doing(self, min_bits: float) -> Sequence[RankRow]: ...


class Status(enum.StrEnum):
    """Where a diagnosis stands (the values are what logs and JSON carry)."""

    DIAGNOSING = "diagnosing"
    ISOLATED = "isolated"
    AMBIGUITY = "ambiguity"
    AWAITING_VERIFICATION = "awaiting-verification"
    CONFIRMED = "confirmed"
    #: The technician handed the unit over (a session's ``escalate`` action); never returned by :func:`decide`.
    ESCALATED = "escalated"


class Action(enum.StrEnum):
    """What a decision asks for."""

    CHECK = "check"
    REPAIR = "repair"
    VERIFY = "verify"
    ESCALATE = "escalate"
    DONE = "done"


@dataclass(frozen=True)
class Settings:
    """The thresholds the policy decides with.

    Attributes
    ----------
    isolation_threshold : float
        A suspect with P(failed | findings) at or above it is isolated; the
        cause lies outside the model (escalate) when P(outside the model)
        reaches it.
    min_bits : float
        A check giving fewer bits is not worth doing (bits).
    group_min_p : float
        Suspects at or above this posterior form the ambiguity group.
    value_lookahead : int
        How many of the best-scoring checks are weighed against repairing or
        escalating (Heckerman, Breese & Rommelse 1995): of them, the one with
        the least expected cost to finish is recommended if it beats
        finishing without checks. 0 turns the comparison off (only
        ``min_bits`` decides).
    value_depth : int
        How many checks ahead the comparison looks: 1 is the myopic rule
        (one check, then finish); 2 also tries a second check after each
        outcome of the first, when no single check pays.
    value_run : int
        When no single check pays, the longest run of checks in bits-per-cost
        order, each done while the last read normal, whose expected cost to
        finish is weighed against finishing (:func:`sequence_value`); 0 or 1
        turns it off.
    value_after_repair : bool
        Value repairing the first suspect also with the diagnosis after it
        when the unit still fails (:func:`cost_of_repair_then`), at the
        decision and at every leaf of the lookahead. False leaves the repair
        plan alone: less than a third of the CPU (rooftop, 100 simulated
        units: 3.0 s against 11.2 s), for studies of something other than
        the advice (learning from many simulated sessions), at some cost in
        advice (measured in the README).
    """

    isolation_threshold: float = 0.95
    min_bits: float = DEFAULT_MIN_BITS
    group_min_p: float = DEFAULT_GROUP_MIN_P
    value_lookahead: int = DEFAULT_VALUE_LOOKAHEAD
    value_depth: int = DEFAULT_VALUE_DEPTH
    value_run: int = DEFAULT_VALUE_RUN
    value_after_repair: bool = True

    def validated(self) -> Settings:
        for name in ("isolation_threshold", "group_min_p"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and 0.0 < value <= 1.0):
                raise SessionError(f"{name.replace('_', ' ')} must be a probability above 0 and at most 1, "
                                   f"not {value!r}")
        if not (isinstance(self.min_bits, (int, float)) and 0.0 <= self.min_bits < math.inf):
            raise SessionError(f"min bits must be a number of bits, 0 or more, not {self.min_bits!r}")
        if not (isinstance(self.value_depth, int) and 1 <= self.value_depth <= 3):
            raise SessionError(f"value depth must be 1, 2 or 3 checks, not {self.value_depth!r}")
        if not (isinstance(self.value_run, int) and 0 <= self.value_run <= 20):
            raise SessionError(f"value run must be a whole number of checks from 0 to 20, not {self.value_run!r}")
        if not (isinstance(self.value_lookahead, int) and 0 <= self.value_lookahead <= 50):
            raise SessionError(f"value lookahead must be a whole number of checks from 0 to 50, "
                               f"not {self.value_lookahead!r}")
        if not isinstance(self.value_after_repair, bool):
            raise SessionError(f"value after repair must be true or false, not {self.value_after_repair!r}")
        return replace(self, isolation_threshold=float(self.isolation_threshold),
                       min_bits=float(self.min_bits), group_min_p=float(self.group_min_p))


def settings_for(model: Model, isolation_threshold: float | None = None, min_bits: float | None = None,
                 group_min_p: float | None = None, value_lookahead: int | None = None,
                 value_depth: int | None = None, value_run: int | None = None,
                 value_after_repair: bool | None = None) -> Settings:
    """Settings with the model's isolation threshold and the defaults, overridden where given."""
    return Settings(
        model.isolation_threshold if isolation_threshold is None else isolation_threshold,
        DEFAULT_MIN_BITS if min_bits is None else min_bits,
        DEFAULT_GROUP_MIN_P if group_min_p is None else group_min_p,
        DEFAULT_VALUE_LOOKAHEAD if value_lookahead is None else value_lookahead,
        DEFAULT_VALUE_DEPTH if value_depth is None else value_depth,
        DEFAULT_VALUE_RUN if value_run is None else value_run,
        True if value_after_repair is None else value_after_repair,
    ).validated()


# ---------------------------------------------------------------- the figures


@dataclass(frozen=True)
class OutsideModel:
    """The probability that the cause lies outside the model.

    Attributes
    ----------
    p : float
        P(at least one unlisted cause has occurred | findings), exactly.
    by_gate : tuple of (gate id, float)
        P(that gate's unlisted cause has occurred | findings), per OR gate
        with unlisted causes, in model order.
    """

    p: float
    by_gate: tuple[tuple[str, float], ...]


def _given(engine: Engine, posterior: AnyPosterior, extra: tuple[Finding, ...],
           repairs: tuple[str, ...] = ()) -> tuple[float, AnyPosterior | None]:
    """P(extra findings | e), after ``repairs`` more, and the posterior given them (None where impossible).

    P(e, extra) / P(e) from one propagation; 0 (and no posterior) when the
    engine finds the extra findings impossible.
    """
    try:
        after = engine.propagate(tuple(posterior.findings) + extra, tuple(posterior.repairs) + repairs)
    except ImpossibleFindings:
        return 0.0, None
    return math.exp(min(0.0, after.log_p - posterior.log_p)), after


def _fails_after(engine: Engine, posterior: AnyPosterior, repairs: tuple[str, ...]) -> tuple[float, AnyPosterior | None]:
    """P(the unit still fails after ``repairs`` more | e), and the posterior given that (:func:`_given`)."""
    return _given(engine, posterior, (Finding(posterior.model.top, 1, posterior.epoch + len(repairs)),), repairs)


def outside_model(engine: Engine, posterior: AnyPosterior) -> OutsideModel:
    """P(the cause lies outside the model) in total and per gate.

    Notes
    -----
    The total is 1 - P(no unlisted cause | e) = 1 - P(e, none) / P(e): one
    propagation with every unlisted-cause event observed absent.
    """
    model = posterior.model
    unlisted = [r for r in model.hypotheses if r not in model.event_by_id]
    if not unlisted:
        return OutsideModel(0.0, ())
    by_gate = tuple((r[: -len(DERIVED + "unlisted")], posterior.p_failed(r)) for r in unlisted)
    p_none, _ = _given(engine, posterior, tuple(Finding(r, 0, 0) for r in unlisted))
    return OutsideModel(min(1.0, max(0.0, 1.0 - p_none)), by_gate)


def escalation_price(model: Model) -> float | None:
    """What escalating costs in the model's unit, or None when the model gives no price."""
    return None if model.escalation is None else float(model.escalation.cost)


def escalation_charge(model: Model) -> float:
    """What an escalation is charged in a study (simulation, exact policy), in the model's unit.

    The model's price when it gives one; otherwise its dearest repair with
    that repair's verification (at least the verification of the unit), a
    stand-in so that handing a unit over is never free in a comparison of
    strategies. The live tool never chooses an unpriced escalation by cost.
    """
    if model.escalation is not None:
        return float(model.escalation.cost)
    costs = [repair_cost(model, e.id) + verification_cost(model, e.id)
             for e in model.basic_events if e.repair is not None]
    return max(costs, default=top_verification(model).cost)


def finish_plan(model: Model, ranked: tuple[Suspect, ...], settings: Settings) -> RepairPlan:
    """The expected cost of finishing without more checks (repairs in order, escalation)."""
    return repair_plan(model, ranked, settings.group_min_p, escalation_price(model))


def finish_plan_of(posterior: AnyPosterior, settings: Settings) -> RepairPlan:
    """``finish_plan(model, suspects(posterior), settings)``: the same plan, without listing the suspects.

    The lookahead needs only the plan's figures for each outcome it weighs,
    never the suspects themselves (:func:`~troubleshoot.advice.repair.repair_plan_of`).
    """
    return repair_plan_of(posterior, settings.group_min_p, escalation_price(posterior.model))


def finish_value(plan: RepairPlan) -> float:
    """What a check (or a run of checks) is weighed against: finishing by repairs first.

    Repairing in order, escalating after k >= 1 repairs when that is
    cheaper (:attr:`RepairPlan.going_on`); escalating at once is weighed
    only when no check and no run of checks pays, or when every informative
    check left is within the horizon (:func:`complete_cost`). Measured:
    capping every leaf at the escalation price (``RepairPlan.best``)
    escalates listed faults early (rooftop, 80 units of seed 2: 246.8 min
    against 232.3; booster, 60 units of seed 1: 301.4 against 293.6).
    """
    return plan.going_on


def cost_to_finish(engine: Engine, posterior: AnyPosterior, candidates: tuple[str, ...], depth: int,
                   settings: Settings) -> float:
    """Least expected cost from here looking ``depth`` checks ahead, then repairing or escalating.

    min(F(e), min over the ``value_lookahead`` best-scoring informative
    checks t of cost(t) + sum_o P(o | e) * cost_to_finish(e + o, depth - 1));
    at depth 0 it is F(e), the best of repairing in order and escalating
    (:func:`finish_plan`), and of repairing the first suspect then
    diagnosing again (:func:`cost_of_repair_then`, when
    ``settings.value_after_repair``).

    References
    ----------
    Heckerman, Breese & Rommelse 1995 (observation versus repair; the
    myopic rule is depth 1).
    """
    plan = finish_plan_of(posterior, settings)
    best = min(finish_value(plan), _repair_then(engine, posterior, plan, settings),
               _try_unit(engine, posterior, candidates, settings))
    if depth <= 0:
        return best
    for row in rank(posterior, candidates).worth_doing(settings.min_bits)[: settings.value_lookahead]:
        best = min(best, cost_of_check_then(engine, posterior, row, candidates, depth, settings, bound=best))
    return best


def cost_of_repair_then(engine: Engine, posterior: AnyPosterior, first: str, settings: Settings) -> float:
    """Expected cost of repairing ``first`` and, if the unit still fails, diagnosing again.

        c + v + P(unit still fails after the repair | e) * C(e')

    c the repair, v its verification (its own check, if any, and the unit),
    e' the findings with ``first`` repaired and the unit failing, and C(e')
    the least of escalating, repairing in order and one check (every check
    is open again after a repair) followed by either of those
    (:func:`_after_failed_repair`).

    Notes
    -----
    The repair plan (:func:`finish_plan`) makes each later repair straight
    after the one before; the tool diagnoses again after a failed repair,
    where a check (a free symptom read again, a check of the suspects left)
    may be worth much more than before it. Valuing a repair, and every leaf
    of the lookahead, by the least of the plan and this figure brought the
    tool closer to the exact optimum on demo models cut down to five basic
    events and four checks (rooftop 1.052 to 1.009 times the optimum,
    booster 1.061 to 1.009). A repair with its own check is taken to go on
    when the unit fails; the own check reading abnormal, the unit not
    tried, is not followed apart.
    """
    memo = _REPAIR_THEN.setdefault(engine, {})
    key = (posterior.findings, posterior.repairs, first, settings)
    known = memo.get(key)
    if known is not None:
        return known
    model = posterior.model
    value = repair_cost(model, first) + verification_cost(model, first)
    p_fails, failing = _fails_after(engine, posterior, (first,))
    if failing is not None and p_fails > 0.0:
        value += p_fails * _after_failed_repair(engine, failing, settings)
    if len(memo) >= REPAIR_THEN_MEMO:
        memo.clear()
    memo[key] = value
    return value


#: Figures of :func:`cost_of_repair_then` kept per engine: the lookahead meets an outcome again as
#: the next decision's own findings, and a simulation's units share their first findings.
REPAIR_THEN_MEMO = 20_000
_REPAIR_THEN: weakref.WeakKeyDictionary[Engine, dict] = weakref.WeakKeyDictionary()


def finish_now(engine: Engine, posterior: AnyPosterior, settings: Settings) -> float:
    """Least expected cost of finishing with no check first: the repair plan (escalation included), or
    repairing its first suspect and diagnosing again (:func:`cost_of_repair_then`)."""
    plan = finish_plan_of(posterior, settings)
    return min(plan.best, _repair_then(engine, posterior, plan, settings))


def _repair_then(engine: Engine, posterior: AnyPosterior, plan: RepairPlan, settings: Settings) -> float:
    """:func:`cost_of_repair_then` of the plan's first repair (inf when it has none or
    ``settings.value_after_repair`` is off)."""
    if not plan.sequence or not settings.value_after_repair:
        return math.inf
    return cost_of_repair_then(engine, posterior, plan.sequence[0], settings)


def _try_unit(engine: Engine, posterior: AnyPosterior, candidates: tuple[str, ...], settings: Settings) -> float:
    """Trying a unit in doubt, then finishing at once if it still fails: v + P(fails | e) * F(e, fails).

    inf when the unit is known to fail now (a finding on the top event since
    the last repair), which it is everywhere but after a repair whose own
    check read abnormal and before the unit is tried (:func:`weigh_unit_check`).

    Notes
    -----
    Without it the lookahead from a unit in doubt valued every outcome of
    a check as if the unit surely failed: on the rooftop demo, after the
    leak repair with the pressures still abnormal and the compressor heard,
    the free airflow symptom was valued at 544 min while repairing the
    filters (then trying the unit, which works with P = 0.62) was 235 min.
    """
    model = posterior.model
    if any(f.target == model.top and f.epoch == posterior.epoch for f in posterior.findings):
        return math.inf
    return _unit_tried(engine, posterior, candidates, settings, top_verification(model).cost, 0)[1]


def _unit_tried(engine: Engine, posterior: AnyPosterior, candidates: tuple[str, ...], settings: Settings,
                cost: float, depth: int) -> tuple[float, float]:
    """P(the unit still fails | e), and the expected cost of trying it (``cost``) and, if it still fails,
    finishing looking ``depth`` checks ahead: cost + P(fails | e) * cost_to_finish(e + fails, depth)."""
    p_fails, failing = _given(engine, posterior, (Finding(posterior.model.top, 1, posterior.epoch),))
    then = cost_to_finish(engine, failing, candidates, depth, settings) if failing is not None and p_fails > 0.0 else 0.0
    return p_fails, cost + p_fails * then


def _after_failed_repair(engine: Engine, posterior: AnyPosterior, settings: Settings) -> float:
    """Least of escalating, repairing in order and one check then either, every check open (a repair opens them)."""
    model = posterior.model
    checks = tuple(c.id for c in model.checks + model.symptoms)
    best = _finish_at_once(engine, posterior, checks, 0, settings)
    for row in rank(posterior, checks).worth_doing(settings.min_bits)[: settings.value_lookahead]:
        best = min(best, cost_of_check_then(engine, posterior, row, checks, 1, settings, bound=best,
                                            then=_finish_at_once))
    return best


def _finish_at_once(engine: Engine, posterior: AnyPosterior, candidates: tuple[str, ...], depth: int,
                    settings: Settings) -> float:
    """The repair plan's best (:attr:`RepairPlan.best`: repairing in order, escalating now or later), as a
    leaf of :func:`cost_of_check_then`."""
    return finish_plan_of(posterior, settings).best


def cost_of_check_then(engine: Engine, posterior: AnyPosterior, row: RankRow, candidates: tuple[str, ...],
                       depth: int, settings: Settings, bound: float = math.inf, then=None) -> float:
    """Expected cost of doing a check now and then the best of ``depth - 1`` more checks or finishing.

    Stops adding once the sum reaches ``bound`` (the caller only needs to
    know it is not below it). One propagation per outcome at each level.
    ``then`` values each outcome's posterior (default :func:`cost_to_finish`;
    :func:`complete_cost` for the complete horizon).
    """
    then = cost_to_finish if then is None else then
    total = row.cost
    rest = tuple(c for c in candidates if c != row.check)
    findings = tuple(posterior.findings)
    for outcome, p in enumerate(row.p_outcomes):
        if p <= 0.0:
            continue
        try:
            later = engine.propagate(findings + (Finding(row.check, outcome, posterior.epoch),), posterior.repairs)
        except ImpossibleFindings:
            continue
        total += p * then(engine, later, rest, depth - 1, settings)
        if total >= bound:
            return total
    return total


def sequence_value(engine: Engine, posterior: AnyPosterior, candidates: tuple[str, ...], settings: Settings,
                   ranking: CheckList | None = None, bound: float = math.inf) -> tuple[float, int]:
    """Expected cost of a run of checks in bits-per-cost order, stopping at the first abnormal one, then finishing.

    The run: the check with the most bits per cost; if it reads normal, the
    best of the checks left (ranked again on the new posterior), and so on,
    at most ``value_run`` checks; at the first abnormal outcome, or after
    the last check, finish by the best of repairing in order and escalating
    (F, :func:`finish_plan`). Every prefix of the run is a policy, so the
    least of their expected costs is returned, with its length (0: finish
    at once).

    Parameters
    ----------
    bound : float
        Stop lengthening the run once what it has already spent reaches it.

    Returns
    -------
    cost : float
        The least expected cost to finish over the prefixes, model's cost unit.
    length : int
        The number of checks of that prefix.

    Notes
    -----
    A one-step comparison (Heckerman, Breese & Rommelse 1995) values one
    check followed by finishing; when every single check covers a small
    share of the suspects, no check pays alone while a run of cheap ones
    does (each one that reads normal moves probability towards the rest,
    or outside the model). With a run of k checks t_1..t_k, r_j the
    probability that t_1..t_(j-1) all read normal,

        cost_k = sum_j r_j (c_j + sum_(o abnormal) P(o | ...) F(e, normal_1..j-1, o))
                 + r_(k+1) F(e, normal_1..k).

    Two propagations per check of the run (its normal outcome and each
    abnormal one).
    """
    best = finish_value(finish_plan_of(posterior, settings))
    best_k = 0
    post, rest, reach, spent = posterior, tuple(candidates), 1.0, 0.0
    limit = min(best, bound)
    for step in range(settings.value_run):
        rows = (ranking if step == 0 and ranking is not None else rank(post, rest)).worth_doing(settings.min_bits)
        if not rows:
            break
        row = rows[0]
        spent += reach * row.cost
        if spent >= limit:
            break
        findings = tuple(post.findings)
        normal = None
        for outcome, p in enumerate(row.p_outcomes):
            if p <= 0.0:
                continue
            try:
                later = engine.propagate(findings + (Finding(row.check, outcome, post.epoch),), post.repairs)
            except ImpossibleFindings:
                continue
            if outcome == 0:
                normal = later
            else:
                spent += reach * p * finish_value(finish_plan_of(later, settings))
        p_normal = row.p_outcomes[0]
        total = spent + (reach * p_normal * finish_value(finish_plan_of(normal, settings))
                         if normal is not None and p_normal > 0.0 else 0.0)
        if total < best * (1.0 - 1e-12):
            best, best_k = total, step + 1
            limit = min(best, bound)
        if normal is None or p_normal <= 0.0 or spent >= limit:
            break
        post, rest, reach = normal, tuple(c for c in rest if c != row.check), reach * p_normal
    return best, best_k


# ---------------------------------------------------------------- the decision


@dataclass(frozen=True)
class Alternative:
    """One course weighed: its action, target and expected cost to finish (model's cost unit)."""

    action: str
    target: str | None
    expected_cost: float | None


@dataclass(frozen=True)
class Reason:
    """Why the decision is what it is, as figures and in plain words.

    Attributes
    ----------
    kind : str
        ``confirmed``, ``verify``, ``unit-may-work``, ``free-check``, ``check-pays``,
        ``run-pays``, ``check-before-escalating``, ``bits-only``, ``isolated``, ``outside-model``, ``repair-cheaper``,
        ``escalation-cheaper``, ``no-check-left``, ``no-check-matters``, ``nothing-left``.
    text : str
        One short sentence for a technician.
    costs : tuple of (str, float)
        The costs compared, each named (``"check"``, ``"check then finish"``,
        ``"repair"``, ``"escalate"``...), in the model's cost unit.
    probabilities : tuple of (str, float)
        The check's outcome probabilities, or the suspect's, or P(outside
        the model), named.
    suspects : tuple of str
        The suspects involved (ids), most probable first.
    """

    kind: str
    text: str
    costs: tuple[tuple[str, float], ...] = ()
    probabilities: tuple[tuple[str, float], ...] = ()
    suspects: tuple[str, ...] = ()


@dataclass(frozen=True)
class Decision:
    """What to do next and why.

    Attributes
    ----------
    action : str
        ``check``, ``repair``, ``verify``, ``escalate`` or ``done`` (:class:`Action`).
    target : str or None
        The check, the suspect to repair or the verification's target; None
        to escalate or when done.
    expected_cost : float or None
        Expected cost to finish by this course, in the model's cost unit
        (None for an escalation the model gives no price).
    alternatives : tuple of Alternative
        Every course weighed, the chosen one included, cheapest first.
    reasons : tuple of Reason
    status : Status
    check : RankRow or None
        The recommended check (action ``check``).
    outside_model : OutsideModel
    unit : str
        The model's cost unit.
    """

    action: str
    target: str | None
    expected_cost: float | None
    alternatives: tuple[Alternative, ...]
    reasons: tuple[Reason, ...]
    status: Status
    check: RankRow | None
    outside_model: OutsideModel
    unit: str

    @property
    def reason(self) -> Reason | None:
        """The first reason, the one the decision rests on (None when there is none)."""
        return self.reasons[0] if self.reasons else None

    def to_dict(self) -> dict:
        """The ``decision`` object of ``suggest --json`` (plus the reasons)."""
        return {
            "action": str(self.action),
            "target": self.target,
            "expected_cost": _finite(self.expected_cost),
            "alternatives": [{"action": str(a.action), "target": a.target, "expected_cost": _finite(a.expected_cost)}
                             for a in self.alternatives],
            "reasons": [{"kind": r.kind, "text": r.text, "costs": dict(r.costs),
                         "probabilities": dict(r.probabilities), "suspects": list(r.suspects)}
                        for r in self.reasons],
        }


def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def _money(x: float, unit: str) -> str:
    return f"{x:.0f} {unit}" if abs(x) >= 10 else f"{x:.3g} {unit}"


def decide(engine: Engine, posterior: AnyPosterior, settings: Settings, candidates: tuple[str, ...], *,
           verification: VerificationRequest | None = None, confirmed: bool = False,
           ranking: Ranking | None = None, ranked: tuple[Suspect, ...] | None = None,
           unit_check: VerificationRequest | None = None) -> Decision:
    """The next action, with its expected cost, the alternatives weighed and the reasons.

    Parameters
    ----------
    engine : Engine
        The model's engine (the lookahead propagates the outcomes of a check).
    posterior : Posterior
        After the findings and repairs so far.
    settings : Settings
    candidates : tuple of str
        The checks that may still be done (not done since the last repair, not skipped).
    verification : VerificationRequest, optional
        The verification the last repair still awaits.
    confirmed : bool
        The last repair was verified: the unit works.
    ranking, ranked : optional
        The ranking of ``candidates`` and the suspects, when the caller has them already.
    unit_check : VerificationRequest, optional
        The unit's verification, when the unit may already work: the last
        repair's own check read abnormal and the unit has not been tried
        since (:func:`weigh_unit_check`). Verifying it is then weighed
        against the rest.

    Returns
    -------
    Decision

    Notes
    -----
    The comparison: F(e), the least expected cost of finishing without
    checks (repairs in the order of P / (repair + verification cost), and
    escalation after k >= 1 of them when it has a price), against, for each
    of the ``value_lookahead`` best checks by bits per cost,
    cost(t) + sum_o P(o | e) F(e + o) (and one or two checks deeper when no
    single check pays, ``value_depth``; then a run of checks). The least
    wins; ties go to finishing. When at most :data:`FULL_HORIZON`
    informative checks are left and escalation has a price, every order of
    them is weighed to the end against B(e), which also counts escalating
    at once (:func:`complete_cost`).

    References
    ----------
    Heckerman, Breese & Rommelse 1995; Kadane & Simon 1977.
    """
    model = posterior.model
    unit = model.cost_unit
    outside = outside_model(engine, posterior)
    if confirmed:
        return Decision(Action.DONE, None, 0.0, (Alternative(Action.DONE, None, 0.0),),
                        (Reason("confirmed", "the unit works: the repair is confirmed"),),
                        Status.CONFIRMED, None, outside, unit)
    if verification is not None:
        reason = Reason("verify", f"a repair is only done when the unit works: {verification.label} "
                                  f"({_money(verification.cost, unit)})",
                        costs=(("verify", verification.cost),))
        return Decision(Action.VERIFY, verification.target, verification.cost,
                        (Alternative(Action.VERIFY, verification.target, verification.cost),), (reason,),
                        Status.AWAITING_VERIFICATION, None, outside, unit)
    decision = _diagnose(engine, posterior, settings, candidates, ranking, ranked, outside)
    if unit_check is None:
        return decision
    return weigh_unit_check(engine, posterior, settings, candidates, unit_check, decision)


def _diagnose(engine: Engine, posterior: AnyPosterior, settings: Settings, candidates: tuple[str, ...],
              ranking: Ranking | None, ranked: tuple[Suspect, ...] | None, outside: OutsideModel) -> Decision:
    """:func:`decide` for a unit that needs no verification now: check, repair or escalate."""
    model = posterior.model
    unit = model.cost_unit
    ranked = suspects(posterior) if ranked is None else ranked
    ranking = rank(posterior, candidates) if ranking is None else ranking
    # The checks weighed: those worth doing, less those that read only parts that cannot matter now.
    shortlist = _WithoutIdleChecks(engine, posterior, ranking)
    plan = finish_plan(model, ranked, settings)
    isolated = isolated_suspect(ranked, settings.isolation_threshold)
    price = escalation_price(model)
    plan = replace(plan, diagnosed_after_first=_repair_then(engine, posterior, plan, settings))
    escalate = Alternative(Action.ESCALATE, None, price)
    first = plan.sequence[0] if plan.sequence else None
    repair = Alternative(Action.REPAIR, first, plan.repair_cost) if first is not None else None
    group = ambiguity_group(ranked, settings.group_min_p)
    group_ids = tuple(s.id for s in group)

    # The cause lies outside the model: no listed repair is expected to help.
    if outside.p >= settings.isolation_threshold or (isolated is not None and isolated.unlisted):
        if price is not None:
            first_check = _check_first(engine, posterior, shortlist, candidates, settings, price, outside, group_ids,
                                       [escalate] + ([repair] if repair is not None else []),
                                       f"the cause is probably outside the model (P = {outside.p:.2f})")
            if first_check is not None:
                return first_check
        by_gate = tuple((f"outside the model under {g}", p) for g, p in outside.by_gate)
        # A price comes with the model's escalation (escalation_price).
        handover = (f" ({model.escalation.label}, {_money(price, unit)})"
                    if price is not None and model.escalation is not None else "")
        text = (f"the cause is outside the model with probability {outside.p:.2f}: no listed repair is "
                f"expected to help; hand the unit over" + handover)
        reason = Reason("outside-model", text, costs=(("escalate", price),) if price is not None else (),
                        probabilities=(("outside the model", outside.p),) + by_gate,
                        suspects=tuple(s.id for s in ranked if s.unlisted and not s.repaired))
        alts = [escalate] + ([repair] if repair is not None else [])
        status = Status.ISOLATED if isolated is not None else Status.AMBIGUITY
        return Decision(Action.ESCALATE, None, price, tuple(_sorted(alts)), (reason,), status, None, outside, unit)

    finish = finish_value(plan)
    check_row, check_cost, bits_only, run = None, math.inf, False, 1
    worth = shortlist.worth_doing(settings.min_bits) if isolated is None else ()
    if worth and len(worth[:FULL_HORIZON + 1]) <= FULL_HORIZON and settings.value_lookahead > 0 and price is not None:
        # Every informative check left lies within the horizon: nothing beyond it
        # is undervalued, so escalating at once is weighed as any other course.
        finish = plan.best
        check_row, check_cost = _cheapest_check(engine, posterior, worth, candidates, len(worth), settings, finish,
                                                then=complete_cost)
    elif isolated is None:
        check_row, check_cost, bits_only = _best_check(engine, posterior, shortlist, candidates, settings, finish)
        if check_row is None and worth and settings.value_lookahead > 0 and settings.value_run > 1:
            # One check ahead undervalues a run of checks (each covering a
            # small share of the suspects): weigh the run too.
            run_cost, run = sequence_value(engine, posterior, candidates, settings, shortlist, bound=finish)
            if run >= 1 and run_cost < finish:
                check_row, check_cost = worth[0], run_cost

    alts = ([repair] if repair is not None else []) + ([escalate] if price is not None else [])
    if check_row is not None:
        alts.append(Alternative(Action.CHECK, check_row.check, check_cost if math.isfinite(check_cost) else None))
    alts = _sorted(alts)

    if check_row is not None:
        reason = _check_reason(model, check_row, check_cost, plan, finish, repair, price, bits_only, run, unit,
                               group_ids)
        return Decision(Action.CHECK, check_row.check, check_cost if math.isfinite(check_cost) else None,
                        tuple(alts), (reason,), Status.DIAGNOSING, check_row, outside, unit)

    status = Status.ISOLATED if isolated is not None else Status.AMBIGUITY
    if repair is None and price is None:
        reason = Reason("nothing-left", "no repairable suspect is left and the model gives no escalation; "
                                        "inspect beyond the model", suspects=group_ids)
        return Decision(Action.ESCALATE, None, None, tuple(alts) or (escalate,), (reason,), status, None,
                        outside, unit)
    if repair is None or (price is not None and plan.escalate_cost < plan.repair_cost):
        assert price is not None and model.escalation is not None
        text = (f"escalating ({model.escalation.label}, {_money(price, unit)}) is expected to cost less than "
                + (f"repairing in order ({_money(plan.repair_cost, unit)})" if repair is not None
                   else "anything left to repair"))
        first_check = _check_first(engine, posterior, shortlist, candidates, settings, price, outside, group_ids,
                                   alts, text, ESCALATION_DEPTH)
        if first_check is not None:
            return first_check
        reason = Reason("escalation-cheaper", text,
                        costs=(("escalate", plan.escalate_cost),) + ((("repair", plan.repair_cost),)
                                                                     if repair is not None else ()),
                        probabilities=(("outside the model", outside.p), ("left after every repair", plan.outside_p)),
                        suspects=group_ids)
        return Decision(Action.ESCALATE, None, plan.escalate_cost, tuple(alts), (reason,), status, None,
                        outside, unit)
    assert first is not None
    p_first = next(s.p for s in ranked if s.id == first)
    label = model.label_of(first)
    if isolated is not None:
        text = f"{label} is isolated (P = {isolated.p:.2f}): repair it"
        kind = "isolated"
    elif not ranking.worth_doing(settings.min_bits):
        text = f"no check left tells the suspects apart: repair {label} first (P = {p_first:.2f})"
        kind = "no-check-left"
    elif not shortlist.worth_doing(settings.min_bits):
        text = (f"the checks left read only parts whose repair would not put the unit right now: repair {label} first "
                f"(P = {p_first:.2f})")
        kind = "no-check-matters"
    else:
        text = (f"no check is expected to save more than it costs: repair {label} first "
                f"(P = {p_first:.2f}, expected {_money(plan.repair_cost, unit)} to finish)")
        kind = "repair-cheaper"
    costs = (("repair", plan.repair_cost),) + ((("escalate", plan.escalate_cost),) if price is not None else ())
    reason = Reason(kind, text, costs=costs, probabilities=((first, p_first),), suspects=group_ids or (first,))
    return Decision(Action.REPAIR, first, plan.repair_cost, tuple(alts), (reason,), status, None, outside, unit)


def _check_first(engine: Engine, posterior: AnyPosterior, ranking: CheckList, candidates: tuple[str, ...],
                 settings: Settings, price: float, outside: OutsideModel, group_ids: tuple[str, ...],
                 alternatives: list[Alternative], lead: str, depth: int = 1) -> Decision | None:
    """The decision to do a check before escalating (:func:`_check_before_escalating`), or None when none pays.

    ``lead`` says why escalating was the course before the check was weighed;
    ``alternatives`` are the other courses weighed; ``depth`` how many checks deep to look.
    """
    row, ahead = _check_before_escalating(engine, posterior, ranking, candidates, settings, price, depth)
    if row is None:
        return None
    unit = posterior.model.cost_unit
    text = (f"{lead}, but {row.label.rstrip('.').lower()} ({_money(row.cost, unit)}) may still find a listed "
            f"one: expected {_money(ahead, unit)} to finish instead of {_money(price, unit)} for escalating now")
    reason = Reason("check-before-escalating", text,
                    costs=(("check", row.cost), ("check then finish", ahead),
                           ("finish without checking", price), ("escalate", price)),
                    probabilities=tuple(zip(row.outcomes, row.p_outcomes)) + (("outside the model", outside.p),),
                    suspects=group_ids)
    alts = _sorted(alternatives + [Alternative(Action.CHECK, row.check, ahead)])
    return Decision(Action.CHECK, row.check, ahead, tuple(alts), (reason,), Status.DIAGNOSING, row, outside, unit)


def weigh_unit_check(engine: Engine, posterior: AnyPosterior, settings: Settings, candidates: tuple[str, ...],
                     unit_check: VerificationRequest, decision: Decision) -> Decision:
    """Verify the unit first, or go on as ``decision`` says, whichever is expected to cost less.

    After a repair whose own check still reads abnormal, the unit may work
    all the same (the check's false alarm, or a cause of the check that does
    not stop the unit). Verifying it costs v and ends the case when it
    works; when it still fails, the diagnosis goes on knowing that:

        v + P(fails | e) * C(e, fails)

    C the one-step lookahead (:func:`cost_to_finish`). It is weighed against
    the figure of ``decision``, which takes the unit to fail (every figure
    of the repair plan does) and is therefore the cost of going on without
    verifying at best.

    Notes
    -----
    Measured before the change, on the rooftop demo (400 units, seed 1):
    two units whose leak repair was right had the refrigerant check's false
    alarm (3 %) twice; the tool replaced the expansion valve, then
    escalated a working unit (1,002 and 1,282 min against 267 without the
    false alarms).
    """
    model = posterior.model
    unit = model.cost_unit
    p_fails, verify_cost = _unit_tried(engine, posterior, candidates, settings, unit_check.cost, 1)
    verify = Alternative(Action.VERIFY, unit_check.target, verify_cost)
    going_on = math.inf if decision.expected_cost is None else decision.expected_cost
    alternatives = tuple(_sorted(list(decision.alternatives) + [verify]))
    if not verify_cost < going_on:
        return replace(decision, alternatives=alternatives)
    text = (f"the unit may already work (P = {1.0 - p_fails:.2f}) although the repair's own check read abnormal: "
            f"{unit_check.label.rstrip('.').lower()} ({_money(unit_check.cost, unit)}) before going on: expected "
            f"{_money(verify_cost, unit)} to finish instead of "
            + (_money(going_on, unit) if math.isfinite(going_on) else "going on without it"))
    costs = (("verify", unit_check.cost), ("verify then finish", verify_cost)) + (
        (("go on without verifying", going_on),) if math.isfinite(going_on) else ())
    reason = Reason("unit-may-work", text, costs=costs, probabilities=(("unit works", 1.0 - p_fails),),
                    suspects=decision.reason.suspects if decision.reason is not None else ())
    return Decision(Action.VERIFY, unit_check.target, verify_cost, alternatives, (reason,),
                    Status.AWAITING_VERIFICATION, None, decision.outside_model, unit)


#: When this many informative checks or fewer are left, every order of them is weighed to the end.
FULL_HORIZON = 3


def complete_cost(engine: Engine, posterior: AnyPosterior, candidates: tuple[str, ...], depth: int,
                  settings: Settings) -> float:
    """Least expected cost to finish looking ``depth`` checks ahead, escalating at once weighed too.

    min(B(e), min over the (at most :data:`FULL_HORIZON`) informative checks t of
    cost(t) + sum_o P(o | e) complete_cost(e + o, depth - 1)), B(e) the best of repairing in order and
    escalating, now or after some repairs (:attr:`RepairPlan.best` of :func:`exact_finish_plan`).

    Notes
    -----
    Used when every informative check left is within the horizon
    (:data:`FULL_HORIZON`): then no check beyond it is left out of the
    comparison, and the reason to keep escalating at once out of it (one
    step ahead undervalues the checks after it, :func:`finish_value`)
    does not hold.
    """
    plan = exact_finish_plan(engine, posterior, settings)  # the order of finish_plan_of, its first repair too
    best = min(plan.best, _repair_then(engine, posterior, plan, settings),
               _try_unit(engine, posterior, candidates, settings))
    if depth <= 0:
        return best
    for row in rank(posterior, candidates).worth_doing(settings.min_bits)[:FULL_HORIZON]:
        best = min(best, cost_of_check_then(engine, posterior, row, candidates, depth, settings, best,
                                            then=complete_cost))
    return best


#: How many of a plan's first repairs :func:`exact_finish_plan` takes from the network.
EXACT_REPAIRS = 2


def exact_finish_plan(engine: Engine, posterior: AnyPosterior, settings: Settings) -> RepairPlan:
    """:func:`finish_plan_of`, with P(the unit still fails after each of its first repairs) from the network.

    Notes
    -----
    The plan of :func:`finish_plan_of` takes one fault among the live
    suspects: repairing the first puts the unit right with its
    renormalised probability. Where two faults are likely together (one
    under each of two gates, two pumps of a 2-out-of-3 group) that
    overstates what the first repairs put right. Here, for the first
    :data:`EXACT_REPAIRS` repairs r_1..r_j of the same order,
    P(still failing) = P(e, top event failed after r_1..r_j) / P(e), one
    propagation each; the later entries keep the single-fault shape,
    scaled to meet the last exact one. Used at the leaves of the complete
    horizon (:func:`complete_cost`), where the study against the exact
    optimum measured it (`optimum-study`; README); the one-step lookahead
    keeps the single-fault plan (measured far worse with it on booster:
    466.6 min against 299.7 on 200 units of seed 1, and a propagation per
    repair per leaf).
    """
    plan = finish_plan_of(posterior, settings)
    sequence = plan.sequence
    if not sequence:
        return plan
    model = posterior.model
    single = np.array(plan.reached)
    exact = single.copy()
    n = min(EXACT_REPAIRS, len(sequence))
    for j in range(1, n + 1):
        # 0 where failing after these repairs is impossible: they surely put the unit right.
        exact[j], _ = _fails_after(engine, posterior, sequence[:j])
    if len(sequence) > n:
        scale = exact[n] / single[n] if single[n] > 0.0 else 0.0
        exact[n + 1:] = np.minimum(exact[n], single[n + 1:] * scale)
    return plan_from_reached(model, sequence, exact, escalation_price(model))


def _sorted(alts: list[Alternative]) -> list[Alternative]:
    order: dict[str, int] = {Action.CHECK: 0, Action.REPAIR: 1, Action.ESCALATE: 2}
    return sorted(alts, key=lambda a: (math.inf if a.expected_cost is None else a.expected_cost,
                                       order.get(a.action, 3)))


#: A part whose repair alone would put the unit right with less than this share of P(it has failed)
#: cannot matter now (:func:`reads_only_idle_parts`).
IDLE_FIX_SHARE = 0.05
#: A check whose outcomes move P(outside the model) by at least this much on average still matters.
IDLE_OUTSIDE_MOVE = 0.005


def reads_only_idle_parts(engine: Engine, posterior: AnyPosterior, row: RankRow) -> bool:
    """Whether every part the check reads cannot matter now, so the check is left out of the comparison.

    True when each cause of the check is a repairable basic event that is
    not a single point of failure (failed alone, it does not make the top
    event occur), repairing it alone would put the unit right with less than
    :data:`IDLE_FIX_SHARE` of P(it has failed | e), and the check's outcomes
    move P(outside the model) by less than :data:`IDLE_OUTSIDE_MOVE` on
    average. A check (or symptom) reading a gate or a part with no repair,
    and one reading a single point of failure, always matter.

    Notes
    -----
    The repair plan weighs a suspect by P(failed | e): a part that has
    failed without effect (under an AND gate, or in a voted group tested
    normal) still counts there as a possible cause, and the plan's figure
    is not linear in the posterior, so reading such a part can look like
    progress. Found by ``optimum-study --family part`` (model
    small-6-seed320236: after a 2-out-of-3 subsystem tested normal, the
    tool inspected one of its parts; 1.0674 times the optimum, 1.0086
    with this rule). Keeping a check that moves P(outside the model)
    leaves the hand-over's information alone. Cost: one propagation per
    cause whose repair is weighed, and one per outcome and one per
    outcome's P(outside) for the checks that get that far.
    """
    model = posterior.model
    check = model.check_by_id.get(row.check)
    if check is None or not check.causes:
        return False
    causes = tuple(cause.target for cause in check.causes)
    for r in causes:
        event = model.event_by_id.get(r)
        if event is None or event.repair is None:
            return False
    if any(_single_points(model, causes)):
        return False
    for r in causes:
        p = posterior.p_failed(r)
        if p <= 0.0:
            continue
        p_fails, _ = _fails_after(engine, posterior, (r,))
        if 1.0 - p_fails >= IDLE_FIX_SHARE * p:
            return False
    if not any(hypotheses_of(model).unlisted):
        return True  # no cause outside the model to tell apart
    base = outside_model(engine, posterior).p
    moved = 0.0
    for outcome, p_outcome in enumerate(row.p_outcomes):
        if p_outcome <= 0.0:
            continue
        _, after = _given(engine, posterior, (Finding(row.check, outcome, posterior.epoch),))
        if after is not None:
            moved += p_outcome * abs(outside_model(engine, after).p - base)
    return moved < IDLE_OUTSIDE_MOVE


def _single_points(model: Model, roots: tuple[str, ...]) -> list[bool]:
    """Per root, whether it alone failed makes the top event occur (kept per model)."""
    known: dict[str, bool] = model.__dict__.setdefault("_advice_single_points", {})
    missing = [r for r in dict.fromkeys(roots) if r not in known]
    if missing:
        states = {h: np.array([h == r for r in missing]) for h in model.hypotheses}
        for r, top in zip(missing, gate_values(model, states)[model.top].tolist()):
            known[r] = bool(top)
    return [known[r] for r in roots]


class _KeptRows(Sequence):
    """The rows that ``keep`` accepts, in order, each tested only when the rows up to it are read."""

    def __init__(self, rows: tuple[RankRow, ...], keep):
        self._rows, self._keep = rows, keep
        self._tested = 0
        self._kept: list[RankRow] = []

    def _fill(self, count: float) -> None:
        while len(self._kept) < count and self._tested < len(self._rows):
            row = self._rows[self._tested]
            self._tested += 1
            if self._keep(row):
                self._kept.append(row)

    def __getitem__(self, index):
        if isinstance(index, slice):
            bounded = index.stop is not None and index.stop >= 0 and (index.start or 0) >= 0
            self._fill(index.stop if bounded else math.inf)
            return tuple(self._kept[index])
        self._fill(index + 1 if index >= 0 else math.inf)
        return self._kept[index]

    def __len__(self) -> int:
        self._fill(math.inf)
        return len(self._kept)

    def __bool__(self) -> bool:
        self._fill(1)
        return bool(self._kept)

    def __iter__(self):
        i = 0
        while True:
            self._fill(i + 1)
            if i >= len(self._kept):
                return
            yield self._kept[i]
            i += 1


class _WithoutIdleChecks:
    """A ranking whose checks worth doing leave out those that read only parts that cannot matter now
    (:func:`reads_only_idle_parts`), tested as the decision reads them."""

    def __init__(self, engine: Engine, posterior: AnyPosterior, ranking: Ranking):
        self._ranking = ranking
        self._verdicts: dict[str, bool] = {}
        self._engine, self._posterior = engine, posterior

    def _matters(self, row: RankRow) -> bool:
        verdict = self._verdicts.get(row.check)
        if verdict is None:
            verdict = self._verdicts[row.check] = not reads_only_idle_parts(self._engine, self._posterior, row)
        return verdict

    def worth_doing(self, min_bits: float) -> Sequence[RankRow]:
        return _KeptRows(self._ranking.worth_doing(min_bits), self._matters)


def _best_check(engine: Engine, posterior: AnyPosterior, ranking: CheckList, candidates: tuple[str, ...],
                settings: Settings, finish: float) -> tuple[RankRow | None, float, bool]:
    """The check to recommend, its expected cost to finish, and whether only ``min_bits`` chose it.

    A check is worth doing when it gives at least ``min_bits`` bits and,
    among the ``value_lookahead`` best-scoring such checks, it has the least
    expected cost to finish, below finishing at once (``finish``).
    """
    rows = ranking.worth_doing(settings.min_bits)
    if not rows:
        return None, math.inf, False
    if settings.value_lookahead == 0:
        return rows[0], math.inf, True
    shortlist = rows[: settings.value_lookahead]
    for row in shortlist:
        if row.cost <= 0.0:
            # A free informative check always pays.
            return row, cost_of_check_then(engine, posterior, row, candidates, 1, settings), False
    # Of the shortlist, the check with the least expected cost of finishing
    # (it, then finish), if that beats finishing at once; when no check pays
    # so, a second check ahead, so a pair worth doing is not missed.
    for depth in range(1, settings.value_depth + 1):
        best, best_cost = _cheapest_check(engine, posterior, shortlist, candidates, depth, settings, finish)
        if best is not None:
            return best, best_cost, False
    return None, math.inf, False


#: How many checks deep the tool looks before a hand-over by cost alone (every informative check at the first).
ESCALATION_DEPTH = 2


def _check_before_escalating(engine: Engine, posterior: AnyPosterior, ranking: CheckList, candidates: tuple[str, ...],
                             settings: Settings, price: float, depth: int = 1) -> tuple[RankRow | None, float]:
    """Before handing a unit over, the check worth doing first, if one is, with its expected cost to finish.

    Of the informative checks, the one with the least expected cost of
    doing it and then, per outcome, the least of escalating, finishing
    (:func:`cost_to_finish` with no check after it) and, down to ``depth``
    checks, one of the ``value_lookahead`` best-scoring checks followed the
    same way; if that is below the price. One check deep, the
    ``value_lookahead`` best-scoring checks (at least
    :data:`FULL_HORIZON`) are weighed; deeper, every informative check.
    A cheap check that may still find a listed cause (probability p,
    finishing at F) pays when c + p F + (1 - p) E < E. With no price
    escalating is no course weighed by cost, so nothing is weighed against it.

    Notes
    -----
    Found against the exact optimum on the booster demo cut down to five
    basic events and four checks: after a failed repair with every check
    normal (P outside 0.94) the tool escalated at once, where reading the
    2-minute suction gauge is expected to cost 578.7 min against 600; the
    tool went from 1.075 to 1.061 times the optimum there. Before a
    hand-over by cost alone (``escalation-cheaper``), :data:`ESCALATION_DEPTH`
    checks deep over every check: on the booster demo, where two pumps down
    at once (two of three needed) look like a cause outside the model until
    a second pump's checks are read, the tool handed fewer listed faults
    over (``simulate booster --cases 200 --seed 1``: 293.7 min to 284.4,
    the tool's CPU 52 s to 136 s, a hand-over weighed in about 1.5 to
    2 s). With the cause probably outside the model, two deep over every
    check changed no figure on either demo and cost rooftop's simulation
    1.4 times its CPU, so there it stays one deep.
    """
    if settings.value_lookahead <= 0:
        return None, math.inf

    def then(engine: Engine, later: AnyPosterior, rest: tuple[str, ...], depth: int, settings: Settings) -> float:
        best = min(price, cost_to_finish(engine, later, rest, 0, settings))
        if depth <= 0:
            return best
        for row in rank(later, rest).worth_doing(settings.min_bits)[: settings.value_lookahead]:
            best = min(best, cost_of_check_then(engine, later, row, rest, depth, settings, bound=best, then=then))
        return best

    rows = ranking.worth_doing(settings.min_bits)
    if depth <= 1:
        rows = rows[: max(settings.value_lookahead, FULL_HORIZON)]
    return _cheapest_check(engine, posterior, rows, candidates, depth, settings, price, then=then)


def _cheapest_check(engine: Engine, posterior: AnyPosterior, rows, candidates: tuple[str, ...], depth: int,
                    settings: Settings, finish: float, then=None) -> tuple[RankRow | None, float]:
    """Of ``rows``, the check whose cost of doing it, then ``then`` (:func:`cost_of_check_then`), is least,
    with that cost, if it is below ``finish``; else (None, inf)."""
    best, best_cost = None, finish
    for row in rows:
        ahead = cost_of_check_then(engine, posterior, row, candidates, depth, settings, best_cost, then=then)
        if ahead < best_cost:
            best, best_cost = row, ahead
    return best, (best_cost if best is not None else math.inf)


def _check_reason(model: Model, row: RankRow, ahead: float, plan: RepairPlan, finish: float,
                  repair: Alternative | None, price: float | None, bits_only: bool, run: int, unit: str,
                  group: tuple[str, ...]) -> Reason:
    odds = tuple(zip(row.outcomes, row.p_outcomes))
    if bits_only:
        text = f"{_money(row.cost, unit)} for {row.bits:.2f} bits about the fault ({row.label})"
        return Reason("bits-only", text, costs=(("check", row.cost),), probabilities=odds, suspects=group)
    if row.cost <= 0.0:
        return Reason("free-check", f"{row.label} costs nothing and tells the suspects apart",
                      costs=(("check", 0.0),), probabilities=odds, suspects=group)
    if repair is not None and finish == plan.repair_cost:
        first = repair.target or ""
        job = model.event_by_id[first].repair if first in model.event_by_id else None
        against = (f"a {_money(job.cost, unit)} {job.label.lower()}" if job is not None
                   else f"repairing {model.label_of(first)}")
    else:
        against = "escalating" if price is not None else "repairing"
    # The figure counts this check (or run) and then repairs, no check after it: while a
    # check beats repairing the tool goes on checking even where that figure is above the
    # escalation price (finish_value); say so rather than leave the two figures at odds.
    above = (f"; escalating ({_money(price, unit)}) is below that figure, but it counts no check after "
             + ("the run" if run > 1 else "this one") + ", so the tool checks on while a check beats repairing"
             if price is not None and ahead > price else "")
    escalate_cost = (("escalate", price),) if above and price is not None else ()
    if run > 1:
        # Chosen for the run it starts (sequence_value): say so, with the run's figures.
        text = (f"{_money(row.cost, unit)} to {row.label.rstrip('.').lower()}, the first of up to {run} checks "
                f"before {against}: expected {_money(ahead, unit)} to finish instead of {_money(finish, unit)}"
                + above)
        costs = (("check", row.cost), ("checks then finish", ahead), ("finish without checking", finish)) + escalate_cost
        return Reason("run-pays", text, costs=costs, probabilities=odds, suspects=group)
    text = (f"{_money(row.cost, unit)} to {row.label.rstrip('.').lower()} before {against}: expected "
            f"{_money(ahead, unit)} to finish instead of {_money(finish, unit)}" + above)
    costs = (("check", row.cost), ("check then finish", ahead), ("finish without checking", finish)) + escalate_cost
    return Reason("check-pays", text, costs=costs, probabilities=odds, suspects=group)
