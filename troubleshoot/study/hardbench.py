"""The benchmark's hard-tree section: per engine, the time of a diagnosis step on wide trees.

Trees from :func:`troubleshoot.study.hardtrees.hard_model` (shared support
events, join-tree width over 30 from about 1,000 basic events). For each
size the join tree is tried (and reported as refused when its tables would
pass the memory budget) and the compiled decision diagram is timed on the
same findings: the complaint and five checks, each the best-ranked one with
an outcome drawn (seeded) from its predicted probabilities. CPU seconds
(``time.process_time``), so other work on a shared machine does not count.
Also the time of ``analyze``'s figures on the same tree and on a tree of
more than 10^8 minimal cut sets.
"""

from __future__ import annotations

import random
import time
import tracemalloc
from collections.abc import Callable
from dataclasses import asdict, dataclass, field

import numpy as np

from troubleshoot.advice.diagnosis import most_probable_explanation
from troubleshoot.advice.ranking import rank
from troubleshoot.analysis.figures import fault_tree_figures
from troubleshoot.engine.compiled import ENGINE_NAME
from troubleshoot.engine.inference import JOIN_TREE, Engine, Finding
from troubleshoot.errors import NetworkTooLarge
from troubleshoot.study.hardtrees import hard_model, many_cut_sets_model

HARD_SIZES = (300, 1000, 2000)
FINDINGS = 5


@dataclass
class EngineFigures:
    """One engine on one tree; times in CPU seconds, memory in MiB (tracemalloc peak)."""

    engine: str
    refused: str | None = None
    compile_s: float | None = None
    posteriors_s: float | None = None  # propagate: P(findings) and every root's posterior
    step_s: float | None = None  # propagate + rank every remaining check
    explanation_s: float | None = None  # the most probable explanation
    session_s: float | None = None  # complaint + 5 findings: one step each, and the explanation
    peak_mib: float | None = None


@dataclass
class HardResult:
    basic_events: int
    seed: int
    width: str
    engines: list[EngineFigures] = field(default_factory=list)
    analyze_s: float | None = None
    analyze_peak_mib: float | None = None
    cut_set_tree_events: int | None = None
    cut_set_count: int | None = None
    cut_set_analyze_s: float | None = None
    cut_set_analyze_peak_mib: float | None = None


def _findings(model, engine: Engine, seed: int) -> list[Finding]:
    """The complaint and five best-ranked checks, outcomes drawn from their predicted probabilities."""
    rng = random.Random(seed)
    findings = [Finding(model.top, 1)]
    done: set[str] = set()
    for _ in range(FINDINGS):
        post = engine.propagate(findings)
        ranking = rank(post, [c.id for c in model.checks if c.id not in done])
        if not ranking.rows:
            break
        row = ranking.rows[0]
        u, edge, outcome = rng.random(), 0.0, 0
        for i, p in enumerate(row.p_outcomes):
            edge += p
            if u < edge:
                outcome = i
                break
        findings.append(Finding(row.check, outcome))
        done.add(row.check)
    return findings


def _cpu(fn: Callable[[], object]) -> float:
    start = time.process_time()
    fn()
    return time.process_time() - start


def _run_engine(model, kind: str, findings: list[Finding], out: EngineFigures) -> None:
    start = time.process_time()
    engine = Engine(model, kind=kind)
    out.compile_s = time.process_time() - start
    checks = [c.id for c in model.checks]
    posts, steps, mpes = [], [], []
    for i in range(1, len(findings) + 1):
        engine.forget()
        start = time.process_time()
        post = engine.propagate(findings[:i])
        posts.append(time.process_time() - start)
        rank(post, [c for c in checks if c not in {f.target for f in findings[:i]}])
        steps.append(time.process_time() - start)
        start = time.process_time()
        most_probable_explanation(engine, post)
        mpes.append(time.process_time() - start)
    out.posteriors_s = float(np.median(posts))
    out.step_s = float(np.median(steps))
    out.explanation_s = float(np.median(mpes))
    out.session_s = float(sum(steps) + mpes[-1])


