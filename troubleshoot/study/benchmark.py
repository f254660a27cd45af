"""The speed and memory benchmark: seeded synthetic trees, our engine beside pgmpy and pyAgrum.

For each size it measures compile time, the median time of one propagation
(every marginal), one diagnosis step (propagation plus ranking every check),
peak memory, join-tree width and total table size; and, where the reference
libraries are installed and finish within a time budget, the same marginals
(and, for pgmpy, the same ranking done by queries) on the same network and
findings, reported as speed ratios (their time / ours).
"""

from __future__ import annotations

import gc
import math
import random
import statistics
import tempfile
import time
import tracemalloc
import warnings
from dataclasses import asdict, dataclass
from pathlib import Path
from collections.abc import Callable

from troubleshoot.errors import ImpossibleFindings
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.engine.network import build_network
from troubleshoot.study.synthetic import synthetic_model

SIZES = (100, 500, 2000, 5000)
#: Seconds a reference library may take for one job before it counts as not finished.
REFERENCE_BUDGET_S = 30.0


@dataclass
class SizeResult:
    basic_events: int
    gates: int
    checks: int
    compile_s: float
    propagate_ms: float
    step_ms: float
    session_step_ms: float
    width: int
    table_entries: int
    peak_mb: float
    pgmpy_ratio: float | None
    pyagrum_ratio: float | None
    pgmpy_step_ratio: float | None
    pgmpy_s: float | None
    pyagrum_s: float | None
    pgmpy_step_s: float | None


