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
from troubleshoot.session import Session, settings_for
from troubleshoot.session.actions import (
    ActionError,
    RecordFinding,
    RecordRepair,
    RecordVerification,
    finding_from_text,
)
from troubleshoot.session.render import render_state


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
                        help="a check or symptom and the outcome seen, by name or by its number "
                        "1..K in the check's list (1 the normal one); repeatable, order kept")
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
    parser.add_argument("--engine", choices=("auto", "join tree", "decision diagram"), default="auto",
                        help="which exact path computes the figures (default auto: the join tree, or the "
                             "decision diagram when the join tree would not fit in memory); for testing")
    parser.set_defaults(steps=[])
    return parser


def step_actions(model, steps) -> list[RecordFinding | RecordRepair | RecordVerification]:
    """The typed actions of ('finding', 'CHECK=OUTCOME') and ('repaired', 'EVENT') steps, in order.

    ``--finding TOP=OUTCOME`` (the top event's id) after a repair is the
    verification; ``ok`` and ``failed`` name its outcomes.
    """
    actions: list[RecordFinding | RecordRepair | RecordVerification] = []
    repaired = False
    for kind, value in steps:
        if kind == "repaired":
            actions.append(RecordRepair(value.strip()))
            repaired = True
            continue
        try:
            finding = finding_from_text(value)
        except ActionError:
            raise SessionError(f"--finding {value!r}: write CHECK=OUTCOME, e.g. {_example(model)}") from None
        if finding.check != model.top:
            actions.append(finding)
            continue
        if not repaired:
            raise SessionError(f"--finding {value!r}: the top event {finding.check!r} has occurred (the "
                               "complaint); give it after --repaired EVENT to record the verification")
        outcome = finding.outcome
        if isinstance(outcome, str) and outcome.casefold() in ("ok", "failed"):
            outcome = 0 if outcome.casefold() == "ok" else 1
        actions.append(RecordVerification(outcome))
    return actions


def apply_steps(session: Session, steps) -> None:
    """Apply ('finding', 'CHECK=OUTCOME') and ('repaired', 'EVENT') steps in order."""
    session.apply_all(step_actions(session.model, steps))


def _example(model) -> str:
    checks = model.checks + model.symptoms
    return f"{checks[0].id}={checks[0].outcomes[1]}" if checks else "CHECK=OUTCOME"


def _finite(x):
    return None if x is None or not math.isfinite(x) else x


def suggestion_json(session: Session, model_spec: str) -> dict:
    """The ``suggest --json`` document (see docs/suggest-contract.md)."""
    state = session.explained_state()
    model = session.model
    explanation = session.explanation
    return {
        "model": model.name,
        "model_source": model_spec,
        "cost_unit": model.cost_unit,
        "engine": session.engine.name,
        "status": state.status,
        "log_p_findings": state.log_p_findings,
        "entropy_bits": state.entropy_bits,
        "suspects": [{"id": s.id, "label": s.label, "p": s.p, "repaired": s.repaired, "condition": s.condition}
                     for s in state.suspects],
        "ranking": [
            {"id": r.check, "label": r.label, "cost": r.cost, "bits": r.bits, "score": _finite(r.score),
             "score_infinite": math.isinf(r.score), "outcomes": r.outcome_probabilities(),
             "caution": r.caution}
            for r in state.ranking
        ],
        "next_check": state.next_check.check if state.next_check else None,
        "why": state.why.to_dict() if state.why is not None else None,
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


def render_text(session: Session) -> str:
    """The readable table: ranking, suspects, explanation, status (:func:`troubleshoot.session.render.render_state`),
    then why the next check is recommended."""
    text = render_state(session.model, session.state, session.explanation, engine_name=session.engine.name)
    why = session.explained_state().why
    if why is None:
        return text
    lines = [f"Why: {why.text}"]
    for shift in why.suspects:
        after = ", ".join(f"if {o}: {p:.3f}" if p is not None else f"if {o}: impossible" for o, p in shift.p_if)
        lines.append(f"  {shift.id}: now {shift.p_now:.3f}; {after}")
    return text + "\n".join(lines) + "\n"


def run(args) -> int:
    from troubleshoot.model.source import load_any_model, resolve_model_path

    path = resolve_model_path(args.model)
    model, warnings = load_any_model(str(path))
    for warning in warnings:
        print(f"troubleshoot: {warning}", file=sys.stderr)
    settings = settings_for(model, args.threshold, args.min_bits, args.group_p, args.lookahead)
    from troubleshoot.engine.inference import Engine

    session = Session(model, settings, model_path=str(path), engine=Engine(model, kind=args.engine))
    apply_steps(session, args.steps)
    if args.json:
        sys.stdout.write(json.dumps(suggestion_json(session, args.model), indent=2, allow_nan=False) + "\n")
    else:
        sys.stdout.write(render_text(session))
    return 0
