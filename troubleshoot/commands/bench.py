"""``troubleshoot bench [--json] [--sizes N ...] [--no-references]``: speed and memory figures."""

from __future__ import annotations

import json


def add_parser(subparsers, name):
    from troubleshoot.study.benchmark import REFERENCE_BUDGET_S, SIZES

    p = subparsers.add_parser(
        name, help="measure compile and propagation speed, memory, and speed against pgmpy and pyAgrum",
        description="Seeded synthetic fault trees of 100, 500, 2,000 and 5,000 basic events: compile "
                    "seconds, propagation and step milliseconds (median), peak memory, join-tree width and "
                    "table size, and speed ratios against pgmpy and pyAgrum on the same network and findings.")
    p.add_argument("--json", action="store_true", help="print the figures as JSON")
    p.add_argument("--sizes", type=int, nargs="+", default=list(SIZES), metavar="N",
                   help="numbers of basic events (default: %(default)s)")
    p.add_argument("--no-references", action="store_true", help="skip pgmpy and pyAgrum")
    p.add_argument("--budget", type=float, default=REFERENCE_BUDGET_S, metavar="SECONDS",
                   help="time a reference library may take per job (default: %(default)s s)")
    p.add_argument("--seed", type=int, default=1, help="seed of the synthetic trees (default: 1)")
    p.add_argument("--hard-sizes", type=int, nargs="*", default=None, metavar="N",
                   help="basic events of the hard trees (shared supports, wide join trees) timed per engine "
                        "(default: 300 1000 2000; give none to skip)")
    return p


def run(args) -> int:
    from troubleshoot.study.benchmark import as_json, as_table, run_size

    from troubleshoot.progress import ProgressDisplay

    results = []
    with ProgressDisplay("bench", delay=0.0) as progress:
        for i, n in enumerate(args.sizes, start=1):
            progress.count(i - 1, len(args.sizes))
            results.append(run_size(n, seed=args.seed, references=not args.no_references,
                                    budget=args.budget, progress=progress.message))
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
