"""Why a check is recommended, in the technician's words and in figures.

For the recommended check T the explanation gives, for the suspects it
separates, their probability now and after each outcome of T,

    p_if[o] = P(suspect failed | findings, T = o),

each computed by one exact propagation with the finding added (the same
number ``suggest`` prints when that finding is given), and the two expected
costs the recommendation weighed: doing the check first and then repairing in
order, against repairing in order at once (Heckerman, Breese & Rommelse
1995). A line in plain words says the same for the screen.

Pure: reads an :class:`~troubleshoot.engine.inference.Engine` and a
:class:`~troubleshoot.engine.inference.AnyPosterior`, no I/O, no clock.

References
----------
D. Heckerman, J. S. Breese and K. Rommelse, "Decision-theoretic
troubleshooting", Communications of the ACM 38(3), 1995 (the value of an
observation against repairing now).
"""

from __future__ import annotations

from dataclasses import dataclass
from collections.abc import Sequence

import numpy as np

from troubleshoot.advice.diagnosis import Suspect, hypotheses_of, ranked_marginals
from troubleshoot.advice.ranking import RankRow
from troubleshoot.engine.inference import AnyPosterior, Engine, Finding
from troubleshoot.errors import ImpossibleFindings

#: At least this many suspects are listed (when the model has that many not repaired).
MIN_SUSPECTS = 3
#: At most this many; suspects past MIN_SUSPECTS are listed only when they move this much.
MAX_SUSPECTS = 6
MIN_SHIFT = 0.01


@dataclass(frozen=True)
class SuspectShift:
    """One suspect and how the check would move it.

    Attributes
    ----------
    id, label : str
    p_now : float
        P(failed | findings).
    p_if : tuple of (outcome name, float or None)
        P(failed | findings, check = outcome) per outcome, in the check's
        outcome order; None for an outcome the model calls impossible.
    """

    id: str
    label: str
    p_now: float
    p_if: tuple[tuple[str, float | None], ...]

    @property
    def shift(self) -> float:
        """How far the outcomes pull this suspect apart (largest minus smallest p_if)."""
        values = [p for _, p in self.p_if if p is not None]
        return max(values) - min(values) if values else 0.0

    def to_dict(self) -> dict:
        return {"id": self.id, "label": self.label, "p_now": self.p_now, "p_if": dict(self.p_if)}


@dataclass(frozen=True)
class Why:
    """Why a check is recommended (the ``why`` object of ``suggest --json``).

    Attributes
    ----------
    check : str
    text : str
        One line in plain words for the technician.
    suspects : tuple of SuspectShift
        The suspects the check separates most, most moved first.
    cost_check_first : float
        Expected cost to finish doing the check first, then repairing in
        order, in the model's cost unit.
    cost_repair_now : float
        Expected cost to finish repairing in order at once.
    """

    check: str
    text: str
    suspects: tuple[SuspectShift, ...]
    cost_check_first: float
    cost_repair_now: float

    def to_dict(self) -> dict:
        return {"check": self.check, "text": self.text, "suspects": [s.to_dict() for s in self.suspects],
                "cost_check_first": self.cost_check_first, "cost_repair_now": self.cost_repair_now}


def outcome_posteriors(engine: Engine, posterior: AnyPosterior, check_id: str,
                       n_outcomes: int) -> list[AnyPosterior | None]:
    """The posterior after each outcome of a check done now (None where the outcome is impossible)."""
    out: list[AnyPosterior | None] = []
    findings = tuple(posterior.findings)
    for outcome in range(n_outcomes):
        try:
            out.append(engine.propagate(findings + (Finding(check_id, outcome, posterior.epoch),),
                                        posterior.repairs))
        except ImpossibleFindings:
            out.append(None)
    return out


