"""The speed and memory benchmark: seeded synthetic trees, our engine beside pgmpy and pyAgrum.

For each size it measures compile time, the median time of one propagation
(every marginal), one diagnosis step (propagation plus ranking every check),
peak memory, join-tree width and total table size, and a *floor*: one
vectorised multiply-add pass (``a * b + c``, two in-place numpy calls) over as
many entries as a propagation touches, timed in the same run, so that
propagate / floor says how close the propagation runs to the speed of its
own arithmetic whatever the load on the machine.

Where the reference libraries are installed, the same marginals (and, for
pgmpy, the same ranking done by queries; for pyAgrum, ``makeInference()``
alone) on the same network and findings run in a child process
(:mod:`troubleshoot.study.reference_jobs`) with a hard timeout, and are
reported as speed ratios (their time / ours). A job that does not finish
within its budget at one size is not tried at larger sizes in the same run.
"""

from __future__ import annotations

import gc
import json
import math
import random
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
from dataclasses import asdict, dataclass
from pathlib import Path
from collections.abc import Callable

import numpy as np

from troubleshoot.errors import ImpossibleFindings, NetworkTooLarge
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.engine.network import build_network
from troubleshoot.study.synthetic import synthetic_model

SIZES = (100, 500, 2000, 5000)
#: Seconds a reference library may take for one job before it counts as not finished.
REFERENCE_BUDGET_S = 30.0
#: Seconds a reference child process may take to start, import its library and read the network.
LOAD_ALLOWANCE_S = 30.0
#: Jobs each reference library runs, in order (see reference_jobs).
REFERENCE_JOBS = {"pyagrum": ("infer", "marginals"), "pgmpy": ("marginals", "rank")}


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
    floor_ms: float
    floor_ratio: float
    pyagrum_infer_ratio: float | None
    pyagrum_infer_s: float | None
    touched_entries: int
    depth: int
    compile_cpu_s: float
    #: With ``three_outcomes``: the step on the same tree with that share of
    #: its checks given three outcomes, timed alternately with the two-outcome
    #: step in the same run, and the ratio of the two medians.
    three_outcome_share: float | None = None
    step_two_outcomes_ms: float | None = None
    step_three_outcomes_ms: float | None = None
    three_outcome_step_ratio: float | None = None


#: Seconds one timing may take: past it, the median of the runs made so far (at least one) is kept.
TIMING_BUDGET_S = 20.0


def _median_time(fn: Callable[[], object], repeats: int, budget: float = TIMING_BUDGET_S) -> float:
    """Median seconds of up to ``repeats`` runs, stopping once ``budget`` seconds are spent."""
    times: list[float] = []
    start = time.perf_counter()
    while len(times) < repeats and (not times or time.perf_counter() - start < budget):
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


def floor_pass(entries: int, table_entries: int) -> Callable[[], None]:
    """One vectorised multiply-add pass, out = a * b + c, over ``entries`` float64 entries.

    The pass runs over buffers as large as the join tree's tables (its
    working set, in the same caches), as many times as it takes to cover
    ``entries``: the arithmetic a propagation cannot avoid, at numpy's speed
    on this machine now. The benchmark divides the propagation time by it.
    """
    size = max(1, min(entries, table_entries))
    passes, rest = divmod(entries, size)
    rng = np.random.default_rng(0)
    a, b, c = rng.random(size), rng.random(size), rng.random(size)
    out = np.empty(size)

    def multiply_add() -> None:
        for _ in range(passes):
            np.multiply(a, b, out=out)
            np.add(out, c, out=out)
        if rest:
            np.multiply(a[:rest], b[:rest], out=out[:rest])
            np.add(out[:rest], c[:rest], out=out[:rest])

    multiply_add()
    return multiply_add


def _paired_medians(first: Callable[[], object], second: Callable[[], object], repeats: int,
                    budget: float = TIMING_BUDGET_S) -> tuple[float, float]:
    """Median seconds of two jobs timed in alternation, so both meet the same load on a shared machine."""
    times: tuple[list[float], list[float]] = ([], [])
    start = time.perf_counter()
    while len(times[0]) < repeats and (not times[0] or time.perf_counter() - start < budget):
        for fn, out in ((first, times[0]), (second, times[1])):
            t0 = time.perf_counter()
            fn()
            out.append(time.perf_counter() - t0)
    return statistics.median(times[0]), statistics.median(times[1])