def _time_engine(model, kind: str, findings: list[Finding]) -> EngineFigures:
    """Times from one run; the memory peak from a second run under tracemalloc (which slows Python)."""
    out = EngineFigures(kind)
    try:
        _run_engine(model, kind, findings, out)
    except NetworkTooLarge as exc:
        out.refused = str(exc).split(";")[0].split(":")[-1].strip() or "too large"
        return out
    tracemalloc.start()
    try:
        _run_engine(model, kind, findings, EngineFigures(kind))
        out.peak_mib = tracemalloc.get_traced_memory()[1] / 1024**2
    finally:
        tracemalloc.stop()
    return out


def _analyze(model) -> tuple[float, float, int]:
    start = time.process_time()
    fig = fault_tree_figures(model)
    elapsed = time.process_time() - start
    tracemalloc.start()
    try:
        fault_tree_figures(model)
        peak = tracemalloc.get_traced_memory()[1] / 1024**2
    finally:
        tracemalloc.stop()
    return elapsed, peak, fig.total_count


def run_hard(basic_events: int, seed: int = 1, progress: Callable[[str], None] | None = None) -> HardResult:
    """Both engines and ``analyze`` on the hard tree of that size (and a tree of many cut sets)."""
    model = hard_model(basic_events, seed=seed)
    say = progress or (lambda _text: None)
    say(f"hard tree of {basic_events:,} basic events: findings")
    compiled = Engine(model, kind=ENGINE_NAME)
    findings = _findings(model, compiled, seed)
    result = HardResult(basic_events, seed, "")
    for kind in (JOIN_TREE, ENGINE_NAME):
        say(f"hard tree of {basic_events:,} basic events: {kind}")
        figures = _time_engine(model, kind, findings)
        result.engines.append(figures)
    tree = result.engines[0]
    if tree.refused is not None:
        result.width = tree.refused
    else:
        result.width = str(Engine(model, kind=JOIN_TREE).tree.width)  # type: ignore[union-attr]
    say(f"hard tree of {basic_events:,} basic events: analyze")
    result.analyze_s, result.analyze_peak_mib, _ = _analyze(model)
    many = many_cut_sets_model(basic_events, seed=seed)
    result.cut_set_tree_events = len(many.basic_events)
    result.cut_set_analyze_s, result.cut_set_analyze_peak_mib, result.cut_set_count = _analyze(many)
    return result


def hard_json(results: list[HardResult]) -> list[dict]:
    return [asdict(r) for r in results]


def hard_table(results: list[HardResult]) -> str:
    """The hard-tree section as printed by ``troubleshoot bench``."""
    def ms(x):
        return "-" if x is None else f"{1000 * x:,.1f}ms"

    lines = ["Hard trees (shared supports; CPU time, medians over the complaint + 5 findings; memory: tracemalloc peak)",
             f"{'events':>7} {'engine':<17} {'compile':>9} {'posteriors':>11} {'step':>10} {'explain':>9} "
             f"{'session':>10} {'peak':>9}  join-tree width"]
    for r in results:
        for e in r.engines:
            if e.refused is not None:
                lines.append(f"{r.basic_events:>7,} {e.engine:<17} refused: {e.refused}")
                continue
            lines.append(f"{r.basic_events:>7,} {e.engine:<17} {e.compile_s:>8.2f}s {ms(e.posteriors_s):>11} "
                         f"{ms(e.step_s):>10} {ms(e.explanation_s):>9} {e.session_s:>9.2f}s "
                         f"{e.peak_mib:>7.1f}MB  {r.width}")
    lines.append("")
    lines.append(f"{'events':>7} {'analyze':>9} {'peak':>9}   many-cut-set tree: {'events':>6} "
                 f"{'cut sets':>15} {'analyze':>9} {'peak':>9}")
    for r in results:
        lines.append(f"{r.basic_events:>7,} {r.analyze_s:>8.2f}s {r.analyze_peak_mib:>7.1f}MB   "
                     f"{'':>18} {r.cut_set_tree_events:>6,} {r.cut_set_count:>15,} "
                     f"{r.cut_set_analyze_s:>8.2f}s {r.cut_set_analyze_peak_mib:>7.1f}MB")
    return "\n".join(lines)
