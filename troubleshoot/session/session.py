"""A diagnosis session: the one imperative core every front end drives.

A :class:`Session` holds the findings, skips, repairs, verifications and
notes of one diagnosis of one unit. Every action is validated first (the new
posterior is computed before anything changes), refused with a
:class:`~troubleshoot.errors.SessionError` or
:class:`~troubleshoot.errors.ImpossibleFindings` that leaves the session as it
was, then committed, written to the session log (when there is one) and
undoable. Each action costs one propagation; the ranking, suspects and
remaining entropy are computed from it once and cached.

The command line, the terminal UI and the simulator only call the methods
below and read :attr:`Session.state` (plain Python data, no numpy).

Actions are typed (:mod:`troubleshoot.session.actions`: one dataclass each);
:meth:`Session.apply` takes one (or the dict the log stores) and calls the
method: ``record_finding``, ``retract_finding``, ``correct_finding``,
``skip_check``, ``unskip_check``, ``record_repair``, ``record_verification``,
``add_note``, ``acknowledge_caution``, ``escalate``, ``undo``, ``record_resume``.
:attr:`Session.actions` lists them in order as committed.

Status, in this order of precedence:

``escalated``
    The technician handed the unit over (:meth:`Session.escalate`); the
    session is finished: only a note, or undo, is accepted.
``confirmed``
    The verification after the last repair says the unit works.
``awaiting-verification``
    A repair was recorded and not yet verified; or its own check read
    abnormal, the unit may work all the same, and the policy finds trying it
    cheaper than going on (:func:`troubleshoot.advice.policy.weigh_unit_check`).
``isolated``
    A suspect (not repaired) has P(failed | findings) >= the isolation threshold.
``ambiguity``
    No remaining check is worth doing (none gives at least ``min_bits`` bits,
    none of the best few is expected to save more than it costs, or none is left):
    the suspects with P >= ``group_min_p`` form the ambiguity group; repair
    them in :attr:`SessionState.repair_order`.
``diagnosing``
    Otherwise: do :attr:`SessionState.next_check`.

References
----------
Heckerman, Breese & Rommelse, "Decision-theoretic troubleshooting",
Communications of the ACM 38(3), 1995 (observe, repair, verify).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace
from functools import cached_property
from collections.abc import Iterable
from typing import Any, Protocol

from troubleshoot.advice.diagnosis import (
    Explanation,
    Suspect,
    ambiguity_group,
    entropy_bits,
    is_unlisted,
    isolated_suspect,
    most_probable_explanation,
    suspects,
)
from troubleshoot.advice.explain import Why, explain_check
from troubleshoot.advice.policy import Action as Course
from troubleshoot.advice.policy import (
    DEFAULT_GROUP_MIN_P,
    DEFAULT_MIN_BITS,
    DEFAULT_VALUE_DEPTH,
    DEFAULT_VALUE_LOOKAHEAD,
    Alternative,
    Decision,
    OutsideModel,
    Reason,
    Status,
    cost_of_check_then,
    decide,
    escalation_price,
    finish_now,
    outside_model,
)
from troubleshoot.advice.policy import Settings as SessionSettings
from troubleshoot.advice.policy import settings_for
from troubleshoot.advice.ranking import Ranking, RankRow, rank
from troubleshoot.advice.repair import (
    RepairStep,
    VerificationRequest,
    repair_order,
    top_verification,
    verification_for,
    verification_of,
)
from troubleshoot.engine.inference import AnyPosterior, Engine, Finding
from troubleshoot.errors import SessionError
from troubleshoot.model import DERIVED, Model
from troubleshoot.session.actions import (
    EVENTS,
    JobDetails,
    AcknowledgeCaution,
    Action,
    AddNote,
    CorrectFinding,
    Escalate,
    RecordFinding,
    RecordRepair,
    RecordVerification,
    Resume,
    RetractFinding,
    SkipCheck,
    Undo,
    UnskipCheck,
    as_action,
    describe,
)

DIAGNOSING = Status.DIAGNOSING
ISOLATED = Status.ISOLATED
AMBIGUITY = Status.AMBIGUITY
AWAITING_VERIFICATION = Status.AWAITING_VERIFICATION
CONFIRMED = Status.CONFIRMED
ESCALATED = Status.ESCALATED
STATUSES = tuple(Status)

__all__ = ["DEFAULT_GROUP_MIN_P", "DEFAULT_MIN_BITS", "DEFAULT_VALUE_DEPTH", "DEFAULT_VALUE_LOOKAHEAD",
           "SessionSettings", "settings_for", "Status", "Decision"]

# Kinds of recorded observations.
COMPLAINT, OBSERVATION, VERIFICATION = "complaint", "finding", "verification"


@dataclass(frozen=True)
class Observation:
    """A recorded observation and why it was made."""

    finding: Finding
    kind: str  # COMPLAINT, OBSERVATION or VERIFICATION


@dataclass(frozen=True)
class Record:
    """What a session holds between actions (immutable; undo keeps the earlier ones)."""

    observations: tuple[Observation, ...]
    repairs: tuple[str, ...] = ()
    skipped: tuple[tuple[str, str], ...] = ()
    notes: tuple[str, ...] = ()
    escalated: bool = False

    @property
    def findings(self) -> tuple[Finding, ...]:
        return tuple(o.finding for o in self.observations)

    @property
    def epoch(self) -> int:
        return len(self.repairs)


@dataclass(frozen=True)
class FindingView:
    """A finding as a person reads it."""

    target: str
    label: str
    outcome: str
    outcome_index: int
    epoch: int
    kind: str
    cost: float


@dataclass(frozen=True)
class SessionState:
    """Everything a front end shows, as plain data (floats, strings, tuples).

    Attributes
    ----------
    status : str
        One of :data:`STATUSES`.
    ranking : tuple of RankRow
        Candidate checks, best first.
    next_check : RankRow or None
        The recommended check while diagnosing.
    suspects : tuple of Suspect
        Every hypothesis, most probable first.
    entropy_bits : float
        Remaining uncertainty H(F | findings) in bits.
    log_p_findings : float
        Natural log of P(findings).
    findings : tuple of FindingView
        Every observation so far, the complaint first.
    repairs : tuple of str
    skipped : tuple of (check id, reason)
    notes : tuple of str
    cost_spent : float
        Checks, repairs, verifications and (once escalated) the escalation's
        price so far, in ``cost_unit``.
    cost_unit : str
    isolated : Suspect or None
    ambiguity_group : tuple of Suspect or None
        Only when the status is ``ambiguity``.
    repair_order : tuple of RepairStep
        Over the unrepaired suspects with P >= group_min_p, best first.
    verification : VerificationRequest or None
        What to check now, when awaiting verification.
    cautions : tuple of str
        Safety cautions for what is asked next.
    epoch : int
        Repairs made so far.
    settings : SessionSettings
    why : Why or None
        Why the recommended check is worth doing (only from
        :meth:`Session.explained_state`; None when no check is recommended).
    decision : Decision or None
        What to do next, its expected cost, the alternatives weighed and why
        (:func:`troubleshoot.advice.policy.decide`).
    outside_model_p : float
        P(the cause lies outside the model | findings): every unlisted cause together.
    outside_model_by_gate : tuple of (gate id, float)
        The same per gate with unlisted causes.
    """

    status: str
    ranking: tuple[RankRow, ...]
    next_check: RankRow | None
    suspects: tuple[Suspect, ...]
    entropy_bits: float
    log_p_findings: float
    findings: tuple[FindingView, ...]
    repairs: tuple[str, ...]
    skipped: tuple[tuple[str, str], ...]
    notes: tuple[str, ...]
    cost_spent: float
    cost_unit: str
    isolated: Suspect | None
    ambiguity_group: tuple[Suspect, ...] | None
    repair_order: tuple[RepairStep, ...]
    verification: VerificationRequest | None
    cautions: tuple[str, ...]
    epoch: int
    settings: SessionSettings
    why: Why | None = None
    decision: Decision | None = None
    outside_model_p: float = 0.0
    outside_model_by_gate: tuple[tuple[str, float], ...] = ()
    #: The unit's verification while the unit is in doubt (:attr:`SessionView.unit_in_doubt`), advised or not.
    unit_check: VerificationRequest | None = None

    def to_dict(self) -> dict:
        """The state as JSON-ready dicts and lists (an infinite score becomes None)."""
        data = asdict(replace(self, decision=None))
        data["decision"] = self.decision.to_dict() if self.decision is not None else None
        for row in list(data["ranking"]) + ([data["next_check"]] if data["next_check"] else []):
            if math.isinf(row["score"]):
                row["score"] = None
        for step in data["repair_order"]:
            if step["ratio"] is not None and math.isinf(step["ratio"]):
                step["ratio"] = None
        return data


class SessionLogWriter(Protocol):
    """What a session needs from its log (see :class:`troubleshoot.session.logfile.LogWriter`)."""

    def write_action(self, action: Action, view: SessionView) -> None: ...

    def close(self) -> None: ...


class SessionView:
    """A record with its posterior and everything derived from it (computed once, lazily)."""

    def __init__(self, model: Model, engine: Engine, settings: SessionSettings, record: Record,
                 posterior: AnyPosterior):
        self.model = model
        self.engine = engine
        self.settings = settings
        self.record = record
        self.posterior = posterior

    @cached_property
    def verification_request(self) -> VerificationRequest | None:
        """What to check now to verify the last repair, or None.

        The verification every repair asks for (:attr:`repair_verification`),
        or the unit's, when its own check read abnormal but the policy finds
        trying the unit cheaper than going on (:attr:`unit_in_doubt`).
        """
        required = self.repair_verification
        if required is not None:
            return required
        if self.unit_in_doubt is not None and self.decision.action == Course.VERIFY:
            return self.unit_in_doubt
        return None

    @cached_property
    def repair_verification(self) -> VerificationRequest | None:
        """The verification the last repair asks for, or None.

        First the repair's own check, if the model names one; when that reads
        normal, the unit itself (the top event), because only a working unit
        confirms the repair. A verifying check that still reads abnormal, or
        a unit that still fails, sends the diagnosis on.
        """
        rec = self.record
        if not rec.repairs or rec.escalated:
            return None
        done = [o for o in rec.observations if o.kind == VERIFICATION and o.finding.epoch == rec.epoch]
        if not done:
            return verification_for(self.model, rec.repairs[-1])
        if any(o.finding.target == self.model.top for o in done) or done[-1].finding.outcome != 0:
            return None
        return top_verification(self.model)

    @cached_property
    def unit_in_doubt(self) -> VerificationRequest | None:
        """The unit's verification, when the unit may work: a repair was made since which the unit was not tried.

        That is the case once the last repair's own check read abnormal (a
        false alarm, or a cause of the check that does not stop the unit);
        the unit may then be verified at any time before the next repair.
        """
        rec = self.record
        if not rec.repairs or rec.escalated or self.repair_verification is not None:
            return None
        if any(o.finding.target == self.model.top and o.finding.epoch == rec.epoch for o in rec.observations):
            return None
        return top_verification(self.model)

    @property
    def verifiable(self) -> VerificationRequest | None:
        """What the technician may verify now, advised or not: the last repair's verification, or the unit in doubt.

        Needs no decision weighed (unlike :attr:`verification_request`, which
        offers the unit in doubt only when the policy advises trying it).
        """
        return self.repair_verification or self.unit_in_doubt

    @cached_property
    def confirmed(self) -> bool:
        rec = self.record
        return bool(rec.repairs) and any(
            o.kind == VERIFICATION and o.finding.epoch == rec.epoch and o.finding.target == self.model.top
            and o.finding.outcome == 0 for o in rec.observations)

    @cached_property
    def candidates(self) -> tuple[str, ...]:
        rec = self.record
        if rec.escalated:
            return ()
        done = {o.finding.target for o in rec.observations if o.finding.epoch == rec.epoch}
        skipped = {c for c, _ in rec.skipped}
        return tuple(c.id for c in self.model.checks + self.model.symptoms
                     if c.id not in done and c.id not in skipped)

    @cached_property
    def ranking(self) -> Ranking:
        return rank(self.posterior, self.candidates)

    @cached_property
    def suspects(self) -> tuple[Suspect, ...]:
        return suspects(self.posterior)

    @cached_property
    def entropy_bits(self) -> float:
        return entropy_bits(self.posterior)

    @cached_property
    def explanation(self) -> Explanation:
        return most_probable_explanation(self.engine, self.posterior)

    @cached_property
    def isolated(self) -> Suspect | None:
        return isolated_suspect(self.suspects, self.settings.isolation_threshold)

    @cached_property
    def group(self) -> tuple[Suspect, ...]:
        return ambiguity_group(self.suspects, self.settings.group_min_p)

    @cached_property
    def decision(self) -> Decision:
        """What to do next and why (:func:`troubleshoot.advice.policy.decide`); nothing once escalated."""
        if self.record.escalated:
            return self._escalated_decision()
        return decide(self.engine, self.posterior, self.settings, self.candidates,
                      verification=self.repair_verification, confirmed=self.confirmed,
                      ranking=self.ranking, ranked=self.suspects, unit_check=self.unit_in_doubt)

    def _escalated_decision(self) -> Decision:
        """Done: the unit was handed over; the figures are those it was handed over with."""
        model = self.model
        unit = model.cost_unit
        price = escalation_price(model)
        what = model.escalation.label if model.escalation is not None else "handed over beyond the model"
        text = f"the unit was handed over: {what}" + (f" ({price:g} {unit})" if price is not None else "")
        reason = Reason("escalated", text, costs=(("escalate", price),) if price is not None else ())
        return Decision(Course.DONE, None, 0.0, (Alternative(Course.DONE, None, 0.0),), (reason,),
                        Status.ESCALATED, None, outside_model(self.engine, self.posterior), unit)

    @cached_property
    def finish(self) -> Decision:
        """How to finish without another check: repair the next suspect, or escalate (the policy's choice)."""
        if self.verification_request is not None or self.confirmed or self.record.escalated:
            return self.decision
        return decide(self.engine, self.posterior, self.settings, (), ranked=self.suspects,
                      unit_check=self.unit_in_doubt)

    @property
    def outside_model(self) -> OutsideModel:
        """P(the cause lies outside the model), in total and per gate."""
        return self.decision.outside_model

    @cached_property
    def status(self) -> Status:
        return self.decision.status

    @cached_property
    def recommended(self) -> RankRow | None:
        """The check to do next, or None when no check is worth doing (see the decision)."""
        return self.decision.check

    @cached_property
    def repair_order(self) -> tuple[RepairStep, ...]:
        return repair_order(self.model, self.group)

    @cached_property
    def why(self) -> Why | None:
        """Why the recommended check is worth doing (None when no check is recommended).

        The two costs are the decision's: doing the check then finishing, and
        finishing at once (repairs in order, or escalating when cheaper).
        """
        decision = self.decision
        row = decision.check
        if row is None:
            return None
        costs = dict(decision.reason.costs) if decision.reason is not None else {}
        now = costs.get("finish without checking")
        if now is None:
            now = finish_now(self.engine, self.posterior, self.settings)
        first = decision.expected_cost
        if first is None or not math.isfinite(first):
            first = cost_of_check_then(self.engine, self.posterior, row, self.candidates, 1, self.settings)
        words = "escalating now" if decision.reason is not None and decision.reason.kind == "check-before-escalating" \
            else "repairing now"
        return explain_check(self.engine, self.posterior, row, first, now, words)

    @cached_property
    def cost_spent(self) -> float:
        model = self.model
        total = 0.0
        for o in self.record.observations:
            if o.kind == OBSERVATION:
                total += model.check_by_id[o.finding.target].cost
            elif o.kind == VERIFICATION:
                total += verification_of(model, o.finding.target, self.record.repairs[o.finding.epoch - 1]).cost
        for r in self.record.repairs:
            event = model.event_by_id.get(r)
            if event is not None and event.repair is not None:
                total += event.repair.cost
        price = escalation_price(model)
        if self.record.escalated and price is not None:
            total += price
        return float(total)

    def finding_views(self) -> tuple[FindingView, ...]:
        model = self.model
        out = []
        for o in self.record.observations:
            f = o.finding
            if f.target in model.check_by_id:
                check = model.check_by_id[f.target]
                outcome, cost = check.outcomes[f.outcome], check.cost
            elif o.kind == VERIFICATION:
                request = verification_of(model, f.target, self.record.repairs[f.epoch - 1])
                outcome, cost = request.outcomes[f.outcome], request.cost
            else:
                outcome, cost = ("ok", "failed")[f.outcome], 0.0
            if o.kind == VERIFICATION and f.target in model.check_by_id:
                cost = verification_of(model, f.target, self.record.repairs[f.epoch - 1]).cost
            out.append(FindingView(f.target, model.label_of(f.target), outcome, f.outcome, f.epoch, o.kind,
                                   float(cost)))
        return tuple(out)

    def cautions(self) -> tuple[str, ...]:
        model = self.model
        out = []
        request = self.verification_request
        if request is not None and request.caution:
            out.append(f"{request.label}: {request.caution}")
        elif self.status == DIAGNOSING and self.recommended is not None and self.recommended.caution:
            out.append(f"{self.recommended.label}: {self.recommended.caution}")
        if self.status in (ISOLATED, AMBIGUITY) and self.repair_order:
            first = self.repair_order[0]
            verify = verification_for(model, first.id) if first.cost is not None else None
            if verify is not None and verify.caution:
                out.append(f"{verify.label}: {verify.caution}")
        return tuple(out)

    def state(self) -> SessionState:
        status = self.status
        return SessionState(
            status=status,
            ranking=self.ranking.rows,
            next_check=self.recommended if status == DIAGNOSING else None,
            suspects=self.suspects,
            entropy_bits=self.entropy_bits,
            log_p_findings=self.posterior.log_p,
            findings=self.finding_views(),
            repairs=self.record.repairs,
            skipped=self.record.skipped,
            notes=self.record.notes,
            cost_spent=self.cost_spent,
            cost_unit=self.model.cost_unit,
            isolated=self.isolated,
            ambiguity_group=self.group if status == AMBIGUITY else None,
            repair_order=self.repair_order,
            verification=self.verification_request,
            cautions=self.cautions(),
            epoch=self.record.epoch,
            settings=self.settings,
            decision=self.decision,
            outside_model_p=self.outside_model.p,
            outside_model_by_gate=self.outside_model.by_gate,
            unit_check=self.unit_in_doubt,
        )


def outcome_index(outcomes: tuple[str, ...], outcome: Any, what: str) -> int:
    """The index of an outcome given as an index (int), a name, or a number 1..K (text).

    A name matches exactly, then ignoring case; text that is no name but a
    number 1..K means that outcome in the listed order (1 the normal one).

    Raises
    ------
    SessionError
        Naming the outcomes, numbered, when ``outcome`` is none of them.
    """
    if isinstance(outcome, bool):
        outcome = int(outcome)
    if isinstance(outcome, int):
        if 0 <= outcome < len(outcomes):
            return outcome
    elif isinstance(outcome, str):
        if outcome in outcomes:
            return outcomes.index(outcome)
        folded = [o.casefold() for o in outcomes]
        if outcome.strip().casefold() in folded:
            return folded.index(outcome.strip().casefold())
        if outcome.strip().isdigit() and 1 <= int(outcome.strip()) <= len(outcomes):
            return int(outcome.strip()) - 1
    raise SessionError(f"{what} has the outcomes {numbered_outcomes(outcomes)}, not {outcome!r}; "
                       "give one of them by name or number")


def numbered_outcomes(outcomes: tuple[str, ...]) -> str:
    """``1 'normal', 2 'low', 3 'high'``: the outcomes with the numbers a technician types."""
    return ", ".join(f"{i} {name!r}" for i, name in enumerate(outcomes, start=1))


class Session:
    """One diagnosis of one unit: findings, skips, repairs, verification, undo.

    Parameters
    ----------
    model : Model
    settings : SessionSettings, optional
        Default: :func:`settings_for` the model.
    engine : Engine, optional
        Reuse a compiled engine for the model.
    log : SessionLogWriter, optional
        Receives every committed action (see :mod:`troubleshoot.session.logfile`).
    model_path : str, optional
        Where the model came from (shown and logged).

    The complaint (the top event has occurred, ``Finding(model.top, 1, 0)``)
    is applied at once; a model under which it is impossible raises
    ImpossibleFindings.

    Most front ends create a session with
    :func:`troubleshoot.session.logfile.new_session` (which opens the log) or
    :func:`troubleshoot.session.logfile.resume_session`.
    """

    def __init__(self, model: Model, settings: SessionSettings | None = None, engine: Engine | None = None,
                 log: SessionLogWriter | None = None, model_path: str | None = None):
        self.model = model
        self.settings = (settings or settings_for(model)).validated()
        self.engine = engine or Engine(model)
        self.model_path = model_path
        self.log = log
        record = Record((Observation(Finding(model.top, 1, 0), COMPLAINT),))
        self._view = self._make_view(record)
        self._history: list[SessionView] = []
        self.actions: list[Action] = []  # committed actions, in order (undo, acknowledgements, resumes included)
        self.resume_warnings: list[str] = []  # set by resume_session
        self.job: dict = {}  # technician, unit, site, work_order (set by new_session / resume_session)

    # ------------------------------------------------------------------ reading

    @property
    def view(self) -> SessionView:
        """The current view (record, posterior and what is derived from it)."""
        return self._view

    @property
    def state(self) -> SessionState:
        """The current state as plain data."""
        return self._view.state()

    def explained_state(self) -> SessionState:
        """The current state with :attr:`SessionState.why` filled in (a few more propagations)."""
        return replace(self._view.state(), why=self._view.why)

    @property
    def status(self) -> str:
        return self._view.status

    @property
    def posterior(self) -> AnyPosterior:
        return self._view.posterior

    @property
    def ranking(self) -> Ranking:
        return self._view.ranking

    @property
    def suspects(self) -> tuple[Suspect, ...]:
        return self._view.suspects

    @property
    def entropy_bits(self) -> float:
        return self._view.entropy_bits

    @property
    def explanation(self) -> Explanation:
        """The most probable explanation (computed on first request: a few propagations)."""
        return self._view.explanation

    @property
    def findings(self) -> tuple[Finding, ...]:
        return self._view.record.findings

    @property
    def repairs(self) -> tuple[str, ...]:
        return self._view.record.repairs

    @property
    def epoch(self) -> int:
        return self._view.record.epoch

    @property
    def can_undo(self) -> bool:
        return bool(self._history)

    # ------------------------------------------------------------------ actions

    def record_finding(self, check_id: str, outcome: str | int) -> SessionState:
        """Record the outcome of a check or symptom done now (after every repair so far)."""
        self._record_finding(check_id, outcome)
        return self.state

    def retract_finding(self, check_id: str, epoch: int | None = None) -> SessionState:
        """Withdraw a finding as if never made (default: the latest finding on that check)."""
        self._retract_finding(check_id, epoch)
        return self.state

    def correct_finding(self, check_id: str, outcome: str | int, epoch: int | None = None) -> SessionState:
        """Change the outcome of a finding already recorded (default: the latest on that check)."""
        self._correct_finding(check_id, outcome, epoch)
        return self.state

    def skip_check(self, check_id: str, reason: str) -> SessionState:
        """Leave a check out of this session's ranking because it cannot be done now."""
        self._skip_check(check_id, reason)
        return self.state

    def unskip_check(self, check_id: str) -> SessionState:
        """Bring a skipped check back into the ranking."""
        self._unskip_check(check_id)
        return self.state

    def record_repair(self, event_id: str) -> SessionState:
        """Record that a root event was repaired; a verification is asked for next."""
        self._record_repair(event_id)
        return self.state

    def record_verification(self, outcome: str | int) -> SessionState:
        """Record the check after the last repair: outcome 0 (works) confirms, 1 (still fails) goes on."""
        self._record_verification(outcome)
        return self.state

    def escalate(self, reason: str | None = None) -> SessionState:
        """Hand the unit over (the model's escalation, at its price): the session ends escalated.

        Allowed at any time before a confirmed repair, whatever the tool
        advises; the log keeps what escalating means and costs by the model,
        P(the cause lies outside the model) and whether the tool advised it.
        Afterwards only a note or undo is accepted (undo takes it back).

        Parameters
        ----------
        reason : str, optional
            Why, in the technician's words.
        """
        self._escalate(reason)
        return self.state

    def add_note(self, text: str) -> SessionState:
        """Add a free-text note to the session (and its log)."""
        self._add_note(text)
        return self.state

    def undo(self) -> SessionState:
        """Take back the last action (the undo itself is logged)."""
        self._undo()
        return self.state

    def acknowledge_caution(self, check_id: str) -> SessionState:
        """Record that the technician read and acknowledged the safety caution of a check.

        The check is one of the model's checks or symptoms, or the check the
        last repair asks to verify (the top event included). Logged, shown in
        the summary, not taken back by undo; the findings do not change.
        """
        self._acknowledge_caution(check_id)
        return self.state

    def record_job(self, job: dict) -> SessionState:
        """Record who, which unit, where and which work order, given after the log's header was written.

        ``job`` holds any of ``technician``, ``unit``, ``site``, ``work_order``
        (empty ones are left out); :attr:`job` is updated. Logged, shown in the
        summary, not taken back by undo.
        """
        self._record_job(job)
        return self.state

    def record_resume(self, resume: Resume) -> SessionState:
        """Record that the session was continued from its log (see :func:`~troubleshoot.session.logfile.resume_session`)."""
        self._record_resume(resume)
        return self.state

    # ------------------------------------------------------------------ the changes behind the actions

    def _record_finding(self, check_id: str, outcome: str | int) -> None:
        check = self._check(check_id)
        self._refuse_if_confirmed("record a finding")
        request = self._view.repair_verification  # a check, never the unit
        if request is not None and request.target == check_id:
            # The check that verifies the last repair: its outcome is the verification.
            self._record_verification(outcome)
            return
        index = outcome_index(check.outcomes, outcome, f"check {check_id!r}")
        rec = self._view.record
        for o in rec.observations:
            if o.finding.target == check_id and o.finding.epoch == rec.epoch:
                done = check.outcomes[o.finding.outcome]
                since = "since the last repair" if rec.epoch else "in this session"
                raise SessionError(f"check {check_id!r} was already done {since} (outcome {done!r}); "
                                   "correct or retract that finding instead")
        new = replace(rec, observations=rec.observations + (Observation(Finding(check_id, index, rec.epoch),
                                                                         OBSERVATION),))
        self._commit(RecordFinding(check_id, check.outcomes[index]), new)

    def _retract_finding(self, check_id: str, epoch: int | None = None) -> None:
        rec = self._view.record
        position = self._find(check_id, epoch)
        observations = rec.observations[:position] + rec.observations[position + 1 :]
        found = rec.observations[position].finding
        self._commit(RetractFinding(check_id, found.epoch), replace(rec, observations=observations))

    def _correct_finding(self, check_id: str, outcome: str | int, epoch: int | None = None) -> None:
        rec = self._view.record
        position = self._find(check_id, epoch)
        old = rec.observations[position]
        outcomes = self._outcomes_of(old)
        index = outcome_index(outcomes, outcome, f"{check_id!r}")
        if index == old.finding.outcome:
            raise SessionError(f"the finding on {check_id!r} already reads {outcomes[index]!r}; nothing to correct")
        fixed = Observation(replace(old.finding, outcome=index), old.kind)
        observations = rec.observations[:position] + (fixed,) + rec.observations[position + 1 :]
        self._commit(CorrectFinding(check_id, outcomes[index], old.finding.epoch),
                     replace(rec, observations=observations))

    def _skip_check(self, check_id: str, reason: str) -> None:
        self._check(check_id)
        reason = (reason or "").strip()
        if not reason:
            raise SessionError(f"say why check {check_id!r} cannot be done (the log keeps the reason)")
        rec = self._view.record
        if any(c == check_id for c, _ in rec.skipped):
            raise SessionError(f"check {check_id!r} is already skipped")
        self._commit(SkipCheck(check_id, reason),
                     replace(rec, skipped=rec.skipped + ((check_id, reason),)))

    def _unskip_check(self, check_id: str) -> None:
        rec = self._view.record
        if not any(c == check_id for c, _ in rec.skipped):
            raise SessionError(f"check {check_id!r} is not skipped")
        self._commit(UnskipCheck(check_id),
                     replace(rec, skipped=tuple(s for s in rec.skipped if s[0] != check_id)))

    def _record_repair(self, event_id: str) -> None:
        model = self.model
        self._refuse_if_confirmed("record a repair")
        if event_id not in model.event_by_id:
            if is_unlisted(model, event_id):
                gate = event_id[: -len(DERIVED + "unlisted")]
                raise SessionError(f"cannot repair {event_id!r}: it stands for causes outside the model "
                                   f"under gate {gate!r}, which name no component to repair; inspect "
                                   "beyond the listed components or hand the unit over")
            events = [e.id for e in model.basic_events]
            known = ", ".join(events[:8]) + (", ..." if len(events) > 8 else "")
            raise SessionError(f"cannot repair {event_id!r}: it is not a basic event of model "
                               f"{model.name!r} (basic events: {known})")
        rec = self._view.record
        if event_id in rec.repairs:
            raise SessionError(f"{event_id!r} was already repaired in this session")
        self._commit(RecordRepair(event_id),
                     replace(rec, repairs=rec.repairs + (event_id,)))

    def _record_verification(self, outcome: str | int) -> None:
        request = self._view.verifiable
        rec = self._view.record
        if not rec.repairs:
            raise SessionError("nothing has been repaired yet; record a repair before verifying it")
        if request is None:
            raise SessionError("the last repair was already verified; record another repair to verify again")
        if request.target != self.model.top:
            for o in rec.observations:
                if o.finding.target == request.target and o.finding.epoch == rec.epoch:
                    raise SessionError(f"check {request.target!r} was already done since the last repair; "
                                       "its finding is the verification: correct it if needed")
        index = outcome_index(request.outcomes, outcome, f"the verification ({request.label})")
        new = replace(rec, observations=rec.observations + (Observation(Finding(request.target, index, rec.epoch),
                                                                         VERIFICATION),))
        self._commit(RecordVerification(request.outcomes[index]), new)

    def _escalate(self, reason: str | None = None) -> None:
        view = self._view
        if view.record.escalated:
            raise SessionError("the unit was already handed over (escalated) in this session; undo to take it back")
        self._refuse_if_confirmed("escalate")
        model = self.model
        action = Escalate((reason or "").strip() or None,
                          model.escalation.label if model.escalation is not None else None,
                          escalation_price(model), model.cost_unit, view.outside_model.p,
                          view.decision.action == Course.ESCALATE)
        self._commit(action, replace(view.record, escalated=True), same_posterior=True)

    def _add_note(self, text: str) -> None:
        text = (text or "").strip()
        if not text:
            raise SessionError("a note needs some text")
        rec = self._view.record
        self._commit(AddNote(text), replace(rec, notes=rec.notes + (text,)),
                     same_posterior=True)

    def _undo(self) -> None:
        if not self._history:
            raise SessionError("nothing to undo")
        previous = self._history[-1]
        self._write(Undo(), previous)
        self._history.pop()
        self._view = previous
        self.actions.append(Undo())

    def _acknowledge_caution(self, check_id: str) -> None:
        caution = None
        request = self._view.verifiable
        if request is not None and request.target == check_id:
            caution = request.caution
        else:
            caution = self._check(check_id).caution
        if not caution:
            raise SessionError(f"check {check_id!r} has no safety caution to acknowledge")
        self._event(AcknowledgeCaution(check_id, caution))

    def _record_job(self, job: dict) -> None:
        details = {k: str(v).strip() for k, v in (job or {}).items()
                   if k in JobDetails.FIELDS and v is not None and str(v).strip()}
        unknown = sorted(set(job or {}) - set(JobDetails.FIELDS))
        if unknown:
            raise SessionError(f"unknown job field(s) {', '.join(unknown)}; known: {', '.join(JobDetails.FIELDS)}")
        if not details:
            raise SessionError("give at least one of the technician, the unit, the site or the work order")
        self._event(JobDetails(**details))
        self.job = {**self.job, **details}

    def _record_resume(self, resume: Resume) -> None:
        self._event(resume)

    def apply(self, action: Action | dict) -> SessionState:
        """Perform a typed action (a dict in the form the log stores is read as one first).

        Raises
        ------
        SessionError
            The action is malformed (:class:`~troubleshoot.session.actions.ActionError`)
            or refused; the session is unchanged.
        """
        self._perform(action)
        return self.state

    def apply_all(self, actions: Iterable[Action | dict]) -> SessionState:
        """Perform actions in order, as :meth:`apply` does one by one, and return the state after the last.

        The state (ranking, the policy's decision) is worked out for the end
        only: a one-shot query given many findings pays for one decision,
        not one per finding. An action refused stops the run there, with
        every earlier action kept, as with :meth:`apply`.
        """
        for action in actions:
            self._perform(action)
        return self.state

    def _perform(self, action: Action | dict) -> None:
        action = as_action(action)
        match action:
            case RecordFinding(check, outcome):
                self._record_finding(check, outcome)
                return
            case RetractFinding(check, epoch):
                self._retract_finding(check, epoch)
                return
            case CorrectFinding(check, outcome, epoch):
                self._correct_finding(check, outcome, epoch)
                return
            case SkipCheck(check, reason):
                self._skip_check(check, reason)
                return
            case UnskipCheck(check):
                self._unskip_check(check)
                return
            case RecordRepair(event):
                self._record_repair(event)
                return
            case RecordVerification(outcome):
                self._record_verification(outcome)
                return
            case AddNote(text):
                self._add_note(text)
                return
            case AcknowledgeCaution(check, _):
                self._acknowledge_caution(check)
                return
            case Escalate():
                self._escalate(action.reason)
                return
            case Undo():
                self._undo()
                return
            case Resume():
                self._record_resume(action)
                return
            case JobDetails():
                self._record_job({k: v for k, v in action.to_record().items() if k != "action"})
                return
        raise SessionError(f"not an action this session knows: {action!r}")

    def close(self) -> None:
        """Close the log (the session can still be read)."""
        if self.log is not None:
            self.log.close()

    # ------------------------------------------------------------------ internals

    def _make_view(self, record: Record) -> SessionView:
        posterior = self.engine.propagate(record.findings, record.repairs)
        return SessionView(self.model, self.engine, self.settings, record, posterior)

    def _event(self, action: Action) -> None:
        """Log an action that changes nothing in the record (and is not undone by undo)."""
        assert isinstance(action, EVENTS)
        self._write(action, self._view)
        self.actions.append(action)

    def _commit(self, action: Action, record: Record, same_posterior: bool = False) -> None:
        if self._view.record.escalated and not isinstance(action, AddNote):
            raise SessionError(f"refused ({describe(action)}): the unit was handed over (escalated) and the "
                               "diagnosis is finished; undo to take the escalation back")
        if same_posterior:
            view = SessionView(self.model, self.engine, self.settings, record, self._view.posterior)
        else:
            view = self._make_view(record)  # raises before anything changes
        self._write(action, view)
        self._history.append(self._view)
        self._view = view
        self.actions.append(action)

    def _write(self, action: Action, view: SessionView) -> None:
        if self.log is not None:
            self.log.write_action(action, view)

    def _check(self, check_id: str):
        check = self.model.check_by_id.get(check_id)
        if check is None:
            hint = ""
            if check_id in self.model.hypothesis_ids or check_id in self.model.gate_by_id:
                hint = f" ({check_id!r} is an event or gate: checks observe them)"
            raise SessionError(f"unknown check {check_id!r} in model {self.model.name!r}{hint}; "
                               "give the id of one of its checks or symptoms")
        return check

    def _refuse_if_confirmed(self, what: str) -> None:
        if self._view.record.escalated:
            raise SessionError(f"cannot {what}: the unit was handed over (escalated) and the diagnosis is "
                               "finished; undo to take the escalation back")
        if self._view.confirmed:
            raise SessionError(f"cannot {what}: the repair is confirmed and the diagnosis is finished; "
                               "undo or retract the verification to go on")

    def _find(self, target: str, epoch: int | None) -> int:
        rec = self._view.record
        matches = [i for i, o in enumerate(rec.observations)
                   if o.kind != COMPLAINT and o.finding.target == target
                   and (epoch is None or o.finding.epoch == epoch)]
        if not matches:
            if target == self.model.top and any(o.kind == COMPLAINT for o in rec.observations) and epoch in (None, 0):
                raise SessionError("the complaint (the unit has failed) starts the session and cannot be changed")
            when = "" if epoch is None else f" after {epoch} repair(s)"
            raise SessionError(f"there is no finding on {target!r}{when} to change")
        return matches[-1]

    def _outcomes_of(self, observation: Observation) -> tuple[str, ...]:
        f = observation.finding
        if observation.kind == VERIFICATION:
            return verification_for(self.model, self._view.record.repairs[f.epoch - 1]).outcomes
        return tuple(self.model.check_by_id[f.target].outcomes)
