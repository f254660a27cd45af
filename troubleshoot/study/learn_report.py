"""What ``learn`` found, for people and scripts: the Markdown report, the JSON object and the plot."""

from __future__ import annotations

import math
from collections import Counter

from troubleshoot.study.learn import INTERVAL, LearnResult

_KIND_WORDS = {
    "torn": "torn (the last line cut off; the lines before it were used)",
    "other-model": "made on another model (left out)",
    "other-version": "written by another version of the log format (left out)",
    "edited": "edited or damaged inside (a line breaks the log's hash chain or its rules; left out)",
    "damaged": "damaged or not a session log (left out)",
    "inconsistent": "edited or inconsistent: an action the session would have refused (left out)",
    "impossible": "findings impossible under the model (left out)",
}


def _pct(p: float) -> str:
    return f"{100 * p:.3g} %"


def _outside(result: LearnResult) -> list[dict]:
    model = result.model
    out = []
    for f in result.figures:
        if f.kind != "root" or f.id in model.event_by_id:
            continue
        gate = f.id.split("~")[0]
        out.append({"gate": gate, "label": model.label_of(gate), "root": f.id,
                    "expected_sessions": result.expected_failed[f.id], "predicted_sessions": result.predicted[f.id],
                    "before": f.before, "after": f.after, "low": f.low, "high": f.high})
    return out


def false_alarms_above_model(result: LearnResult) -> list:
    """Checks whose false alarm is above the model's figure with the whole 90 % interval."""
    return [f for f in result.figures if f.kind == "false-alarm" and f.low > f.before]


def as_json(result: LearnResult, output: str) -> dict:
    """Everything as one JSON-ready object."""
    return {
        "model": result.model.name,
        "model_sha256": result.model_sha256,
        "output": output,
        "logs": result.logs,
        "sessions": result.sessions,
        "distinct_sessions": result.distinct,
        "escalated_sessions": result.escalated,
        "dates": list(result.dates),
        "skipped": [{"path": p.path, "kind": p.kind, "message": p.message} for p in result.problems],
        "prior_weight_sessions": result.prior_weight,
        "exposure_unit_periods": result.exposure,
        "unseen_working_units": result.unseen_units,
        "p_top_before": result.p_top_before,
        "p_top_after": result.p_top_after,
        "iterations": result.iterations,
        "converged": result.converged,
        "log_likelihood": result.log_likelihood,
        "log_likelihood_history": [{"iteration": i, "log_likelihood": ll, "change": None if math.isnan(c) else c}
                                   for i, ll, c in result.history],
        "interval": INTERVAL,
        "figures": [{"kind": f.kind, "id": f.id, "check": f.check or None, "cause": f.cause or None,
                     "outcome": f.outcome or None, "before": f.before, "after": f.after, "low": f.low,
                     "high": f.high, "informed": f.informed} for f in result.figures],
        "causes": [{"id": r, "confirmed": result.confirmed[r], "expected_failed": result.expected_failed[r],
                    "predicted_failed": result.predicted[r]} for r in result.model.hypotheses],
        "outside_model": _outside(result),
        "false_alarms_above_model": [f.check for f in false_alarms_above_model(result)],
        "ran_on": result.where,
        "workers": result.workers,
        "seconds_reading": result.seconds_reading,
        "seconds_em": result.seconds_em,
    }


