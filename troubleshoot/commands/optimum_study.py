"""``troubleshoot optimum-study``: the tool's policy against the exact optimum on generated small models.

Draws seeded models of 5 to 8 basic events with unlisted causes
(:func:`troubleshoot.study.optimum_study.small_model`), solves the exact
optimal policy of each and evaluates each strategy exactly on the same
protocol, then prints one line per model (the ratio of the strategy's
expected cost to the optimum) and the mean and worst ratio. Exact
enumeration, no sampling: same seed, same figures.
"""

from __future__ import annotations

import json
import math

from troubleshoot.errors import TroubleshootError
from troubleshoot.progress import ProgressDisplay


class StudyError(TroubleshootError):
    """The study was asked for with arguments it cannot run with."""


def add_parser(subparsers, name):
    from troubleshoot.study.optimum_study import FAMILIES, STUDY_MAX_STATES
    from troubleshoot.study.strategies import STRATEGY_NAMES

    parser = subparsers.add_parser(
        name,
        help="compare strategies with the exact optimal policy on generated small models",
        description="Generate seeded models of 5 to 8 basic events with unlisted causes, a priced escalation "
                    "and two noisy checks (three with --family part); for each, compute the exact optimal expected cost (the tool's "
                    "protocol: checks and repairs interleaved, escalation an action) and each strategy's exact "
                    "expected cost on the same protocol; print the ratios, their mean and the worst.",
    )
    parser.add_argument("--models", type=int, default=30, metavar="N",
                        help="models with a computed optimum to study (default 30)")
    parser.add_argument("--seed", type=int, default=1, metavar="S", help="seed; same seed, same output (default 1)")
    parser.add_argument("--strategy", action="append", choices=[n for n in STRATEGY_NAMES if n != "optimal"],
                        metavar="NAME", help="strategy to compare (repeat for several; default info-per-cost)")
    parser.add_argument("--max-states", type=int, default=STUDY_MAX_STATES, metavar="K",
                        help=f"skip (and report) a model whose optimum needs more states (default {STUDY_MAX_STATES:,})")
    parser.add_argument("--family", choices=sorted(FAMILIES), default="subsystem",
                        help="which models: subsystem (a check per subsystem, the default) or part (also one "
                             "check on a single part, which may be failed without causing the complaint)")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    return parser


def run(args) -> int:
    from troubleshoot.study.optimum_study import optimum_study

    problems = []
    if not 1 <= args.models <= 10_000:
        problems.append(f"--models must be from 1 to 10000, not {args.models}")
    if args.seed < 0:
        problems.append(f"--seed must be 0 or more, not {args.seed}")
    if args.max_states < 1:
        problems.append(f"--max-states must be at least 1, not {args.max_states}")
    if problems:
        raise StudyError("; ".join(problems))
    names = tuple(dict.fromkeys(args.strategy or ["info-per-cost"]))
    rows = []
    with ProgressDisplay("solving generated models", unit="models") as progress:
        for row in optimum_study(args.models, args.seed, names, args.max_states, progress=progress.count,
                                 family=args.family):
            rows.append(row)
    solved = [r for r in rows if r.optimal is not None]
    summary: dict[str, dict[str, float | int | None]] = {}
    for name in names:
        ratios = [x for x in (r.ratio(name) for r in solved) if x is not None]
        summary[name] = {"mean_ratio": sum(ratios) / len(ratios) if ratios else None,
                         "worst_ratio": max(ratios) if ratios else None,
                         "at_optimum": sum(1 for x in ratios if x <= 1 + 1e-9)}
    if args.json:
        print(json.dumps({
            "seed": args.seed, "family": args.family, "models": len(solved), "skipped": len(rows) - len(solved),
            "cost_unit": "min",
            "rows": [{"model": r.model, "basic_events": r.basic_events, "checks": r.checks,
                      "unlisted_causes": r.unlisted, "optimal_expected_cost": r.optimal,
                      "exact_expected_cost": dict(r.costs), "states": r.states, "skipped": r.skipped}
                     for r in rows],
            "strategies": summary}, indent=2))
        return 0
    print(f"The tool's protocol on generated small models ({args.family} family), seed {args.seed}: exact "
          "expected costs in min (figures illustrative).")
    header = f"{'model':<22} {'events':>6} {'checks':>6} {'unlisted':>8} {'optimal':>11}"
    for name in names:
        header += f" {name:>14} {'ratio':>7}"
    print(header)
    for r in rows:
        line = f"{r.model:<22} {r.basic_events:>6} {r.checks:>6} {r.unlisted:>8} "
        if r.optimal is None:
            print(line + f"{'skipped':>11}  (optimum needs more than {args.max_states:,} states)")
            continue
        line += f"{r.optimal:>7.2f} min"
        costs = dict(r.costs)
        for name in names:
            line += f" {costs[name]:>10.2f} min {r.ratio(name):>7.4f}"
        print(line)
    print()
    print(f"{len(solved)} models with the optimum computed, {len(rows) - len(solved)} skipped as too large.")
    for name, s in summary.items():
        if s["mean_ratio"] is None or not math.isfinite(s["mean_ratio"]):
            print(f"{name}: no model solved")
            continue
        print(f"{name}: mean ratio to the optimum {s['mean_ratio']:.4f}, worst {s['worst_ratio']:.4f}, "
              f"at the optimum on {s['at_optimum']} of {len(solved)} models.")
    return 0
