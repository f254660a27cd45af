"""``troubleshoot analyze``: fault-tree figures for the reliability engineer.

Top-event probability (exact, rare-event approximation, minimal cut set upper
bound), the minimal cut sets by probability, and the importance of every root
event, as text, JSON (``--json``) or a Markdown report (``--report``).

References
----------
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981, chapter VII.
NUREG/CR-4550 Vol. 1, U.S. NRC, 1990 (importance measures).
A. Rauzy, Reliability Engineering and System Safety 40(3), 1993.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from dataclasses import dataclass
from pathlib import Path

from troubleshoot.analysis.cutsets import CutSetAnalysis, minimal_cut_sets
from troubleshoot.errors import NetworkTooLarge, TroubleshootError
from troubleshoot.analysis.bdd import FaultTreeBdd
from troubleshoot.analysis.importance import Importance, importance_measures
from troubleshoot.model import Model
from troubleshoot.progress import ProgressDisplay

#: How the probability cut away by truncation is bounded (said in every output).
DROPPED_BOUND_METHOD = (
    "sum of the probabilities of the dropped minimal cut sets, "
    "an upper bound on P(top) minus P(union of the retained sets)"
)
#: Cut sets shown on the terminal; --json and --report carry them all.
TERMINAL_CUT_SETS = 25


def add_parser(subparsers, name: str) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        name,
        help="fault-tree figures: top-event probability, minimal cut sets, importance",
        description="Compute the top-event probability (exact, rare-event approximation, "
        "minimal cut set upper bound), the minimal cut sets by probability and the "
        "importance of every basic event (Birnbaum, Fussell-Vesely, criticality, risk "
        "achievement worth, risk reduction worth, diagnostic importance).",
    )
    parser.add_argument(
        "model",
        metavar="MODEL",
        help="a model file (our XML, or an Open-PSA MEF file) or a demo name: rooftop, booster",
    )
    parser.add_argument("--json", action="store_true", help="print the figures as JSON on standard output")
    parser.add_argument("--report", metavar="FILE.md", help="also write the figures as a Markdown report")
    parser.add_argument(
        "--max-order",
        metavar="N",
        type=_positive_int,
        help="keep only minimal cut sets of at most N events",
    )
    parser.add_argument(
        "--min-probability",
        metavar="P",
        type=_probability,
        help="keep only minimal cut sets of probability at least P",
    )
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


# --------------------------------------------------------------------------- loading


from troubleshoot.model.source import load_any_model  # noqa: E402  (MODEL is read the same way by every command)


# --------------------------------------------------------------------------- figures


@dataclass(frozen=True)
class FaultTreeFigures:
    """Everything ``analyze`` shows, computed once."""

    model: Model
    exact: float
    exact_method: str
    exact_bdd: float
    cut_sets: CutSetAnalysis
    importance: dict[str, Importance]
    notes: tuple[str, ...]


def exact_top_probability(model: Model) -> tuple[float | None, str]:
    """P(top) from the join-tree engine, or (None, reason) when it cannot run."""
    from troubleshoot.engine.inference import Engine

    try:
        engine = Engine(model)
    except NetworkTooLarge as exc:
        return None, f"the join tree is too large ({exc})"
    return float(engine.propagate([]).p_failed(model.top)), "join tree"


def compute_figures(
    model: Model,
    *,
    max_order: int | None = None,
    min_probability: float | None = None,
    progress=None,
) -> FaultTreeFigures:
    """Top-event probability, minimal cut sets and importance of ``model``.

    The exact probability comes from the join-tree engine when it can run, the
    BDD giving the same figure independently; cut sets and importance come
    from the BDD.
    """
    bdd = FaultTreeBdd.from_model(model, progress=progress)
    exact_bdd = bdd.probability()
    cut_sets = minimal_cut_sets(
        model, bdd=bdd, max_order=max_order, min_probability=min_probability, progress=progress
    )
    if progress:
        progress("importance measures")
    importance = importance_measures(model, bdd=bdd)
    notes: list[str] = []
    if progress:
        progress("exact top-event probability by join tree")
    exact, method = exact_top_probability(model)
    if exact is None:
        notes.append(f"exact probability from the BDD: {method}")
        exact, method = exact_bdd, "binary decision diagram"
    if not cut_sets.coherent:
        notes.append(
            "the tree has NOT gates and is not coherent: the cut sets listed drop negated "
            "events (coherent approximation), so the rare-event and upper-bound figures are "
            "approximations; the exact probability and the importance measures are exact"
        )
    elif bdd.has_not_gates:
        notes.append("the tree has NOT gates but its top event is still coherent")
    notes.append(
        "Fussell-Vesely is the exact form (P(top) - P(top | event works)) / P(top); "
        "risk reduction worth is infinite (JSON null) when P(top | event works) = 0"
    )
    return FaultTreeFigures(model, exact, method, exact_bdd, cut_sets, importance, tuple(notes))


# --------------------------------------------------------------------------- output


def probability_unit(model: Model) -> str:
    """What a probability in this model means: per demand, or over the mission time."""
    if model.probability_basis == "mission-time":
        if model.mission_time is not None:
            return f"over a mission time of {model.mission_time:g} h"
        return "over the mission time"
    return "per demand"


def _finite_or_none(value: float) -> float | None:
    return value if math.isfinite(value) else None


def figures_to_json(fig: FaultTreeFigures) -> dict:
    """The JSON document of ``analyze --json`` (no NaN or Infinity literal anywhere)."""
    cs = fig.cut_sets
    model = fig.model
    return {
        "top_event": {
            "exact": fig.exact,
            "rare_event": cs.rare_event,
            "mcub": cs.mcub,
            "id": model.top,
            "exact_method": fig.exact_method,
            "exact_bdd": fig.exact_bdd,
            "mcub_over": "all minimal cut sets" if cs.mcub is not None else None,
        },
        "cut_sets": [{"events": list(c.events), "order": c.order, "p": c.probability} for c in cs.cut_sets],
        "truncated": cs.truncated,
        "importance": {
            event: {
                "birnbaum": _finite_or_none(m.birnbaum),
                "fussell_vesely": _finite_or_none(m.fussell_vesely),
                "criticality": _finite_or_none(m.criticality),
                "raw": _finite_or_none(m.raw),
                "rrw": _finite_or_none(m.rrw),
                "diagnostic": _finite_or_none(m.diagnostic),
                "prior": m.prior,
                "rrw_infinite": m.rrw == math.inf,
            }
            for event, m in fig.importance.items()
        },
        "model": model.name,
        "probability_basis": model.probability_basis,
        "mission_time_h": model.mission_time,
        "probability_unit": probability_unit(model),
        "coherent": cs.coherent,
        "cut_set_count": cs.total_count,
        "cut_set_count_by_order": {str(order): c for order, c in sorted(cs.count_by_order.items())},
        "truncation": {
            "max_order": cs.max_order,
            "min_probability": cs.min_probability,
            "retained": len(cs.cut_sets),
            "dropped": cs.total_count - len(cs.cut_sets),
            "dropped_probability_bound": cs.dropped_probability_bound,
            "bound_method": DROPPED_BOUND_METHOD,
        },
        "notes": list(fig.notes),
    }


def _p(value: float | None) -> str:
    return "n/a" if value is None else f"{value:.5e}"


def _measure(value: float) -> str:
    if math.isnan(value):
        return "n/a"
    if value == math.inf:
        return "inf"
    return f"{value:.4g}"


def _ranked_importance(fig: FaultTreeFigures) -> list[Importance]:
    # Most important first by Fussell-Vesely, then Birnbaum, then id: the order
    # an engineer reads such a table in (common practice).
    def key(m: Importance):
        fv = m.fussell_vesely if math.isfinite(m.fussell_vesely) else -math.inf
        return (-fv, -m.birnbaum, m.event)

    return sorted(fig.importance.values(), key=key)


def _truncation_line(cs: CutSetAnalysis) -> str:
    if not cs.truncated:
        return "complete: every minimal cut set is listed"
    rules = []
    if cs.max_order is not None:
        rules.append(f"order at most {cs.max_order}")
    if cs.min_probability is not None:
        rules.append(f"probability at least {cs.min_probability:g}")
    return (
        f"truncated to {', '.join(rules)}: {len(cs.cut_sets):,} of {cs.total_count:,} kept; "
        f"probability cut away at most {cs.dropped_probability_bound:.5e} ({DROPPED_BOUND_METHOD})"
    )


def _order_counts(cs: CutSetAnalysis) -> str:
    return ", ".join(f"order {order}: {c:,}" for order, c in sorted(cs.count_by_order.items()))


def render_text(fig: FaultTreeFigures) -> str:
    """The terminal view: figures, the likeliest cut sets, the importance table."""
    model, cs = fig.model, fig.cut_sets
    unit = probability_unit(model)
    lines = [
        f"Fault-tree analysis of {model.name or model.top}: top event {model.top}"
        + (f" ({model.label_of(model.top)})" if model.label_of(model.top) != model.top else ""),
        f"Probabilities are {unit}; importance measures are dimensionless.",
        "",
        "Top-event probability",
        f"  {'exact (' + fig.exact_method + ')':<47}{_p(fig.exact)}",
        f"  {'rare-event approximation (sum of P(MCS))':<47}{_p(cs.rare_event)}",
        f"  {'minimal cut set upper bound 1 - prod(1-P(MCS))':<47}{_p(cs.mcub)}",
        "",
        f"Minimal cut sets: {cs.total_count:,} ({_order_counts(cs) or 'none'})",
        f"  {_truncation_line(cs)}",
    ]
    shown = cs.cut_sets[:TERMINAL_CUT_SETS]
    if shown:
        lines.append(f"  {'rank':>5} {'order':>5} {'probability':>12}  events")
        for rank, c in enumerate(shown, start=1):
            lines.append(f"  {rank:>5} {c.order:>5} {c.probability:>12.5e}  {' '.join(c.events) or '(none)'}")
        if len(cs.cut_sets) > len(shown):
            lines.append(f"  ... {len(cs.cut_sets) - len(shown):,} more; --report or --json lists them all")
    lines += ["", "Importance of each basic event (most important first by Fussell-Vesely)"]
    header = (
        f"  {'event':<16} {'p':>11} {'Birnbaum':>10} {'F-V':>10} {'critical.':>10} "
        f"{'RAW':>10} {'RRW':>10} {'P(ev|top)':>10}"
    )
    lines.append(header)
    for m in _ranked_importance(fig):
        lines.append(
            f"  {m.event:<16} {m.prior:>11.4e} {_measure(m.birnbaum):>10} {_measure(m.fussell_vesely):>10} "
            f"{_measure(m.criticality):>10} {_measure(m.raw):>10} {_measure(m.rrw):>10} "
            f"{_measure(m.diagnostic):>10}"
        )
    if fig.notes:
        lines.append("")
        lines += [f"Note: {n}" for n in fig.notes]
    return "\n".join(lines) + "\n"


def _md_escape(text: str) -> str:
    return text.replace("|", "\\|")


def render_markdown(fig: FaultTreeFigures) -> str:
    """The Markdown report: the same tables as the terminal, every cut set included."""
    model, cs = fig.model, fig.cut_sets
    unit = probability_unit(model)
    out = [
        f"# Fault-tree analysis: {_md_escape(model.name or model.top)}",
        "",
        f"Top event `{model.top}`: {_md_escape(model.label_of(model.top))}. "
        f"Probabilities are {unit}; importance measures are dimensionless.",
        "",
        "## Top-event probability",
        "",
        f"| figure | probability ({unit}) |",
        "|---|---|",
        f"| exact ({fig.exact_method}) | {_p(fig.exact)} |",
        f"| rare-event approximation, sum of P(MCS) (NUREG-0492) | {_p(cs.rare_event)} |",
        f"| minimal cut set upper bound, 1 - prod(1 - P(MCS)) (NUREG-0492) | {_p(cs.mcub)} |",
        "",
        "## Minimal cut sets",
        "",
        f"{cs.total_count:,} minimal cut sets ({_order_counts(cs) or 'none'}); {_truncation_line(cs)}.",
        "",
        f"| rank | order | probability ({unit}) | events |",
        "|---|---|---|---|",
    ]
    for rank, c in enumerate(cs.cut_sets, start=1):
        events = ", ".join(f"`{e}`" for e in c.events) or "(none)"
        out.append(f"| {rank} | {c.order} | {c.probability:.5e} | {events} |")
    out += [
        "",
        "## Importance of each basic event",
        "",
        "Birnbaum = P(top | failed) - P(top | works); criticality = Birnbaum * p / P(top); "
        "Fussell-Vesely = (P(top) - P(top | works)) / P(top) (exact form); "
        "RAW = P(top | failed) / P(top); RRW = P(top) / P(top | works); "
        "diagnostic = P(event failed | top) = p * P(top | failed) / P(top) "
        "(NUREG/CR-4550; NUREG-0492). All dimensionless.",
        "",
        f"| event | label | p ({unit}) | Birnbaum | Fussell-Vesely | criticality | RAW | RRW | diagnostic |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for m in _ranked_importance(fig):
        out.append(
            f"| `{m.event}` | {_md_escape(model.label_of(m.event))} | {m.prior:.4e} | {_measure(m.birnbaum)} | "
            f"{_measure(m.fussell_vesely)} | {_measure(m.criticality)} | {_measure(m.raw)} | "
            f"{_measure(m.rrw)} | {_measure(m.diagnostic)} |"
        )
    if fig.notes:
        out += ["", "## Notes", ""] + [f"- {_md_escape(n)}" for n in fig.notes]
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------------- shell


def run(args) -> int:
    model, warnings = load_any_model(args.model)
    for warning in warnings:
        print(f"troubleshoot: {warning}", file=sys.stderr)
    with ProgressDisplay(f"analysing {model.name}") as progress:
        fig = compute_figures(
            model, max_order=args.max_order, min_probability=args.min_probability, progress=progress
        )
    if args.report:
        try:
            Path(args.report).write_text(render_markdown(fig), encoding="utf-8")
        except OSError as exc:
            raise TroubleshootError(
                f"{args.report}: cannot write the report ({exc.strerror}); choose a writable path"
            ) from exc
    if args.json:
        sys.stdout.write(json.dumps(figures_to_json(fig), indent=2, allow_nan=False) + "\n")
    else:
        sys.stdout.write(render_text(fig))
        if args.report:
            sys.stdout.write(f"Report written to {args.report}\n")
    return 0