def suspect_shifts(engine: Engine, posterior: AnyPosterior, row: RankRow,
                   now: Sequence[Suspect] | None = None, limit: int | None = None) -> tuple[SuspectShift, ...]:
    """Every unrepaired suspect with its probability now and after each outcome of ``row``'s check.

    Sorted by how far the outcomes pull it apart (descending), then by
    probability now (descending), then id; only the first ``limit`` when
    given (the explanation shows a few of possibly 50,000, so only those
    are built).
    """
    table = hypotheses_of(posterior.model)
    after = outcome_posteriors(engine, posterior, row.check, len(row.outcomes))
    marginals = [None if post is None else post.root_marginals() for post in after]
    if now is None:
        order, p_all, repaired = ranked_marginals(posterior)
        idx, p_now = order[~repaired], p_all[~repaired]
    else:
        live = [s for s in now if not s.repaired]
        idx = np.array([table.index[s.id] for s in live], dtype=np.int64)
        p_now = np.array([s.p for s in live], dtype=float)
    known = [m[idx] for m in marginals if m is not None]
    # SuspectShift.shift in whole arrays: the largest minus the smallest p_if.
    shift = np.max(known, axis=0) - np.min(known, axis=0) if known else np.zeros(len(idx))
    ranked = np.lexsort((table.id_rank[idx], -p_now, -shift))
    out = []
    for k in ranked[:limit].tolist():
        i = int(idx[k])
        p_if = tuple((name, None if m is None else float(m[i])) for name, m in zip(row.outcomes, marginals))
        out.append(SuspectShift(table.ids[i], table.labels[i], float(p_now[k]), p_if))
    return tuple(out)


def pick_suspects(shifts: Sequence[SuspectShift]) -> tuple[SuspectShift, ...]:
    """The first MIN_SUSPECTS, then up to MAX_SUSPECTS of those moved at least MIN_SHIFT."""
    return tuple(s for i, s in enumerate(shifts)
                 if i < MIN_SUSPECTS or (i < MAX_SUSPECTS and s.shift >= MIN_SHIFT))


def _amount(value: float, unit: str) -> str:
    return f"{value:.0f} {unit}" if abs(value) >= 10 else f"{value:.3g} {unit}"


def _pct(p: float) -> str:
    if 0.0 < p < 0.0005:
        return "<0.1 %"
    return f"{p * 100:.0f} %" if p >= 0.1 else f"{p * 100:.1f} %"


def check_reason(row: RankRow, shifts: Sequence[SuspectShift], cost_check_first: float,
                 cost_repair_now: float, unit: str, now_words: str = "repairing now") -> str:
    """One line saying why the check is worth its cost, e.g.

    ``5 min to tell Return-air filters clogged (62 %) from Blower belt broken (20 %); expected 210 min
    to finish this way against 260 min repairing now``.
    """
    cost = "a free check" if row.cost <= 0 else _amount(row.cost, unit)
    moved = [s for s in shifts if s.shift >= MIN_SHIFT][:2] or list(shifts[:1])
    if len(moved) == 1:
        target = f"confirm or rule out {moved[0].label} ({_pct(moved[0].p_now)})"
    elif moved:
        target = (f"tell {moved[0].label} ({_pct(moved[0].p_now)}) from {moved[1].label} "
                  f"({_pct(moved[1].p_now)})")
    else:
        target = "narrow the suspects down"
    if cost_check_first < cost_repair_now:
        tail = (f"; expected {_amount(cost_check_first, unit)} to finish this way against "
                f"{_amount(cost_repair_now, unit)} {now_words}")
    else:
        tail = "; the best of the checks left"
    return f"{cost} to {target}{tail}"


def explain_check(engine: Engine, posterior: AnyPosterior, row: RankRow, cost_check_first: float,
                  cost_repair_now: float, now_words: str = "repairing now") -> Why:
    """Why ``row``'s check is recommended: the suspects it separates and the costs weighed.

    Parameters
    ----------
    engine : Engine
    posterior : AnyPosterior
        The findings and repairs so far.
    row : RankRow
        The recommended check's ranking row.
    cost_check_first : float
        Expected cost to finish doing the check first (the policy's figure,
        :func:`troubleshoot.advice.policy.cost_of_check_then`).
    cost_repair_now : float
        Expected cost to finish without checking: repairing in order, or
        escalating when that is cheaper (:func:`troubleshoot.advice.policy.finish_plan`).
    now_words : str
        What finishing without checking is, in words (``escalating now``
        when the check is weighed against handing the unit over).

    Returns
    -------
    Why
    """
    shifts = pick_suspects(suspect_shifts(engine, posterior, row, limit=MAX_SUSPECTS))
    text = check_reason(row, shifts, cost_check_first, cost_repair_now, posterior.model.cost_unit, now_words)
    return Why(row.check, text, shifts, float(cost_check_first), float(cost_repair_now))