def run_reference(library: str, spec: dict, budget: float, jobs: tuple[str, ...],
                  load_allowance: float = LOAD_ALLOWANCE_S) -> dict[str, float | None]:
    """Run one library's jobs in a child process killed after its hard timeout.

    Returns
    -------
    dict
        job -> seconds, or None when the job gave up past ``budget``, the
        child was killed before reporting it, or the library is missing.
    """
    results: dict[str, float | None] = {job: None for job in jobs}
    with tempfile.TemporaryDirectory() as tmp:
        spec_path = Path(tmp) / "spec.json"
        spec_path.write_text(json.dumps({**spec, "budget": budget}), encoding="utf-8")
        out_path = Path(tmp) / "out.jsonl"
        with open(out_path, "w", encoding="utf-8") as out:
            child = subprocess.Popen([sys.executable, "-m", "troubleshoot.study.reference_jobs", library,
                                      str(spec_path)], stdout=out, stderr=subprocess.DEVNULL,
                                     stdin=subprocess.DEVNULL)
            try:
                child.wait(timeout=load_allowance + budget * len(jobs))
            except subprocess.TimeoutExpired:
                child.kill()
                child.wait()
        for line in out_path.read_text(encoding="utf-8").splitlines():
            try:
                record = json.loads(line)
            except ValueError:
                continue
            if record.get("job") in results and record.get("seconds") is not None:
                results[record["job"]] = float(record["seconds"])
    return results


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


def three_outcome_steps(basic_events: int, seed: int, share: float, repeats: int,
                        progress: Callable[[str], None] = lambda s: None) -> tuple[float, float]:
    """Median seconds of a step (propagate + rank every check) on the two-outcome tree and on
    the same tree with ``share`` of its checks given three outcomes, timed alternately.

    The findings are those drawn for the two-outcome tree; an abnormal
    outcome (index 1) reads "low" on a converted check, which is possible
    wherever "abnormal" was.
    """
    from troubleshoot.advice.ranking import rank

    two = synthetic_model(basic_events, seed=seed)
    three = synthetic_model(basic_events, seed=seed, three_outcome_share=share)
    progress(f"{basic_events} basic events: two against three outcomes")
    engines = [Engine(two), Engine(three)]
    findings = _findings(two, engines[0], seed)
    done = {f.target for f in findings}
    candidates = [c.id for c in two.checks if c.id not in done]
    times: list[list[float]] = [[], []]
    for engine in engines:
        rank(engine.propagate(findings), candidates)  # warm the compiled plans
    for _ in range(repeats):
        for which, engine in enumerate(engines):  # alternate, so both see the same machine load
            engine.forget()
            t0 = time.perf_counter()
            rank(engine.propagate(findings), candidates)
            times[which].append(time.perf_counter() - t0)
    return statistics.median(times[0]), statistics.median(times[1])


