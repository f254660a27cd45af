"""``troubleshoot bench [--json] [--sizes N ...] [--no-references] [--three-outcomes SHARE]``: speed and memory figures."""

from __future__ import annotations

import argparse
import json


def _size(text: str) -> int:
    try:
        n = int(text.replace(",", "").replace("_", ""))
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number of basic events") from None
    if n < 4:
        raise argparse.ArgumentTypeError(f"{n} basic events is too few: a synthetic tree needs at least 4")
    return n


def add_parser(subparsers, name):
    from troubleshoot.study.benchmark import REFERENCE_BUDGET_S, SIZES

    p = subparsers.add_parser(
        name, help="measure compile and propagation speed, memory, and speed against pgmpy and pyAgrum",
        description="Seeded synthetic fault trees (default 100, 500, 2,000 and 5,000 basic events; any size "
                    "from 4, e.g. 10000 20000 50000): compile seconds, propagation and step milliseconds "
                    "(median), peak memory, join-tree width and table size, the floor (one multiply-add "
                    "pass over as many entries as a propagation touches) and speed ratios against pgmpy "
                    "and pyAgrum on the same network and findings, each reference run in a child process "
                    "with a hard timeout.")
    p.add_argument("--json", action="store_true", help="print the figures as JSON")
    p.add_argument("--sizes", type=_size, nargs="+", default=list(SIZES), metavar="N",
                   help="numbers of basic events (default: %(default)s)")
    p.add_argument("--no-references", action="store_true", help="skip pgmpy and pyAgrum")
    p.add_argument("--budget", type=float, default=REFERENCE_BUDGET_S, metavar="SECONDS",
                   help="time a reference library may take per job (default: %(default)s s)")
    p.add_argument("--seed", type=int, default=1, help="seed of the synthetic trees (default: 1)")
    p.add_argument("--three-outcomes", type=float, default=0.0, metavar="SHARE",
                   help="also time the step on the same trees with this share of the checks read as "
                        "low / normal / high (e.g. 0.33), against the two-outcome trees")
    p.add_argument("--hard-sizes", type=int, nargs="*", default=None, metavar="N",
                   help="basic events of the hard trees (shared supports, wide join trees) timed per engine "
                        "(default: 300 1000 2000; give none to skip)")
    return p


def run(args) -> int:
    from troubleshoot.errors import InputError
    from troubleshoot.progress import ProgressDisplay
    from troubleshoot.study.benchmark import as_json, as_table, run_size

    if not 0.0 <= args.three_outcomes <= 1.0:
        raise InputError(f"--three-outcomes {args.three_outcomes:g} is not a share; give a number from 0 to 1, "
                         "such as 0.33")

    results = []
    gave_up: set = set()
    with ProgressDisplay("bench", unit="sizes", delay=0.0) as progress:
        for i, n in enumerate(args.sizes):
            progress.count(i, len(args.sizes))
            results.append(run_size(n, seed=args.seed, references=not args.no_references,
                                    budget=args.budget, progress=progress.message, gave_up=gave_up,
                                    three_outcomes=args.three_outcomes))
        progress.count(len(args.sizes), len(args.sizes))
    from troubleshoot.study.hardbench import HARD_SIZES, hard_json, hard_table, run_hard

    hard_sizes = HARD_SIZES if args.hard_sizes is None else args.hard_sizes
    hard = []
    with ProgressDisplay("bench: hard trees", delay=0.0) as progress:
        for n in hard_sizes:
            hard.append(run_hard(n, seed=args.seed, progress=progress.message))
    if args.json:
        doc = as_json(results)
        doc["hard_trees"] = hard_json(hard)
        print(json.dumps(doc, indent=2))
    else:
        print(as_table(results, args.budget))
        if hard:
            print()
            print(hard_table(hard))
    return 0
