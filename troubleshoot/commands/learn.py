"""``troubleshoot learn MODEL LOG_OR_FOLDER... -o LEARNED.xml``: learn the model's figures from session logs."""

from __future__ import annotations

import json
import sys
import time
from typing import Any

from troubleshoot.errors import TroubleshootError


def add_parser(subparsers, name):
    from troubleshoot.study.learn import DEFAULT_PRIOR_WEIGHT

    parser = subparsers.add_parser(
        name,
        help="learn a model's probabilities and check figures from session logs",
        description="Read session logs (folders recursively), keep those made on MODEL, and learn by exact EM "
                    "the basic events' probabilities, the checks' detection and false-alarm figures and the "
                    "share of unlisted causes, the model's own figures being the prior. Writes the learned "
                    "model in our format and, on request, a report and a plot.",
    )
    parser.add_argument("model", metavar="MODEL", help="the model the sessions were made on (file or demo name)")
    parser.add_argument("logs", metavar="LOG_OR_FOLDER", nargs="+", help="session logs, or folders of them")
    parser.add_argument("-o", "--output", metavar="LEARNED.xml", required=True, help="where the learned model goes")
    parser.add_argument("--prior-weight", type=float, default=DEFAULT_PRIOR_WEIGHT, metavar="N",
                        help=f"what the model's own figures are worth, in sessions (default {DEFAULT_PRIOR_WEIGHT:g})")
    parser.add_argument("--exposure", type=float, default=None, metavar="UNIT_PERIODS",
                        help="unit-periods of service the sessions come from (units that did not fail count as "
                             "evidence); without it P(top event) stays at the model's value")
    parser.add_argument("--json", action="store_true", help="print the findings as one JSON object")
    parser.add_argument("--report", metavar="FILE.md", help="write the Markdown report")
    parser.add_argument("--plot", metavar="FILE.png", help="draw every figure before and after, with intervals")
    parser.add_argument("--workers", type=int, default=None, metavar="K",
                        help="local processes to spread the work over (default: this process only)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="run the work on a Dask cluster, e.g. tcp://127.0.0.1:8786 (pip install '.[cluster]')")
    return parser


def _check_arguments(args) -> None:
    from troubleshoot.study.learn import LearnError

    problems = []
    if args.workers is not None and args.scheduler:
        problems.append("give either --workers (local processes) or --scheduler (a Dask cluster), not both")
    if args.workers is not None and args.workers < 1:
        problems.append(f"--workers must be at least 1, not {args.workers}")
    if args.plot and not args.plot.lower().endswith(".png"):
        problems.append(f"--plot writes a PNG: give a file name ending in .png, not {args.plot!r}")
    if not args.output.lower().endswith(".xml"):
        problems.append(f"-o writes a model file: give a name ending in .xml, not {args.output!r}")
    if problems:
        raise LearnError("; ".join(problems))


def run(args) -> int:
    from troubleshoot.model.source import load_any_model, resolve_model_path
    from troubleshoot.model.xmlfile import save_model
    from troubleshoot.progress import ProgressDisplay
    from troubleshoot.study import learn_report
    from troubleshoot.study.execution import executor_for
    from troubleshoot.study.learn import LearnError, learn, log_files, model_sha256

    _check_arguments(args)
    plt: Any = None
    if args.plot:
        try:
            import matplotlib
        except ImportError:
            raise LearnError("--plot needs the matplotlib package, which is not installed; install it "
                             "(pip install matplotlib) or leave out --plot") from None
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    model, warnings = load_any_model(args.model)
    for w in warnings:
        print(f"troubleshoot: {w}", file=sys.stderr)
    sha = model_sha256(resolve_model_path(args.model))
    paths = log_files(args.logs)
    if not paths:
        raise LearnError(f"no session log (*.jsonl) found in {', '.join(args.logs)}")
    started, cpu_started = time.perf_counter(), _cpu_seconds()
    with executor_for(args.workers, args.scheduler) as executor, \
            ProgressDisplay(f"learning {model.name}", unit="session logs read") as progress:
        result = learn(model, sha, paths, prior_weight=args.prior_weight, exposure=args.exposure,
                       executor=executor, progress=progress)
    elapsed = time.perf_counter() - started
    cpu = _cpu_seconds() - cpu_started  # this process and its local workers (ended by now), not a cluster's
    save_model(result.learned, args.output)
    if args.report:
        _write(args.report, learn_report.markdown(result, args.output))
    if args.plot:
        try:
            learn_report.plot(result, args.plot, plt)
        except OSError as exc:
            raise LearnError(f"{args.plot}: cannot write the plot ({exc.strerror or exc}); give a writable path") \
                from None
    if args.json:
        data = learn_report.as_json(result, args.output)
        data["seconds"] = elapsed
        data["sessions_per_second"] = result.sessions / elapsed if elapsed > 0 else None
        data["sessions_per_second_per_worker"] = (result.sessions / elapsed / result.workers
                                                  if elapsed > 0 else None)
        data["cpu_seconds"] = cpu
        data["sessions_per_cpu_second"] = result.sessions / cpu if cpu > 0 else None
        print(json.dumps(data, indent=2))
    else:
        skipped = len({p.path for p in result.problems if p.kind != "torn"})
        print(f"Learned {model.name} from {result.sessions:,} sessions ({result.distinct:,} distinct) of "
              f"{result.logs:,} logs in {elapsed:.1f} s on {result.where} "
              f"({result.sessions / max(elapsed, 1e-9):,.0f} sessions/s, reading {result.seconds_reading:.1f} s, "
              f"EM {result.seconds_em:.1f} s): {result.iterations} EM iterations, "
              f"log-likelihood {result.log_likelihood:,.4f}.")
        if skipped:
            print(f"{skipped} log(s) left out (see the report for each and why).")
        above = learn_report.false_alarms_above_model(result)
        if above:
            print("Checks that false-alarm more than modelled: " + ", ".join(f.check for f in above) + ".")
        print(f"Wrote {args.output}" + (f" and {args.report}" if args.report else "")
              + (f" and {args.plot}" if args.plot else "") + ".")
    return 0


def _cpu_seconds() -> float:
    """CPU time of this process and of its child processes that have ended (user + system), in seconds."""
    import resource

    own, kids = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def _write(path: str, text: str) -> None:
    try:
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(text)
    except OSError as exc:
        raise TroubleshootError(f"{path}: cannot write the report ({exc.strerror}); give a writable path") from None
