"""A session's state as text: the one wording used by ``suggest``, the line mode and the summary.

Pure functions of plain data (the model and a
:class:`~troubleshoot.session.session.SessionState`): :func:`render_state`
is the full table ``suggest`` prints, :func:`render_brief` the few lines the
line mode (``resume --plain``, ``start`` without a terminal) prints after
each action, and :func:`conclusion` the sentences on where the diagnosis
stands that the Markdown summary (:mod:`troubleshoot.session.summary`) and
both texts share.
"""

from __future__ import annotations

import math

from troubleshoot.session.session import AMBIGUITY, CONFIRMED, ISOLATED, Status, numbered_outcomes

#: The words each session status is reported with.
STATUS_SENTENCES = {
    Status.DIAGNOSING: "diagnosis not finished: no fault isolated yet",
    Status.ISOLATED: "fault isolated, not yet repaired",
    Status.AMBIGUITY: "only an ambiguity group is left, not yet repaired",
    Status.AWAITING_VERIFICATION: "repair recorded, not yet verified",
    Status.CONFIRMED: "repair confirmed: the unit works",
    Status.ESCALATED: "handed over (escalated): the diagnosis is finished",
}


def percent(p: float) -> str:
    """A probability as a percentage with its unit: ``12.3 %``."""
    return f"{p * 100:.1f} %"


def outside_words(p: float) -> str:
    """How likely the cause lies outside the model, in words (thresholds: ours, common practice).

    ``near certain`` (0.9 or more), ``likely`` (0.6), ``possible`` (0.3),
    ``unlikely`` (0.05), ``remote`` (below). The UI says "a cause this model
    does not list: likely"; the figures key shows the number.
    """
    if p >= 0.9:
        return "near certain"
    if p >= 0.6:
        return "likely"
    if p >= 0.3:
        return "possible"
    if p >= 0.05:
        return "unlikely"
    return "remote"


def conclusion(model, state) -> list[tuple[str, str]]:
    """Where the diagnosis stands, as (heading, text) pairs: the outcome, then the fault or the group.

    Used by the Markdown summary (one bullet each) and the text renderers.
    """
    out = [("Outcome", STATUS_SENTENCES.get(state.status, str(state.status)))]
    repaired = [model.label_of(r) for r in state.repairs]
    if state.status == CONFIRMED and repaired:
        out.append(("Fault isolated and repaired", repaired[-1]))
        if len(repaired) > 1:
            out.append(("Repaired before it (fault persisted)", "; ".join(repaired[:-1])))
        return out
    if repaired:
        out.append(("Repaired so far", "; ".join(repaired)))
    if state.isolated is not None:
        out.append(("Fault isolated", f"{state.isolated.label} (P {percent(state.isolated.p)})"))
    elif state.ambiguity_group:
        out.append(("Ambiguity group", "; ".join(f"{s.label} (P {percent(s.p)})" for s in state.ambiguity_group)))
    else:
        unrepaired = [s for s in state.suspects if not s.repaired]
        if unrepaired:
            out.append(("Most probable fault now", f"{unrepaired[0].label} (P {percent(unrepaired[0].p)})"))
    return out


def _score_text(score: float) -> str:
    return "free" if math.isinf(score) else f"{score:.4f}"


def render_state(model, state, explanation=None, engine_name: str | None = None) -> str:
    """The full text ``suggest`` prints: findings, ranking, suspects, explanation, status, what next."""
    unit = model.cost_unit
    lines = [f"Model {model.name}: {model.label_of(model.top)} (complaint applied first)"]
    for f in state.findings[1:]:
        after = f" (after {f.epoch} repair(s))" if f.epoch else ""
        lines.append(f"  finding: {f.target} = {f.outcome}{after}")
    for r in state.repairs:
        lines.append(f"  repaired: {r}")
    lines += [
        f"Remaining uncertainty: {state.entropy_bits:.4f} bits; log P(findings) = {state.log_p_findings:.6f}",
        f"Cost spent: {state.cost_spent:g} {unit}",
        *([f"Computed exactly by the {engine_name}"] if engine_name else []),
        f"Status: {state.status}",
        "",
        f"Checks, best first (information in bits, cost in {unit}, score in bits per {unit}):",
        f"  {'check':<22} {'bits':>8} {'cost':>8} {'score':>10}  outcome probabilities",
    ]
    if not state.ranking:
        lines.append("  (no check left)")
    for r in state.ranking:
        odds = ", ".join(f"{name} {p:.3f}" for name, p in zip(r.outcomes, r.p_outcomes))
        lines.append(f"  {r.check:<22} {r.bits:>8.4f} {r.cost:>8g} {_score_text(r.score):>10}  {odds}")
    lines += ["", "Suspects (probability of having failed, given the findings):"]
    for s in state.suspects:
        mark = " (repaired)" if s.repaired else ""
        lines.append(f"  {s.p:>8.4f}  {s.id:<22} {s.label}{mark}")
    if explanation is not None:
        failed = ", ".join(explanation.failed) or "(nothing failed)"
        exact = "" if explanation.exact else " (best found within the search bound, not proven)"
        lines += ["", f"Most probable explanation: {failed}, probability {explanation.p:.4f}{exact}"]
    if state.isolated:
        lines.append(f"Isolated: {state.isolated.id} ({state.isolated.label}), "
                     f"P = {state.isolated.p:.4f} >= {state.settings.isolation_threshold:g}")
    if state.ambiguity_group is not None:
        lines.append("Ambiguity group (no remaining check gives "
                     f"{state.settings.min_bits:g} bits or more): "
                     + ", ".join(f"{s.id} {s.p:.3f}" for s in state.ambiguity_group))
    lines += _repair_order_lines(state, unit, "  ")
    if state.verification:
        v = state.verification
        lines.append(f"Verify the repair: {v.label} ({v.cost:g} {unit}; outcomes {numbered_outcomes(v.outcomes)})")
    if state.next_check:
        lines.append(f"Next check: {state.next_check.check} ({state.next_check.label})")
    lines += decision_lines(state)
    for caution in state.cautions:
        lines.append(f"CAUTION: {caution}")
    return "\n".join(lines) + "\n"


