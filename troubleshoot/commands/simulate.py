"""``troubleshoot simulate MODEL``: measure diagnostic quality on sampled faults.

Every strategy meets the same sampled failed units and the same outcome
draws (common random numbers); the output gives, per strategy, the mean cost
with its 95% interval, checks per case, how often the first repair was
right and the wrong repairs per case, and, on models small enough, the ratio
to the exact optimal policy.
"""

from __future__ import annotations

import json
import math
import sys

from troubleshoot.errors import TroubleshootError
from troubleshoot.progress import ProgressDisplay


class SimulationError(TroubleshootError):
    """A simulation was asked for with arguments it cannot run with."""


def add_parser(subparsers, name):
    from troubleshoot.study.strategies import STRATEGY_NAMES

    parser = subparsers.add_parser(
        name,
        help="simulate troubleshooting on sampled faults and compare strategies",
        description="Draw failed units from the model given the complaint, answer each check from the "
                    "model's noise, run each strategy through a diagnosis session until a verification "
                    "passes, and report the cost per strategy (the same units and draws for all).",
    )
    parser.add_argument("model", metavar="MODEL", help="model file (ours or Open-PSA MEF) or a demo name")
    parser.add_argument("--cases", type=int, default=200, metavar="N", help="failed units to simulate (default 200)")
    parser.add_argument("--seed", type=int, default=0, metavar="S", help="seed; same seed, same output (default 0)")
    parser.add_argument("--strategy", action="append", choices=STRATEGY_NAMES, metavar="NAME",
                        help="strategy to run (repeat for several; default all: " + ", ".join(STRATEGY_NAMES) + ")")
    parser.add_argument("--after-repair", choices=("diagnose", "repair"), default="diagnose",
                        help="after a failed verification: check again as the tool does (diagnose, the "
                             "default), or go straight to the next repair (repair; always so when optimal runs)")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    parser.add_argument("--plot", metavar="FILE.png", help="write a PNG of the cost distribution per strategy")
    parser.add_argument("--workers", type=int, default=None, metavar="K",
                        help="processes to spread the cases over (default: every core)")
    return parser


def _check_arguments(args) -> None:
    problems = []
    if args.cases < 1:
        problems.append(f"--cases must be at least 1, not {args.cases}")
    if args.seed < 0:
        problems.append(f"--seed must be 0 or more, not {args.seed}")
    if args.workers is not None and args.workers < 1:
        problems.append(f"--workers must be at least 1, not {args.workers}")
    if args.plot and not args.plot.lower().endswith(".png"):
        problems.append(f"--plot writes a PNG: give a file name ending in .png, not {args.plot!r}")
    if problems:
        raise SimulationError("; ".join(problems))


def _require_matplotlib():
    try:
        import matplotlib
    except ImportError:
        raise SimulationError("--plot needs the matplotlib package, which is not installed; install it "
                              "(pip install matplotlib) or leave out --plot") from None
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def run(args) -> int:
    from troubleshoot.model.source import load_any_model
    from troubleshoot.study.optimal import OptimalTooLarge, expected_cost, solve
    from troubleshoot.session import settings_for
    from troubleshoot.study.simulation import default_workers, simulate, summarise
    from troubleshoot.study.strategies import STRATEGY_NAMES, make_strategy

    _check_arguments(args)
    plt = _require_matplotlib() if args.plot else None
    model, warnings = load_any_model(args.model)
    for w in warnings:
        print(f"troubleshoot: {w}", file=sys.stderr)
    settings = settings_for(model)
    names = list(dict.fromkeys(args.strategy or STRATEGY_NAMES))
    workers = args.workers or default_workers()

    optimal = None
    exact: dict[str, float] = {}
    if "optimal" in names:
        try:
            optimal = solve(model, settings)
        except OptimalTooLarge as exc:
            print(f"troubleshoot: optimal skipped: {exc}", file=sys.stderr)
            names.remove("optimal")
        if optimal is not None:
            # Small enough for the optimal policy: every strategy's expected cost is exact too.
            for name in names:
                strategy = make_strategy(name, optimal.policy)
                exact[name] = optimal.expected_cost if name == "optimal" else expected_cost(model, strategy, settings)
    if not names:
        raise SimulationError("no strategy left to simulate")

    # "optimal" stays in the names only when its policy was solved.
    specs = [(name, optimal.policy if name == "optimal" and optimal is not None else None) for name in names]
    # The optimal policy is exact for the repair-only protocol, so a run that
    # compares with it uses that protocol for every strategy.
    checks_after_repair = args.after_repair == "diagnose" and optimal is None
    if optimal is not None and args.after_repair == "diagnose":
        print("troubleshoot: optimal is exact for the repair-only protocol; every strategy runs under it "
              "(no checks after the first repair)", file=sys.stderr)
    args.protocol = "diagnose" if checks_after_repair else "repair"
    with ProgressDisplay(f"simulating {model.name}", unit="cases") as progress:
        results = simulate(model, args.cases, args.seed, specs, settings, workers, progress.count,
                           checks_after_repair=checks_after_repair)
    summaries = {name: summarise(name, results[name]) for name in names}
    best = optimal.expected_cost if optimal is not None else None

    if args.plot:
        _plot(plt, args.plot, model, summaries, args)
    if args.json:
        print(json.dumps(_as_json(model, args, summaries, exact, best), indent=2))
    else:
        _print_table(model, args, summaries, exact, best, optimal)
    return 0