def markdown(result: LearnResult, output: str) -> str:
    """The Markdown report."""
    model = result.model
    lines = [f"# Learned figures: {model.name}", ""]
    lines.append(f"- Learned model: `{output}`")
    lines.append(f"- Source model SHA-256: `{result.model_sha256}`")
    lines.append(f"- Session logs read: {result.logs}; sessions used: {result.sessions} "
                 f"({result.distinct} distinct), from {result.dates[0] or '?'} to {result.dates[1] or '?'}; "
                 f"ended escalated: {result.escalated}")
    lines.append(f"- Prior: the model's own figures, worth {result.prior_weight:g} sessions")
    if result.exposure is None:
        lines.append(f"- No exposure given: the sessions are a sample of failed units, so P(top event) is kept at "
                     f"the model's {_pct(result.p_top_before)} (learned: {_pct(result.p_top_after)}); "
                     f"{result.unseen_units:,.0f} unseen working units keep it there")
    else:
        lines.append(f"- Exposure: {result.exposure:,.0f} unit-periods, of which "
                     f"{result.unseen_units:,.0f} without a failure; P(top event) "
                     f"{_pct(result.p_top_before)} -> {_pct(result.p_top_after)}")
    state = "converged" if result.converged else "stopped at the iteration limit"
    lines.append(f"- EM: {result.iterations} iterations ({state}); log-likelihood {result.log_likelihood:,.4f} "
                 f"(natural log); run on {result.where}")
    lines.append("")

    lines += ["## Logs left out or used in part", ""]
    if not result.problems:
        lines += ["None: every log was a whole session of this model.", ""]
    else:
        counts = Counter(p.kind for p in result.problems)
        for kind, n in sorted(counts.items()):
            lines.append(f"- {n} {_KIND_WORDS.get(kind, kind)}")
        lines.append("")
        for p in result.problems:
            lines.append(f"- `{p.path}` ({p.kind}): {p.message}")
        lines.append("")

    lines += ["## Causes: confirmed against predicted", "",
              ("Confirmed: sessions whose last repair was of it and the unit then worked. Learned: expected "
              "sessions with it failed, given everything each session saw. Predicted: sessions times the "
              "model's P(failed | complaint)."), "",
              "| cause | confirmed | learned | predicted by the model |", "|---|---:|---:|---:|"]
    order = sorted(model.hypotheses, key=lambda r: (-result.expected_failed[r], r))
    for r in order:
        lines.append(f"| {model.label_of(r)} (`{r}`) | {result.confirmed[r]} | {result.expected_failed[r]:.1f} | "
                     f"{result.predicted[r]:.1f} |")
    lines.append("")

    lines += ["## Gates where the cause was outside the model", ""]
    outside = _outside(result)
    if not outside:
        lines += ["The model lists no unlisted causes under any gate.", ""]
    else:
        lines += [("| gate | sessions with the cause outside the model (learned) | predicted | share before -> after "
                  f"({int(INTERVAL * 100)} % interval) |"), "|---|---:|---:|---|"]
        for o in sorted(outside, key=lambda o: -o["expected_sessions"]):
            lines.append(f"| {o['label']} (`{o['gate']}`) | {o['expected_sessions']:.1f} | "
                         f"{o['predicted_sessions']:.1f} | {o['before']:.4g} -> {o['after']:.4g} "
                         f"({o['low']:.4g} to {o['high']:.4g}) |")
        lines.append("")

    lines += ["## Checks that false-alarm more than modelled", ""]
    above = false_alarms_above_model(result)
    if not above:
        lines += [(f"None: no check's learned false-alarm figure has its whole {int(INTERVAL * 100)} % interval above "
                  "the model's."), ""]
    else:
        lines += ["| check | false alarm before -> after | interval | times made |", "|---|---|---|---:|"]
        for f in above:
            lines.append(f"| {f.label} (`{f.check}`) | {f.before:.4g} -> {f.after:.4g} | {f.low:.4g} to "
                         f"{f.high:.4g} | {f.informed:.0f} |")
        lines.append("")

    lines += ["## Every figure", "",
              (f"Before -> after, with the {int(INTERVAL * 100)} % interval of the Beta posterior (expected counts "
              "taken as observed, so a little narrow). Informed: root events, sessions that moved its probability "
              "by at least 0.01; detection, expected times the check was made with that cause present; false "
              "alarm, times the check was made."), "",
              "### Root events (probability of the failed state)", "",
              "| event | before | after | interval | informed (sessions) |", "|---|---:|---:|---|---:|"]
    for f in result.figures:
        if f.kind == "root":
            lines.append(f"| {f.label} (`{f.id}`) | {f.before:.4g} | {f.after:.4g} | {f.low:.4g} to {f.high:.4g} "
                         f"| {f.informed:.0f} |")
    lines += ["", "### Checks and symptoms (probability of each abnormal outcome)", "",
              "| check | cause | outcome | before | after | interval | informed |", "|---|---|---|---:|---:|---|---:|"]
    for f in result.figures:
        if f.kind != "root":
            cause = "(false alarm: no cause)" if f.kind == "false-alarm" else f"`{f.cause}`"
            lines.append(f"| {f.label} (`{f.check}`) | {cause} | {f.outcome} | {f.before:.4g} | {f.after:.4g} | "
                         f"{f.low:.4g} to {f.high:.4g} | {f.informed:.1f} |")
    lines.append("")
    return "\n".join(lines)


def _plot_label(result: LearnResult, f) -> str:
    if f.kind == "root":
        return f.id
    graded = len(result.model.check_by_id[f.check].outcomes) > 2
    what = f"{f.check}: false alarm" if f.kind == "false-alarm" else f.id
    return f"{what} -> {f.outcome}" if graded else what


def plot(result: LearnResult, path: str, plt) -> None:
    """Before / after with intervals, root events on the left, check figures on the right (PNG)."""
    roots = [f for f in result.figures if f.kind == "root"]
    checks = [f for f in result.figures if f.kind != "root"]
    rows = max(len(roots), len(checks))
    fig, axes = plt.subplots(1, 2, figsize=(13, max(4.0, 0.22 * rows + 1.5)))
    for ax, figs, title, log in ((axes[0], roots, "root events: P(failed)", True),
                                 (axes[1], checks, "checks: detection and false alarm", False)):
        y = list(range(len(figs)))
        ax.scatter([f.before for f in figs], y, marker="o", facecolors="none", edgecolors="grey",
                   label="model (before)", zorder=3)
        after = [f.after for f in figs]
        err = [[max(0.0, f.after - f.low) for f in figs], [max(0.0, f.high - f.after) for f in figs]]
        ax.errorbar(after, y, xerr=err, fmt="s", color="tab:blue", ms=4, capsize=2,
                    label=f"learned, {int(INTERVAL * 100)} % interval", zorder=2)
        ax.set_yticks(y, [_plot_label(result, f) for f in figs], fontsize=6)
        ax.invert_yaxis()
        if log and figs and min(min(f.low, f.before) for f in figs) > 0:
            ax.set_xscale("log")
        ax.set_xlabel("probability")
        ax.set_title(title, fontsize=9)
        ax.grid(axis="x", alpha=0.3)
        ax.legend(fontsize=7, loc="lower right")
    fig.suptitle(f"{result.model.name}: learned from {result.sessions} sessions", fontsize=10)
    fig.tight_layout()
    fig.savefig(path, format="png", dpi=110)
    plt.close(fig)