def _median_time(fn: Callable[[], object], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def _findings(model, engine, seed: int) -> list[Finding]:
    """The complaint plus a few check outcomes drawn to be consistent."""
    rng = random.Random(seed)
    findings = [Finding(model.top, 1)]
    for check in rng.sample(list(model.checks), min(6, len(model.checks))):
        trial = findings + [Finding(check.id, rng.randint(0, 1))]
        try:
            engine.propagate(trial)
        except ImpossibleFindings:  # an impossible combination: leave that check out
            continue
        findings = trial
    return findings


def _evidence_names(model, findings) -> dict[str, str]:
    out = {}
    for f in findings:
        check = model.check_by_id.get(f.target)
        out[f.target] = check.outcomes[f.outcome] if check else ("ok", "failed")[f.outcome]
    return out


def _with_budget(job: Callable[[Callable[[], bool]], None], budget: float) -> float | None:
    """Run job(over_budget); its seconds, or None when it gave up past the budget."""
    t0 = time.perf_counter()

    def over() -> bool:
        return time.perf_counter() - t0 > budget

    finished = job(over)
    elapsed = time.perf_counter() - t0
    return elapsed if finished and elapsed <= budget else None


def _pyagrum_marginals(bif_path: Path, evidence, variables, budget):
    try:
        import pyagrum as gum
    except ImportError:
        return None
    bn = gum.loadBN(str(bif_path))

    def job(over):
        ie = gum.LazyPropagation(bn)
        ie.setEvidence(evidence)
        ie.makeInference()
        for v in variables:
            ie.posterior(v)
            if over():
                return False
        return True

    return _with_budget(job, budget)


def _pgmpy_model(bif_path: Path):
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            from pgmpy.inference import VariableElimination
            from pgmpy.readwrite import XMLBIFReader
    except ImportError:
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return VariableElimination(XMLBIFReader(str(bif_path)).get_model())


def _pgmpy_marginals(ve, evidence, variables, budget):
    def job(over):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for v in variables:
                ve.query([v], evidence=evidence, show_progress=False)
                if over():
                    return False
        return True

    return _with_budget(job, budget)


def _pgmpy_ranking(ve, model, evidence, budget):
    """Rank every check the query way: per check, P(T | e), then per outcome t P(causes | e, t).

    I(C; T) = sum_t P(t|e) KL(P(c|e,t) || P(c|e)); the work is three queries per check.
    """
    def job(over):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for check in model.checks:
                if check.id in evidence:
                    continue
                causes = [c for c in dict.fromkeys(c.target for c in check.causes) if c not in evidence]
                ve.query([check.id], evidence=evidence, show_progress=False)
                for outcome in (check.outcomes if causes else ()):
                    ve.query(causes, evidence={**evidence, check.id: outcome}, show_progress=False)
                if over():
                    return False
        return True

    return _with_budget(job, budget)


def _session_step_time(model, engine: Engine, findings: list[Finding], repeats: int) -> float:
    """Median seconds of one session action: record a finding, then the state the screen shows.

    That is one propagation and the ranking, plus the weighing of the best
    few checks against repairing at once (a propagation per outcome each).
    Cached posteriors are dropped before each timing so nothing is free.
    """
    from troubleshoot.session import Session

    session = Session(model, engine=engine)
    for f in findings[1:]:
        session.record_finding(f.target, f.outcome)
    _ = session.state  # computed once before timing
    check = next((r.check for r in session.state.ranking if r.cost > 0), None)
    if check is None:
        return 0.0

    def step():
        engine.forget()
        session.record_finding(check, 0)
        _ = session.state  # the timed work: propagate, rank, decide
        session.undo()

    return _median_time(step, max(3, repeats // 3))


def run_size(basic_events: int, seed: int = 1, references: bool = True, repeats: int = 15,
             budget: float = REFERENCE_BUDGET_S, progress: Callable[[str], None] = lambda s: None) -> SizeResult:
    """Measure one size."""
    from troubleshoot.advice.ranking import rank

    model = synthetic_model(basic_events, seed=seed)
    progress(f"{basic_events} basic events: compiling")
    gc.collect()
    t0 = time.perf_counter()
    engine = Engine(model)
    compile_s = time.perf_counter() - t0
    tree = engine.tree
    findings = _findings(model, engine, seed)
    done = {f.target for f in findings}
    candidates = [c for c in model.checks if c.id not in done]
    progress(f"{basic_events} basic events: propagating")
    engine.propagate(findings)  # warm the compiled plans

    def propagate():
        engine.forget()  # a posterior kept in memory would make the timing free
        return engine.propagate(findings)

    propagate_s = _median_time(propagate, repeats)
    step_s = _median_time(lambda: rank(propagate(), candidates), repeats)
    session_step_s = _session_step_time(model, engine, findings, repeats)

    tracemalloc.start()
    fresh = Engine(model)
    rank(fresh.propagate(findings), candidates)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    del fresh

    pgmpy_s = pyagrum_s = pgmpy_step_s = None
    if references:
        with tempfile.TemporaryDirectory() as tmp:
            from troubleshoot.engine.xmlbif import network_to_xmlbif

            bif = Path(tmp) / "network.bifxml"
            bif.write_bytes(network_to_xmlbif(build_network(model)))
            evidence = _evidence_names(model, findings)
            variables = [v for v in tree.variables if v not in evidence]
            progress(f"{basic_events} basic events: pyAgrum LazyPropagation, every marginal")
            pyagrum_s = _pyagrum_marginals(bif, evidence, variables, budget)
            ve = _pgmpy_model(bif)
            if ve is not None:
                progress(f"{basic_events} basic events: pgmpy VariableElimination, every marginal "
                         f"(budget {budget:.0f} s)")
                pgmpy_s = _pgmpy_marginals(ve, evidence, variables, budget)
                progress(f"{basic_events} basic events: pgmpy ranking by queries (budget {budget:.0f} s)")
                pgmpy_step_s = _pgmpy_ranking(ve, model, evidence, budget)

    def ratio(ref: float | None, ours: float) -> float | None:
        return None if ref is None or ours <= 0 else ref / ours

    return SizeResult(
        basic_events=basic_events, gates=len(model.gates), checks=len(model.checks),
        compile_s=compile_s, propagate_ms=propagate_s * 1000, step_ms=step_s * 1000,
        session_step_ms=session_step_s * 1000,
        width=tree.width, table_entries=tree.table_entries, peak_mb=peak / 1024**2,
        pgmpy_ratio=ratio(pgmpy_s, propagate_s), pyagrum_ratio=ratio(pyagrum_s, propagate_s),
        pgmpy_step_ratio=ratio(pgmpy_step_s, step_s),
        pgmpy_s=pgmpy_s, pyagrum_s=pyagrum_s, pgmpy_step_s=pgmpy_step_s,
    )


def as_json(results: list[SizeResult]) -> dict:
    """The --json document: {"sizes": [...]} with the keys the issue names (and a few more)."""
    def clean(d):
        return {k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in d.items()}

    return {"sizes": [clean(asdict(r)) for r in results]}


def as_table(results: list[SizeResult], budget: float = REFERENCE_BUDGET_S) -> str:
    def fmt_ratio(r):
        return "not finished" if r is None else f"{r:,.1f}x"

    lines = [
        f"{'basic events':>12} {'compile':>9} {'propagate':>10} {'step':>9} {'session':>9} {'width':>5} "
        f"{'entries':>9} {'peak':>8} {'pgmpy':>13} {'pyAgrum':>9} {'pgmpy rank':>12}",
    ]
    for r in results:
        lines.append(
            f"{r.basic_events:>12,} {r.compile_s:>8.2f}s {r.propagate_ms:>8.1f}ms {r.step_ms:>7.1f}ms "
            f"{r.session_step_ms:>7.1f}ms "
            f"{r.width:>5} {r.table_entries:>9,} {r.peak_mb:>6.1f}MB {fmt_ratio(r.pgmpy_ratio):>13} "
            f"{fmt_ratio(r.pyagrum_ratio):>9} {fmt_ratio(r.pgmpy_step_ratio):>12}"
        )
    lines.append("propagate: median of one propagation with every marginal; step: propagate + rank every check; "
                 "session: a whole action as the UI does it (step, then weighing the best 3 checks "
                 "against repairing now).")
    lines.append("Ratios are the reference's time for the same job divided by ours (higher: we are faster); "
                 f"'not finished' means over {budget:.0f} s or not installed.")
    return "\n".join(lines)
