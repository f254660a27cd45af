"""The reference libraries' side of the benchmark, run in a child process the benchmark can kill.

``python -m troubleshoot.study.reference_jobs LIBRARY SPEC.json`` loads the
XMLBIF network named in the spec with pyAgrum or pgmpy, runs that library's
jobs on the same findings as our engine, and prints one JSON line per job as
soon as it is done: ``{"job": NAME, "seconds": S}`` (``null`` when the job
gave up past its budget) or ``{"error": TEXT}``. A call into a library cannot
be interrupted from inside, so the parent enforces a hard timeout by killing
this process; the lines already printed still count.

Jobs
----
pyagrum
    ``infer``: ``LazyPropagation.makeInference()`` alone (its C++ work);
    ``marginals``: the same fresh ``LazyPropagation``, from its creation with
    the findings set through ``makeInference()`` to ``posterior()`` of every
    variable.
pgmpy
    ``marginals``: one ``VariableElimination`` query per variable;
    ``rank``: every check ranked the query way (P(T | e), then per outcome
    P(causes | e, t)).
"""

from __future__ import annotations

import json
import sys
import time
import warnings


def _emit(job: str, seconds: float | None) -> None:
    print(json.dumps({"job": job, "seconds": seconds}), flush=True)


def _pyagrum(spec: dict) -> None:
    import pyagrum as gum

    bn = gum.loadBN(spec["bif"])
    evidence, variables, budget = spec["evidence"], spec["variables"], spec["budget"]
    # One fresh inference, timed in parts: makeInference() alone is reported
    # first (so it counts even if reading every posterior runs out of time),
    # then the whole job from the engine's creation to the last posterior.
    t0 = time.perf_counter()
    ie = gum.LazyPropagation(bn)
    ie.setEvidence(evidence)
    t1 = time.perf_counter()
    ie.makeInference()
    _emit("infer", time.perf_counter() - t1)
    for v in variables:
        ie.posterior(v)
        if time.perf_counter() - t0 > budget:
            _emit("marginals", None)
            return
    _emit("marginals", time.perf_counter() - t0)


def _pgmpy(spec: dict) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from pgmpy.inference import VariableElimination
        from pgmpy.readwrite import XMLBIFReader

        ve = VariableElimination(XMLBIFReader(spec["bif"]).get_model())
    evidence, budget = spec["evidence"], spec["budget"]

    def timed(job: str, queries) -> None:
        t0 = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for variables, extra in queries:
                ve.query(variables, evidence={**evidence, **extra}, show_progress=False)
                if time.perf_counter() - t0 > budget:
                    _emit(job, None)
                    return
        _emit(job, time.perf_counter() - t0)

    timed("marginals", (([v], {}) for v in spec["variables"]))

    def ranking():
        # I(C; T) = sum_t P(t|e) KL(P(c|e,t) || P(c|e)): three queries per check.
        for check_id, causes, outcomes in spec["checks"]:
            yield [check_id], {}
            for outcome in (outcomes if causes else ()):
                yield causes, {check_id: outcome}

    timed("rank", ranking())


def main(argv: list[str] | None = None) -> int:
    library, spec_path = (sys.argv[1:] if argv is None else argv)[:2]
    with open(spec_path, encoding="utf-8") as f:
        spec = json.load(f)
    try:
        {"pyagrum": _pyagrum, "pgmpy": _pgmpy}[library](spec)
    except ImportError as err:
        print(json.dumps({"error": f"{library} is not installed ({err})"}), flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