def run_size(basic_events: int, seed: int = 1, references: bool = True, repeats: int = 15,
             budget: float = REFERENCE_BUDGET_S, progress: Callable[[str], None] = lambda s: None,
             gave_up: set | None = None, three_outcomes: float = 0.0) -> SizeResult:
    """Measure one size; with ``three_outcomes`` > 0 also the step with that share of three-outcome checks.

    ``gave_up`` holds (library, job) pairs that did not finish at a smaller
    size of the same run: they are not tried again (they would not finish
    on a larger tree either) and count as not finished; new ones are added.
    """
    from troubleshoot.advice.ranking import rank

    gave_up = set() if gave_up is None else gave_up
    model = synthetic_model(basic_events, seed=seed)
    progress(f"{basic_events:,} basic events: compiling")
    gc.collect()
    t0, c0 = time.perf_counter(), time.process_time()
    engine = Engine(model)
    compile_s, compile_cpu_s = time.perf_counter() - t0, time.process_time() - c0
    tree = engine.tree
    if tree is None:  # the engine went over to the compiled path: no join tree to measure
        raise NetworkTooLarge(f"{basic_events:,} basic events: the join tree does not fit in "
                              f"{engine.memory_budget / 1024**2:.0f} MB, so its speed cannot be measured")
    findings = _findings(model, engine, seed)
    done = {f.target for f in findings}
    candidates = [c for c in model.checks if c.id not in done]
    progress(f"{basic_events:,} basic events: propagating")
    engine.propagate(findings)  # warm the compiled plans

    def propagate():
        engine.forget()  # a posterior kept in memory would make the timing free
        return engine.propagate(findings)

    propagate_s, floor_s = _paired_medians(propagate, floor_pass(tree.touched_entries, tree.table_entries),
                                           2 * repeats + 1)
    step_s = _median_time(lambda: rank(propagate(), candidates), repeats)
    progress(f"{basic_events:,} basic events: session steps")
    session_step_s = _session_step_time(model, engine, findings, repeats)

    progress(f"{basic_events:,} basic events: peak memory")
    tracemalloc.start()
    fresh = Engine(model)
    rank(fresh.propagate(findings), candidates)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    del fresh

    ref: dict[tuple[str, str], float | None] = {}
    if references:
        with tempfile.TemporaryDirectory() as tmp:
            from troubleshoot.engine.xmlbif import network_to_xmlbif

            evidence = _evidence_names(model, findings)
            spec = {
                "evidence": evidence,
                "variables": [v for v in tree.variables if v not in evidence],
                "checks": [[c.id, [x for x in dict.fromkeys(k.target for k in c.causes) if x not in evidence],
                            list(c.outcomes)] for c in model.checks if c.id not in evidence],
            }
            for library, jobs in REFERENCE_JOBS.items():
                todo = tuple(j for j in jobs if (library, j) not in gave_up)
                if not todo:
                    continue
                if "bif" not in spec:
                    bif = Path(tmp) / "network.bifxml"
                    bif.write_bytes(network_to_xmlbif(build_network(model)))
                    spec["bif"] = str(bif)
                progress(f"{basic_events:,} basic events: {library} ({', '.join(todo)}; "
                         f"at most {LOAD_ALLOWANCE_S + budget * len(todo):.0f} s)")
                times = run_reference(library, spec, budget, todo)
                for job, seconds in times.items():
                    ref[(library, job)] = seconds
                    if seconds is None:
                        gave_up.add((library, job))

    pgmpy_s = ref.get(("pgmpy", "marginals"))
    pgmpy_step_s = ref.get(("pgmpy", "rank"))
    pyagrum_s = ref.get(("pyagrum", "marginals"))
    pyagrum_infer_s = ref.get(("pyagrum", "infer"))

    def ratio(ref_s: float | None, ours: float) -> float | None:
        return None if ref_s is None or ours <= 0 else ref_s / ours

    graded: dict = {}
    if three_outcomes > 0:
        two_s, three_s = three_outcome_steps(basic_events, seed, three_outcomes, repeats, progress)
        graded = dict(three_outcome_share=three_outcomes, step_two_outcomes_ms=two_s * 1000,
                      step_three_outcomes_ms=three_s * 1000, three_outcome_step_ratio=ratio(three_s, two_s))

    return SizeResult(
        basic_events=basic_events, gates=len(model.gates), checks=len(model.checks),
        compile_s=compile_s, propagate_ms=propagate_s * 1000, step_ms=step_s * 1000,
        session_step_ms=session_step_s * 1000,
        width=tree.width, table_entries=tree.table_entries, peak_mb=peak / 1024**2,
        pgmpy_ratio=ratio(pgmpy_s, propagate_s), pyagrum_ratio=ratio(pyagrum_s, propagate_s),
        pgmpy_step_ratio=ratio(pgmpy_step_s, step_s),
        pgmpy_s=pgmpy_s, pyagrum_s=pyagrum_s, pgmpy_step_s=pgmpy_step_s,
        floor_ms=floor_s * 1000, floor_ratio=propagate_s / floor_s if floor_s > 0 else math.inf,
        pyagrum_infer_ratio=ratio(pyagrum_infer_s, propagate_s), pyagrum_infer_s=pyagrum_infer_s,
        touched_entries=tree.touched_entries, depth=tree.depth, compile_cpu_s=compile_cpu_s, **graded,
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
        f"{'basic events':>12} {'compile':>8} {'propagate':>10} {'step':>9} {'session':>9} {'width':>5} "
        f"{'entries':>10} {'peak':>8} {'floor':>8} {'prop/floor':>10} {'pgmpy':>12} {'pyAgrum':>12} "
        f"{'pyAgrum infer':>13} {'pgmpy rank':>12}",
    ]
    for r in results:
        lines.append(
            f"{r.basic_events:>12,} {r.compile_s:>7.2f}s {r.propagate_ms:>8.1f}ms {r.step_ms:>7.1f}ms "
            f"{r.session_step_ms:>7.1f}ms "
            f"{r.width:>5} {r.table_entries:>10,} {r.peak_mb:>6.1f}MB {r.floor_ms:>6.2f}ms {r.floor_ratio:>9.1f}x "
            f"{fmt_ratio(r.pgmpy_ratio):>12} {fmt_ratio(r.pyagrum_ratio):>12} "
            f"{fmt_ratio(r.pyagrum_infer_ratio):>13} {fmt_ratio(r.pgmpy_step_ratio):>12}"
        )
    for r in results:
        if r.three_outcome_step_ratio is not None:
            lines.append(f"{r.basic_events:,} basic events, {r.three_outcome_share:.0%} of the checks with three "
                         f"outcomes: step {r.step_three_outcomes_ms:.1f} ms against {r.step_two_outcomes_ms:.1f} ms "
                         f"with two outcomes ({r.three_outcome_step_ratio:.2f}x, timed alternately)")
    lines.append("propagate: median of one propagation with every marginal (timed alternately with the floor); "
                 "step: propagate + rank every check; "
                 "session: a whole action as the UI does it (step, then weighing the best 3 checks "
                 "against repairing now).")
    lines.append("floor: one vectorised multiply-add pass over as many entries as a propagation touches, "
                 "timed in the same run; prop/floor = propagate / floor.")
    lines.append("Ratios are the reference's time for the same job divided by our propagate (pgmpy rank: by "
                 "our step); pyAgrum: a fresh LazyPropagation, makeInference() and every posterior read; "
                 "pyAgrum infer: makeInference() alone.")
    lines.append(f"'not finished' means over {budget:.0f} s (the child process is killed at the hard timeout), "
                 "not tried after a smaller size did not finish, or not installed.")
    return "\n".join(lines)
