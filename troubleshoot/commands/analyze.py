"""``troubleshoot analyze``: fault-tree figures for the reliability engineer (figures: analysis/)."""

from __future__ import annotations

import argparse
import resource
import sys
from pathlib import Path

from troubleshoot.analysis.figures import all_cut_sets, cut_set_family, fault_tree_figures
from troubleshoot.analysis.report import figures_to_json, render_markdown, render_text
from troubleshoot.errors import TroubleshootError
from troubleshoot.model.source import load_any_model
from troubleshoot.progress import ProgressDisplay


def add_parser(subparsers, name: str) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        name, help="fault-tree figures: top-event probability, minimal cut sets, importance",
        description="Compute the exact top-event probability, the rare-event approximation and the minimal "
        "cut set upper bound, the count of minimal cut sets by order and the most probable of them (every "
        "one when there are at most 100,000, else the 1,000 likeliest, with a bound on what is left out), "
        "and the importance of every basic event (Birnbaum, Fussell-Vesely, criticality, risk achievement "
        "worth, risk reduction worth, diagnostic importance).")
    parser.add_argument("model", metavar="MODEL",
                        help="a model file (our XML, or an Open-PSA MEF file) or a demo name: rooftop, booster")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON on standard output")
    parser.add_argument("--report", metavar="FILE.md", help="also write the figures as a Markdown report")
    parser.add_argument("--max-order", metavar="N", type=_positive_int,
                        help="keep only minimal cut sets of at most N events")
    parser.add_argument("--min-probability", metavar="P", type=_probability,
                        help="keep only minimal cut sets of probability at least P")
    parser.add_argument("--all-cut-sets", metavar="FILE",
                        help="also write every minimal cut set (within --max-order / --min-probability) to "
                             "FILE, one per line: probability, order, events; streamed, with progress")
    return parser


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; give an order such as 3") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{value} is below 1; a cut set has at least one event")
    return value


def _probability(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; give a probability such as 1e-6") from None
    if not 0.0 <= value <= 1.0:
        raise argparse.ArgumentTypeError(f"{value} is not a probability; give a value from 0 to 1")
    return value


def _write_all(model, path: str, total: int, args, progress: ProgressDisplay) -> None:
    try:
        with open(path, "w", encoding="utf-8") as out:
            out.write("# probability\torder\tevents (minimal cut sets of "
                      f"{model.name or model.top}, top event {model.top})\n")
            for i, (events, p) in enumerate(all_cut_sets(cut_set_family(model), args.max_order,
                                                         args.min_probability), start=1):
                out.write(f"{p:.6e}\t{len(events)}\t{' '.join(events)}\n")
                if i % 10_000 == 0:
                    progress(i, total)
    except OSError as exc:
        raise TroubleshootError(f"{path}: cannot write the cut sets ({exc.strerror}); choose a writable path") from exc


def run(args) -> int:
    model, warnings = load_any_model(args.model)
    for warning in warnings:
        print(f"troubleshoot: {warning}", file=sys.stderr)
    with ProgressDisplay(f"analysing {model.name}") as progress:
        fig = fault_tree_figures(model, max_order=args.max_order, min_probability=args.min_probability,
                                 progress=progress)
    if args.all_cut_sets and fig.count_by_order:
        with ProgressDisplay(f"writing every minimal cut set to {args.all_cut_sets}", unit="cut sets") as progress:
            _write_all(model, args.all_cut_sets, fig.total_count, args, progress)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux
    if args.report:
        try:
            Path(args.report).write_text(render_markdown(fig), encoding="utf-8")
        except OSError as exc:
            raise TroubleshootError(f"{args.report}: cannot write the report ({exc.strerror}); "
                                    "choose a writable path") from exc
    if args.json:
        import json

        sys.stdout.write(json.dumps(figures_to_json(fig, peak), indent=2, allow_nan=False) + "\n")
    else:
        sys.stdout.write(render_text(fig, peak))
        for path, what in ((args.report, "Report"), (args.all_cut_sets, "Every minimal cut set")):
            if path:
                sys.stdout.write(f"{what} written to {path}\n")
    return 0
