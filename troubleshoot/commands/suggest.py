"""``troubleshoot suggest``: the next best check for findings given on the command line.

A one-shot query (no session log): the complaint (the top event has occurred)
first, then every ``--finding`` and ``--repaired`` in the order given, then
the ranking of the remaining checks by expected information per unit cost,
the suspects, the remaining uncertainty and, when the diagnosis is done, the
isolated fault or the ambiguity group and the repair order.
"""

from __future__ import annotations

import argparse
import json
import math
import sys

from troubleshoot.errors import SessionError
from troubleshoot.session import AMBIGUITY, Session, settings_for


class _Ordered(argparse.Action):
    """Appends (option, value) to one shared list, so --finding and --repaired keep their order."""

    def __call__(self, parser, namespace, values, option_string=None):
        steps = list(getattr(namespace, "steps", None) or [])
        steps.append((self.dest, values))
        namespace.steps = steps


def add_parser(subparsers, name):
    parser = subparsers.add_parser(
        name,
        help="rank the next checks for the findings so far",
        description="Apply the complaint (the unit has failed), then the findings and repairs in "
        "the order given, and show the checks ranked by expected information about the fault "
        "per unit of cost, the suspects with their probabilities, the remaining uncertainty in "
        "bits, and the isolated fault or ambiguity group with the repair order. Symptoms are "
        "given with --finding like checks; after --repaired, '--finding TOP=OUTCOME' (the top "
        "event's id) records the verification.",
    )
    parser.add_argument("model", metavar="MODEL", help="a model file, or a demo name (rooftop, booster)")
    parser.add_argument("--finding", metavar="CHECK=OUTCOME", action=_Ordered, dest="finding",
                        help="a check or symptom and the outcome seen (repeatable, order kept)")
    parser.add_argument("--repaired", metavar="EVENT", action=_Ordered, dest="repaired",
                        help="a basic event repaired (repeatable; later findings see it working)")
    parser.add_argument("--threshold", metavar="P", type=float,
                        help="isolation threshold: posterior at which a suspect counts as isolated "
                        "(default: the model's)")
    parser.add_argument("--min-bits", metavar="BITS", type=float,
                        help="a check giving fewer bits is not worth doing (default 0.01 bits)")
    parser.add_argument("--group-p", metavar="P", type=float,
                        help="suspects at or above this probability form the ambiguity group (default 0.05)")
    parser.add_argument("--lookahead", metavar="N", type=int,
                        help="how many of the best checks are weighed against repairing at once "
                             "(default 3; 0: only --min-bits decides when to stop checking)")
    parser.add_argument("--json", action="store_true", help="print the result as JSON (see the README)")
    parser.set_defaults(steps=[])
    return parser


def apply_steps(session: Session, steps) -> None:
    """Apply ('finding', 'CHECK=OUTCOME') and ('repaired', 'EVENT') steps in order."""
    model = session.model
    for kind, value in steps:
        if kind == "repaired":
            session.record_repair(value.strip())
            continue
        check, sep, outcome = value.partition("=")
        check, outcome = check.strip(), outcome.strip()
        if not sep or not check or not outcome:
            raise SessionError(f"--finding {value!r}: write CHECK=OUTCOME, e.g. "
                               f"{_example(model)}")
        if check == model.top:
            if not session.repairs:
                raise SessionError(f"--finding {value!r}: the top event {check!r} has occurred (the "
                                   "complaint); give it after --repaired EVENT to record the verification")
            if outcome.casefold() in ("ok", "failed"):
                outcome = 0 if outcome.casefold() == "ok" else 1
            session.record_verification(outcome)
        else:
            session.record_finding(check, outcome)


def _example(model) -> str:
    checks = model.checks + model.symptoms
    return f"{checks[0].id}={checks[0].outcomes[1]}" if checks else "CHECK=OUTCOME"


def _finite(x):
    return None if x is None or not math.isfinite(x) else x


def suggestion_json(session: Session, model_spec: str) -> dict:
    """The ``suggest --json`` document (see docs/suggest-contract.md)."""
    state = session.state
    model = session.model
    explanation = session.explanation
    return {
        "model": model.name,
        "model_source": model_spec,
        "cost_unit": model.cost_unit,
        "status": state.status,
        "log_p_findings": state.log_p_findings,
        "entropy_bits": state.entropy_bits,
        "suspects": [{"id": s.id, "label": s.label, "p": s.p, "repaired": s.repaired} for s in state.suspects],
        "ranking": [
            {"id": r.check, "label": r.label, "cost": r.cost, "bits": r.bits, "score": _finite(r.score),
             "score_infinite": math.isinf(r.score), "outcomes": r.outcome_probabilities(),
             "caution": r.caution}
            for r in state.ranking
        ],
        "next_check": state.next_check.check if state.next_check else None,
        "explanation": {"failed": list(explanation.failed), "p": explanation.p, "exact": explanation.exact},
        "isolated": state.isolated.id if state.isolated else None,
        "ambiguity_group": [s.id for s in state.ambiguity_group] if state.ambiguity_group is not None else None,
        "repair_order": [r.id for r in state.repair_order],
        "repair_steps": [{"id": r.id, "p": r.p, "cost": r.cost, "ratio": _finite(r.ratio),
                          "repair": r.repair_label, "note": r.note} for r in state.repair_order],
        "verification": ({"target": state.verification.target, "label": state.verification.label,
                          "cost": state.verification.cost, "outcomes": list(state.verification.outcomes)}
                         if state.verification else None),
        "findings": [{"target": f.target, "outcome": f.outcome, "epoch": f.epoch, "kind": f.kind}
                     for f in state.findings],
        "cost_spent": state.cost_spent,
        "settings": {"isolation_threshold": state.settings.isolation_threshold,
                     "min_bits": state.settings.min_bits, "group_min_p": state.settings.group_min_p},
        "cautions": list(state.cautions),
        "decision": state.decision.to_dict() if state.decision is not None else None,
        "outside_model_p": state.outside_model_p,
        "outside_model_by_gate": dict(state.outside_model_by_gate),
        "escalation": ({"label": model.escalation.label, "cost": model.escalation.cost,
                        "instructions": model.escalation.instructions} if model.escalation is not None else None),
    }


