"""``troubleshoot check MODEL``: validate a model file and summarise it.

Exit status 0 when the model loads (warnings are printed), 2 with every
problem listed when it does not.
"""

from __future__ import annotations

import json
from collections import Counter
from troubleshoot.analysis.observability import observability_warnings
from troubleshoot.model.demos import DEMOS
from troubleshoot.model import Model
from troubleshoot.model.source import model_path
from troubleshoot.model.xmlfile import load_model_with_warnings


def add_parser(subparsers, name):
    parser = subparsers.add_parser(
        name,
        help="validate a model file and summarise it",
        description="Validate a model file (or a bundled demo: "
        + ", ".join(sorted(DEMOS))
        + ") and print its size. Every problem is listed with file, line and fix; exit status 2 on errors.",
    )
    parser.add_argument("model", metavar="MODEL", help="model file (.xml) or a demo name: " + ", ".join(sorted(DEMOS)))
    parser.add_argument("--json", action="store_true", help="print the summary as one JSON object")
    return parser


def repeated_events(model: Model) -> list[str]:
    """Ids of events and gates that feed more than one gate (a condition counts as feeding)."""
    parents: Counter[str] = Counter()
    for gate in model.gates:
        for ref in set(gate.operands):
            parents[ref] += 1
    return sorted(ref for ref, count in parents.items() if count > 1)


def summary(model: Model) -> dict:
    """The counts printed by ``check``; the first seven keys are a stable interface."""
    return {
        "model": model.name,
        "top": model.top,
        "gates": len(model.gates),
        "basic_events": len(model.basic_events),
        "repeated_events": len(repeated_events(model)),
        "checks": len(model.checks),
        "symptoms": len(model.symptoms),
        "top_label": model.top_label or model.label_of(model.top),
        "unlisted_causes": sum(1 for g in model.gates if g.unlisted is not None),
        "cost_unit": model.cost_unit,
        "source": model.source,
        "escalation": None if model.escalation is None else {
            "label": model.escalation.label,
            "cost": model.escalation.cost,
            "instructions": model.escalation.instructions,
        },
    }


def escalation_line(model: Model) -> str:
    """The escalation in words with its price, or what applies without one."""
    if model.escalation is None:
        # The documented default (troubleshoot.advice.policy): no price, so
        # never chosen by cost, but advised once the cause is outside the model.
        return f"none: advised only when P(outside the model) >= {model.isolation_threshold:g}"
    return f"{model.escalation.label} ({model.escalation.cost:g} {model.cost_unit})"


def run(args) -> int:
    path = model_path(args.model)  # a missing or unreadable file is the loader's to report, with its words
    model, warnings = load_model_with_warnings(path)
    warnings = list(warnings) + observability_warnings(model)
    facts = summary(model)
    if args.json:
        facts["warnings"] = [str(w) for w in warnings]
        print(json.dumps(facts, indent=2))
        return 0
    print(f"{path}: model is valid")
    print(f"  model            {model.name}")
    print(f"  top event        {model.top}: {facts['top_label']}")
    print(f"  gates            {facts['gates']}")
    print(f"  basic events     {facts['basic_events']}")
    print(f"  repeated events  {facts['repeated_events']} (events or gates feeding more than one gate)")
    print(f"  unlisted causes  {facts['unlisted_causes']} (OR gates with a probability of causes outside the model)")
    print(f"  checks           {facts['checks']}")
    print(f"  symptoms         {facts['symptoms']}")
    print(f"  cost unit        {model.cost_unit}")
    print(f"  escalation       {escalation_line(model)}")
    if warnings:
        print(f"  warnings         {len(warnings)}")
        for warning in warnings:
            print(f"    {warning}")
    else:
        print("  warnings         none")
    return 0
