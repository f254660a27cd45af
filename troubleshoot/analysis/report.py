"""The figures of ``troubleshoot analyze`` as text, Markdown and JSON (pure: strings and dicts out).

References
----------
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981, chapter VII.
NUREG/CR-4550 Vol. 1, U.S. NRC, 1990 (importance measures).
"""

from __future__ import annotations

import math

from troubleshoot.analysis.figures import DROPPED_BOUND_METHOD, FaultTreeFigures
from troubleshoot.analysis.importance import Importance
from troubleshoot.model import Model

#: Cut sets shown on the terminal; --json and --report carry every listed one.
TERMINAL_CUT_SETS = 25


def probability_unit(model: Model) -> str:
    """What a probability in this model means: per demand, or over the mission time."""
    if model.probability_basis == "mission-time":
        if model.mission_time is not None:
            return f"over a mission time of {model.mission_time:g} h"
        return "over the mission time"
    return "per demand"


def _finite_or_none(value: float) -> float | None:
    return value if math.isfinite(value) else None


def figures_to_json(fig: FaultTreeFigures, peak_memory_mib: float | None = None) -> dict:
    """The JSON document of ``analyze --json`` (no NaN or Infinity literal anywhere)."""
    cs = fig
    model = fig.model
    return {
        "top_event": {
            "exact": fig.exact,
            "rare_event": cs.rare_event,
            "mcub": cs.mcub,
            "id": model.top,
            "exact_method": fig.exact_method,
            "exact_bdd": fig.exact,
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
            "list_length": cs.list_length,
        },
        "notes": list(fig.notes),
        "limits": list(fig.limits),
        "diagram_nodes": dict(fig.diagram_nodes),
        "peak_memory_mib": peak_memory_mib,
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


def _truncation_line(cs: FaultTreeFigures) -> str:
    if not cs.truncated:
        return "complete: every minimal cut set is listed"
    rules = []
    if cs.max_order is not None:
        rules.append(f"order at most {cs.max_order}")
    if cs.min_probability is not None:
        rules.append(f"probability at least {cs.min_probability:g}")
    if not rules:
        rules.append(f"the {len(cs.cut_sets):,} most probable")
    return (
        f"truncated to {', '.join(rules)}: {len(cs.cut_sets):,} of {cs.total_count:,} kept; "
        f"probability cut away at most {cs.dropped_probability_bound:.5e} ({DROPPED_BOUND_METHOD})"
    )


def _order_counts(cs: FaultTreeFigures) -> str:
    return ", ".join(f"order {order}: {c:,}" for order, c in sorted(cs.count_by_order.items()))


def render_text(fig: FaultTreeFigures, peak_memory_mib: float | None = None) -> str:
    """The terminal view: figures, the likeliest cut sets, the importance table."""
    model, cs = fig.model, fig
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
    lines += [f"Limit: {n}" for n in fig.limits]
    if peak_memory_mib is not None:
        lines.append(f"Peak memory: {peak_memory_mib:,.0f} MiB")
    return "\n".join(lines) + "\n"


def _md_escape(text: str) -> str:
    return text.replace("|", "\\|")


def render_markdown(fig: FaultTreeFigures) -> str:
    """The Markdown report: the same tables as the terminal, every listed cut set included."""
    model, cs = fig.model, fig
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
    if fig.notes or fig.limits:
        out += ["", "## Notes", ""] + [f"- {_md_escape(n)}" for n in fig.notes + fig.limits]
    return "\n".join(out) + "\n"
