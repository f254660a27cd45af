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
from troubleshoot.files import check_output_path
from troubleshoot.progress import ProgressDisplay

#: The most units one run simulates: beyond it a run takes days on a laptop
#: (tens of milliseconds a unit) and its results would not fit in memory.
MAX_CASES = 10_000_000


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
                             "default; the protocol the optimal policy is exact for), or go straight to the next "
                             "repair or escalation (repair; optimal is then not computed)")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    parser.add_argument("--plot", metavar="FILE.png", help="write a PNG of the cost distribution per strategy")
    parser.add_argument("--workers", type=int, default=None, metavar="K",
                        help="processes to spread the cases over (default: every core)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="run the cases on a Dask cluster, e.g. tcp://127.0.0.1:8786 (pip install '.[cluster]')")
    parser.add_argument("--logs", metavar="FOLDER",
                        help="write each simulated unit as a session log (the first strategy's session) into "
                             "FOLDER, as case-000001.jsonl ..., in the format of a real session")
    parser.add_argument("--truth", metavar="TRUE_MODEL",
                        help="draw the units' faults and the checks' answers from this model (same ids) while "
                             "the sessions reason with MODEL: a fleet whose real figures differ from the model's")
    return parser


def _check_arguments(args) -> None:
    problems = []
    if args.cases < 1:
        problems.append(f"--cases must be at least 1, not {args.cases}")
    elif args.cases > MAX_CASES:
        problems.append(f"--cases is at most {MAX_CASES:,} in one run, not {args.cases:,}; "
                        "split the study into runs with different seeds")
    if args.seed < 0:
        problems.append(f"--seed must be 0 or more, not {args.seed}")
    if args.workers is not None and args.workers < 1:
        problems.append(f"--workers must be at least 1, not {args.workers}")
    if args.workers is not None and args.scheduler:
        problems.append("give either --workers (local processes) or --scheduler (a Dask cluster), not both")
    if args.plot and not args.plot.lower().endswith(".png"):
        problems.append(f"--plot writes a PNG: give a file name ending in .png, not {args.plot!r}")
    if problems:
        raise SimulationError("; ".join(problems))
    if args.plot:
        # Refused before the simulation, not after it: a bad path must not cost the whole run.
        check_output_path(args.plot, "plot")


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
    from troubleshoot.session import settings_for
    from troubleshoot.study.optimal import OptimalTooLarge, expected_cost, solve
    from troubleshoot.study.simulation import default_workers, simulate, summarise
    from troubleshoot.engine.inference import Engine
    from troubleshoot.study.strategies import STRATEGY_NAMES, make_strategy, protocol_actor

    _check_arguments(args)
    plt = _require_matplotlib() if args.plot else None
    model, warnings = load_any_model(args.model)
    for w in warnings:
        print(f"troubleshoot: {w}", file=sys.stderr)
    settings = settings_for(model)
    names = list(dict.fromkeys(args.strategy or STRATEGY_NAMES))
    workers = args.workers or default_workers()

    checks_after_repair = args.after_repair == "diagnose"
    args.protocol = args.after_repair
    optimal = None
    exact: dict[str, float] = {}
    if "optimal" in names and not checks_after_repair:
        print("troubleshoot: optimal skipped: it is exact for the tool's protocol (--after-repair diagnose), "
              "not for the repair-only one", file=sys.stderr)
        names.remove("optimal")
    elif "optimal" in names:
        try:
            optimal = solve(model)
        except OptimalTooLarge as exc:
            print(f"troubleshoot: optimal skipped: {exc}", file=sys.stderr)
            names.remove("optimal")
        if optimal is not None:
            # Small enough for the optimal policy: every strategy's expected cost is exact too, same protocol.
            engine = Engine(model)
            for name in names:
                if name == "optimal":
                    exact[name] = optimal.expected_cost
                    continue
                strategy = make_strategy(name)
                try:
                    exact[name] = expected_cost(model, protocol_actor(model, strategy, settings, engine))
                except OptimalTooLarge as exc:
                    print(f"troubleshoot: exact cost of {name} skipped: {exc}", file=sys.stderr)
    if not names:
        raise SimulationError("no strategy left to simulate")

    # "optimal" stays in the names only when its policy was solved.
    specs = [(name, optimal if name == "optimal" and optimal is not None else None) for name in names]
    truth = _load_truth(args.truth, model) if args.truth else None
    sink = _log_sink(args.logs, args.cases) if args.logs else None
    from troubleshoot.study.execution import executor_for

    with executor_for(workers if args.cases > 1 else None, args.scheduler) as executor, \
            ProgressDisplay(f"simulating {model.name}", unit="cases") as progress:
        results = simulate(model, args.cases, args.seed, specs, settings, workers, progress.count,
                           checks_after_repair=checks_after_repair, truth=truth, log_sink=sink,
                           executor=executor)
    if args.logs:
        print(f"wrote {args.cases} session logs to {args.logs}", file=sys.stderr)
    summaries = {name: summarise(name, results[name]) for name in names}
    best = optimal.expected_cost if optimal is not None else None

    if args.plot:
        _plot(plt, args.plot, model, summaries, args)
    if args.json:
        print(json.dumps(_as_json(model, args, summaries, exact, best), indent=2))
    else:
        _print_table(model, args, summaries, exact, best, optimal)
    return 0


def log_name(case: int) -> str:
    """File name of simulated unit ``case`` (0-based) in a --logs folder."""
    return f"case-{case + 1:06d}.jsonl"


def _log_sink(folder: str, cases: int):
    """Writes each unit's log into the folder; refuses before any work if a file would be overwritten."""
    from pathlib import Path

    target = Path(folder)
    try:
        target.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SimulationError(f"{folder}: cannot create the log folder ({exc.strerror}); give a writable --logs "
                              "folder") from None
    taken = [name for name in (log_name(c) for c in range(cases)) if (target / name).exists()]
    if taken:
        raise SimulationError(f"{target / taken[0]}: already exists ({len(taken)} such files); give an empty "
                              "--logs folder so no log is overwritten")

    def sink(case: int, data: bytes) -> None:
        path = target / log_name(case)
        try:
            with open(path, "xb") as fh:
                fh.write(data)
        except OSError as exc:
            raise SimulationError(f"{path}: cannot write the session log ({exc.strerror}); check the folder") \
                from None
    return sink


def _load_truth(path: str, model):
    from troubleshoot.model.source import load_any_model

    from troubleshoot.study.learn import structure_of

    truth, _warnings = load_any_model(path)
    if structure_of(truth) != structure_of(model):
        raise SimulationError(f"{path}: --truth must have the same events, gates and checks as the model "
                              f"{model.name!r} (only its figures may differ)")
    return truth


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
    known = _faults_known_mean(summaries)
    return {
        "cases": args.cases,
        "seed": args.seed,
        "model": model.name,
        "cost_unit": model.cost_unit,
        "strategies": strategies,
        "optimal_expected_cost": best,
        "after_repair": args.protocol,
        "faults_known_mean_cost": known if math.isfinite(known) else None,
    }


def _faults_known_mean(summaries) -> float:
    """Mean over the units of their cost with the faults known (the same units for every strategy)."""
    first = next(iter(summaries.values()))
    known = [k for k in first.faults_known if math.isfinite(k)]
    return sum(known) / len(known) if known else math.nan


def _print_table(model, args, summaries, exact, best, optimal) -> None:
    from troubleshoot.advice.policy import escalation_charge

    unit = model.cost_unit
    print(f"Simulated troubleshooting of {model.name}: {args.cases} failed units, seed {args.seed}, costs in {unit}.")
    print("Each unit: faults drawn given the complaint, checks answered from the model's noise, repairs in the "
          "policy's order until the unit is verified working or handed over; every strategy meets the same units "
          "and draws.")
    charge = escalation_charge(model)
    if model.escalation is not None:
        print(f"Escalation ({model.escalation.label}) costs {charge:g} {unit}, counted in the unit's cost.")
    else:
        print(f"The model gives no escalation price: an escalation is charged {charge:g} {unit} (its dearest "
              "repair with its verification).")
    if args.protocol == "diagnose":
        print("After a failed verification the strategy checks again, the repair taken into account.")
    else:
        print("Repair-only protocol: no check after the first repair (optimal is not computed for it).")
    print("95% interval of the mean cost: mean +/- 1.96 sd / sqrt(n) (normal approximation).")
    print("First repair right: share of units whose first repair was of a component that had failed (or, with "
          "no repair, whose cause was rightly isolated outside the model).")
    print()
    width = max(17, *(len(name) for name in summaries))
    header = f"{'strategy':<{width}} {'mean cost':>14} {'95% interval':>24} {'checks':>7} {'first repair right':>19} " \
             f"{'wrong repairs':>14}"
    if exact:
        header += f" {'exact expected':>16} {'vs optimal':>11}"
    print(header)
    for name, s in summaries.items():
        line = (f"{name:<{width}} {s.mean_cost:>10.1f} {unit:<3} {s.ci95[0]:>9.1f} to {s.ci95[1]:>7.1f} {unit:<3} "
                f"{s.mean_checks:>7.2f} {100 * s.accuracy:>17.1f} % {s.wrong_repairs:>9.2f}/unit")
        if exact:
            value = exact.get(name)
            ratio = _ratio(value, best) if value is not None else None
            line += f" {value:>12.1f} {unit:<3}" if value is not None else f" {'':>16}"
            line += f" {ratio:>10.3f}x" if ratio is not None else ""
        print(line)
    print()
    known = _faults_known_mean(summaries)
    if math.isfinite(known):
        print(f"faults known: {known:.1f} {unit} per unit, a lower bound for every strategy on these units (each "
              "unit's cheapest set of verified repairs that puts it right, or its escalation when that is cheaper "
              "or nothing listed does).")
    if optimal is not None:
        print(f"optimal: exact expected cost {best:.2f} {unit} (dynamic programming over {optimal.states} states "
              "of the protocol: checks and repairs interleaved, escalation an action); 'vs optimal' is the exact "
              "expected cost of each strategy over it, on the same protocol.")
    else:
        print("optimal: not computed for this model (see the message above, or add --strategy optimal).")
    for name, s in summaries.items():
        notes = []
        o = s.outcomes
        if o.get("escalated"):
            notes.append(f"{o['escalated']} were handed over (escalated, its cost counted)")
        if o.get("capped"):
            notes.append(f"{o['capped']} hit the step cap (charged as an escalation)")
        if o.get("left-failed"):
            notes.append(f"{o['left-failed']} ended with the repair's verifying check passing while the unit "
                         "still failed")
        if o.get("engine-refused"):
            notes.append(f"{o['engine-refused']} stopped because the network after a repair exceeded the "
                         "engine's memory budget (charged as an escalation)")
        if notes:
            print(f"{name}: of {s.cases} units, " + "; ".join(notes) + ".")


def _plot(plt, path, model, summaries, args) -> None:
    names = list(summaries)
    fig, ax = plt.subplots(figsize=(max(7.0, 1.4 * len(names) + 2), 5.0))
    data = [summaries[n].costs for n in names]
    ax.boxplot(data, showmeans=True, showfliers=True)
    ax.set_xticks(range(1, len(names) + 1), names, rotation=20, ha="right")
    unit = model.cost_unit
    ax.set_ylabel(f"total cost per unit ({unit})")
    finite = sorted(c for row in data for c in row if math.isfinite(c))
    if finite and finite[-1] > 10 * max(1e-9, finite[len(finite) // 2]):
        # A few units cost far more than the rest: a log axis keeps the bulk readable.
        ax.set_yscale("symlog", linthresh=max(1.0, finite[len(finite) // 2]))
    for i, n in enumerate(names, start=1):
        s = summaries[n]
        ax.errorbar([i + 0.3], [s.mean_cost], yerr=[[s.mean_cost - s.ci95[0]], [s.ci95[1] - s.mean_cost]],
                    fmt="o", color="black", capsize=4, markersize=3)
        ax.annotate(f"{s.mean_cost:.0f}", (i + 0.36, s.mean_cost), fontsize=8, va="center")
    title = (f"{model.name}\n{args.cases} simulated units, seed {args.seed}; box: quartiles, triangle: mean, "
             f"bar: 95 % interval of the mean ({unit})")
    ax.set_title(title, fontsize=9, wrap=True)
    fig.tight_layout()
    try:
        fig.savefig(path, format="png", dpi=120)
    except OSError as exc:
        raise SimulationError(f"{path}: cannot write the plot ({exc.strerror or exc}); give a writable path") \
            from None
    finally:
        plt.close(fig)
    print(f"wrote {path}", file=sys.stderr)