def decision_lines(state) -> list[str]:
    """P(cause outside the model) and the policy's decision with its reasons and the courses weighed."""
    unit = state.cost_unit
    lines = []
    if state.outside_model_by_gate:
        lines.append(f"Cause outside the model: P = {state.outside_model_p:.3f} ("
                     + ", ".join(f"under {g} {p:.3f}" for g, p in state.outside_model_by_gate) + ")")
    d = state.decision
    if d is None:
        return lines
    target = f" {d.target}" if d.target else ""
    cost = f", expected {d.expected_cost:.1f} {unit} to finish" if d.expected_cost is not None else ""
    lines.append(f"Decision: {d.action}{target}{cost}")
    for r in d.reasons:
        lines.append(f"  why: {r.text}")
    for a in d.alternatives:
        if (a.action, a.target) == (d.action, d.target):
            continue
        price = f"{a.expected_cost:.1f} {unit}" if a.expected_cost is not None else "no price in the model"
        lines.append(f"  instead: {a.action}{' ' + a.target if a.target else ''}: {price}")
    return lines


def escalation_lines(state) -> list[str]:
    """The line mode's word on escalating: P(cause outside the model), and the advice when it is to escalate."""
    lines = []
    if state.outside_model_by_gate:
        lines.append(f"cause outside the model: P = {state.outside_model_p:.3f} ("
                     + ", ".join(f"under {g} {p:.3f}" for g, p in state.outside_model_by_gate) + ")")
    d = state.decision
    if d is not None and d.action == "escalate" and state.status != Status.ESCALATED:
        price = (f"{d.expected_cost:g} {state.cost_unit}" if d.expected_cost is not None
                 else "the model gives no price")
        why = d.reason.text if d.reason is not None else ""
        lines.append(f"advice: escalate ({price}): {why}; type 'escalate REASON' to hand the unit over")
    return lines


def _repair_order_lines(state, unit: str, indent: str) -> list[str]:
    if state.status not in (ISOLATED, AMBIGUITY) or not state.repair_order:
        return []
    lines = [f"Repair order (probability per {unit} of repair and verification cost, highest first):"]
    for i, step in enumerate(state.repair_order, start=1):
        if step.cost is None:
            lines.append(f"{indent}{i}. {step.id}: P = {step.p:.3f}; {step.note}")
        else:
            lines.append(f"{indent}{i}. {step.id}: {step.repair_label}, {step.cost:g} {unit}, P = {step.p:.3f}")
    return lines


def render_brief(state) -> str:
    """The few lines the line mode prints after each action: status, what next, top suspects, cautions."""
    unit = state.cost_unit
    lines = [f"status: {state.status}; remaining uncertainty {state.entropy_bits:.3f} bits; "
             f"cost spent {state.cost_spent:g} {unit}"]
    if state.next_check:
        r = state.next_check
        # Numbered as a technician types them: 1 the normal outcome, then the abnormal ones.
        odds = ", ".join(f"{i} {o} {p:.2f}" for i, (o, p) in enumerate(zip(r.outcomes, r.p_outcomes), start=1))
        lines.append(f"next check: {r.check} ({r.label}); {r.bits:.3f} bits, {r.cost:g} {unit}; {odds}")
    if state.verification:
        v = state.verification
        lines.append(f"verify the repair: {v.label}: {numbered_outcomes(v.outcomes)}")
        reason = state.decision.reason if state.decision is not None else None
        if reason is not None and reason.kind == "unit-may-work":
            lines.append(f"why: {reason.text}")
    if state.isolated:
        lines.append(f"isolated: {state.isolated.id} ({state.isolated.label}), P = {state.isolated.p:.3f}")
    if state.status in (ISOLATED, AMBIGUITY) and state.repair_order:
        lines.append("repair order: " + ", ".join(s.id for s in state.repair_order))
    lines.append("suspects: " + ", ".join(f"{s.id} {s.p:.3f}" + (" (condition)" if s.condition else "")
                                          for s in state.suspects[:5]))
    lines += escalation_lines(state)
    for c in state.cautions:
        lines.append(f"CAUTION: {c}")
    return "\n".join(lines)