def _score_text(score: float, unit: str) -> str:
    return "free" if math.isinf(score) else f"{score:.4f}"


def render_text(session: Session) -> str:
    """The readable table: ranking, suspects, explanation, status."""
    state = session.state
    model = session.model
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
        f"Status: {state.status}",
        "",
        f"Checks, best first (information in bits, cost in {unit}, score in bits per {unit}):",
        f"  {'check':<22} {'bits':>8} {'cost':>8} {'score':>10}  outcome probabilities",
    ]
    if not state.ranking:
        lines.append("  (no check left)")
    for r in state.ranking:
        odds = ", ".join(f"{name} {p:.3f}" for name, p in zip(r.outcomes, r.p_outcomes))
        lines.append(f"  {r.check:<22} {r.bits:>8.4f} {r.cost:>8g} {_score_text(r.score, unit):>10}  {odds}")
    lines += ["", "Suspects (probability of having failed, given the findings):"]
    for s in state.suspects:
        mark = " (repaired)" if s.repaired else ""
        lines.append(f"  {s.p:>8.4f}  {s.id:<22} {s.label}{mark}")
    ex = session.explanation
    failed = ", ".join(ex.failed) or "(nothing failed)"
    exact = "" if ex.exact else " (best found within the search bound, not proven)"
    lines += ["", f"Most probable explanation: {failed}, probability {ex.p:.4f}{exact}"]
    if state.isolated:
        lines.append(f"Isolated: {state.isolated.id} ({state.isolated.label}), "
                     f"P = {state.isolated.p:.4f} >= {state.settings.isolation_threshold:g}")
    if state.ambiguity_group is not None:
        lines.append("Ambiguity group (no remaining check gives "
                     f"{state.settings.min_bits:g} bits or more): "
                     + ", ".join(f"{s.id} {s.p:.3f}" for s in state.ambiguity_group))
    if state.status in ("isolated", AMBIGUITY) and state.repair_order:
        lines.append(f"Repair order (probability per {unit} of repair cost, highest first):")
        for i, step in enumerate(state.repair_order, start=1):
            if step.cost is None:
                lines.append(f"  {i}. {step.id}: P = {step.p:.3f}; {step.note}")
            else:
                lines.append(f"  {i}. {step.id}: {step.repair_label}, {step.cost:g} {unit}, P = {step.p:.3f}")
    if state.verification:
        v = state.verification
        lines.append(f"Verify the repair: {v.label} ({v.cost:g} {unit}; outcomes {v.outcomes[0]!r} or "
                     f"{v.outcomes[1]!r})")
    if state.next_check:
        lines.append(f"Next check: {state.next_check.check} ({state.next_check.label})")
    if state.outside_model_by_gate:
        lines.append(f"Cause outside the model: P = {state.outside_model_p:.3f} ("
                     + ", ".join(f"under {g} {p:.3f}" for g, p in state.outside_model_by_gate) + ")")
    d = state.decision
    if d is not None:
        target = f" {d.target}" if d.target else ""
        cost = f", expected {d.expected_cost:.1f} {unit} to finish" if d.expected_cost is not None else ""
        lines.append(f"Decision: {d.action}{target}{cost}")
        for r in d.reasons:
            lines.append(f"  why: {r.text}")
        others = [a for a in d.alternatives if (a.action, a.target) != (d.action, d.target)]
        for a in others:
            price = f"{a.expected_cost:.1f} {unit}" if a.expected_cost is not None else "no price in the model"
            lines.append(f"  instead: {a.action}{' ' + a.target if a.target else ''}: {price}")
    for caution in state.cautions:
        lines.append(f"CAUTION: {caution}")
    return "\n".join(lines) + "\n"


def run(args) -> int:
    from troubleshoot.model.source import load_any_model, resolve_model_path

    path = resolve_model_path(args.model)
    model, warnings = load_any_model(str(path))
    for warning in warnings:
        print(f"troubleshoot: {warning}", file=sys.stderr)
    settings = settings_for(model, args.threshold, args.min_bits, args.group_p, args.lookahead)
    session = Session(model, settings, model_path=str(path))
    apply_steps(session, args.steps)
    if args.json:
        sys.stdout.write(json.dumps(suggestion_json(session, args.model), indent=2, allow_nan=False) + "\n")
    else:
        sys.stdout.write(render_text(session))
    return 0