def _ratio(value: float, best: float | None) -> float | None:
    if best is None or best <= 0:
        return None
    return value / best


def _as_json(model, args, summaries, exact, best) -> dict:
    strategies = {}
    for name, s in summaries.items():
        strategies[name] = {
            "mean_cost": s.mean_cost,
            "ci95": [s.ci95[0], s.ci95[1]],
            "mean_checks": s.mean_checks,
            "accuracy": s.accuracy,
            "wrong_repairs": s.wrong_repairs,
            "sd_cost": s.sd_cost,
            "outcomes": dict(s.outcomes),
            "exact_expected_cost": exact.get(name),
            "ratio_to_optimal": _ratio(s.mean_cost, best),
        }
    return {
        "cases": args.cases,
        "seed": args.seed,
        "model": model.name,
        "cost_unit": model.cost_unit,
        "strategies": strategies,
        "optimal_expected_cost": best,
        "after_repair": args.protocol,
    }


def _print_table(model, args, summaries, exact, best, optimal) -> None:
    unit = model.cost_unit
    print(f"Simulated troubleshooting of {model.name}: {args.cases} failed units, seed {args.seed}, costs in {unit}.")
    print("Each unit: faults drawn given the complaint, checks answered from the model's noise, repairs in the "
          "session's order until the unit is verified working; every strategy meets the same units and draws.")
    if args.protocol == "diagnose":
        print("After a failed verification the strategy checks again, the repair taken into account.")
    else:
        print("Repair-only protocol: no check after the first repair (the class in which optimal is exact).")
    print("95% interval of the mean cost: mean +/- 1.96 sd / sqrt(n) (normal approximation).")
    print("First repair right: share of units whose first repair was of a component that had failed (or, with "
          "no repair, whose cause was rightly isolated outside the model).")
    print()
    header = f"{'strategy':<17} {'mean cost':>14} {'95% interval':>24} {'checks':>7} {'first repair right':>19} " \
             f"{'wrong repairs':>14}"
    if exact:
        header += f" {'exact expected':>16} {'vs optimal':>11}"
    print(header)
    for name, s in summaries.items():
        line = (f"{name:<17} {s.mean_cost:>10.1f} {unit:<3} {s.ci95[0]:>9.1f} to {s.ci95[1]:>7.1f} {unit:<3} "
                f"{s.mean_checks:>7.2f} {100 * s.accuracy:>17.1f} % {s.wrong_repairs:>9.2f}/unit")
        if exact:
            value = exact.get(name)
            ratio = _ratio(value, best) if value is not None else None
            line += f" {value:>12.1f} {unit:<3}" if value is not None else f" {'':>16}"
            line += f" {ratio:>10.3f}x" if ratio is not None else ""
        print(line)
    print()
    if optimal is not None:
        print(f"optimal: exact expected cost {best:.2f} {unit} (dynamic programming over {optimal.states} sets "
              "of findings); 'vs optimal' is the exact expected cost of each strategy over it.")
    else:
        print("optimal: not computed for this model (see the message above, or add --strategy optimal).")
    for name, s in summaries.items():
        notes = []
        o = s.outcomes
        if o.get("left-failed"):
            notes.append(f"{o['left-failed']} ended with the repair's verifying check passing while the unit "
                         "still failed")
        if o.get("unresolved"):
            notes.append(f"{o['unresolved']} ended with no repairable suspect left")
        if o.get("outside-model"):
            notes.append(f"{o['outside-model']} ended with the cause isolated outside the model (an unlisted "
                         "cause: escalate)")
        if o.get("engine-refused"):
            notes.append(f"{o['engine-refused']} stopped because the network after a repair exceeded the "
                         "engine's memory budget")
        if o.get("capped"):
            notes.append(f"{o['capped']} hit the step cap")
        if notes:
            print(f"{name}: of {s.cases} units, " + "; ".join(notes) + ".")


def _plot(plt, path, model, summaries, args) -> None:
    names = list(summaries)
    fig, ax = plt.subplots(figsize=(max(6.0, 1.3 * len(names) + 2), 4.5))
    data = [summaries[n].costs for n in names]
    ax.boxplot(data, showmeans=True, showfliers=True)
    ax.set_xticks(range(1, len(names) + 1), names)
    ax.set_ylabel(f"total cost per unit ({model.cost_unit})")
    ax.set_title(f"{model.name}: cost of {args.cases} simulated diagnoses (seed {args.seed}); triangle = mean")
    finite = [c for row in data for c in row if math.isfinite(c)]
    if finite and max(finite) > 20 * max(1e-9, sorted(finite)[len(finite) // 2]):
        ax.set_yscale("symlog")
    fig.tight_layout()
    try:
        fig.savefig(path, format="png", dpi=120)
    except OSError as exc:
        raise SimulationError(f"{path}: cannot write the plot ({exc.strerror or exc}); give a writable path") \
            from None
    finally:
        plt.close(fig)
    print(f"wrote {path}", file=sys.stderr)
