"""``troubleshoot analyze`` end to end: JSON shape, report, truncation, refusals, and
the exact top-event probability against the join-tree engine and pyAgrum.

References for the figures: NUREG-0492 (Fault Tree Handbook, 1981) ch. VII;
the Aralia benchmark values of Rauzy et al. 2003 as tabled in
openpra-org/generic-openpsa-models (../shared/benchmarks/aralia/README.md).
"""

from __future__ import annotations


import itertools
import json
import math

import pytest
from conftest import aralia_path
from test_cutsets import P_A, P_B, P_C, read_benchmark, tree

from troubleshoot import cli
from troubleshoot.analysis.bdd import FaultTreeBdd
from troubleshoot.model import Gate, Model, unlisted_id

REQUIRED_IMPORTANCE_KEYS = {"birnbaum", "fussell_vesely", "criticality", "raw", "rrw", "diagnostic"}


def strict_json(text: str):
    """Parse JSON refusing NaN / Infinity literals (they are not JSON)."""

    def refuse(name):
        raise AssertionError(f"invalid JSON constant {name}")

    return json.loads(text, parse_constant=refuse)


def run_cli(capsys, *argv) -> tuple[int, str, str]:
    status = cli.main(["analyze", *map(str, argv)])
    out, err = capsys.readouterr()
    return status, out, err


@pytest.fixture
def small_model_file(tmp_path):
    """(A + B.C) OR-ed with unlisted causes, written in our XML format."""
    from troubleshoot.model import xmlfile as modelfile
    gates = [Gate("t", "unit fails", "or", ("A", "g"), unlisted=0.01), Gate("g", "both", "and", ("B", "C"))]
    model = tree("t", gates, {"A": P_A, "B": P_B, "C": P_C})
    path = tmp_path / "small.xml"
    modelfile.save_model(model, path)
    return path


def test_json_has_the_documented_shape_and_the_handbook_figures(capsys, small_model_file):
    status, out, err = run_cli(capsys, small_model_file, "--json")
    assert status == 0, err
    doc = strict_json(out)
    assert set(doc) >= {"top_event", "cut_sets", "truncated", "importance"}
    assert set(doc["top_event"]) >= {"exact", "rare_event", "mcub"}
    leak = unlisted_id("t")
    p_leak = 0.01
    # NUREG-0492 ch. VI: P = 1 - (1 - P(A))(1 - P(B)P(C))(1 - P(leak)), independent events.
    exact = 1 - (1 - P_A) * (1 - P_B * P_C) * (1 - p_leak)
    assert doc["top_event"]["exact"] == pytest.approx(exact, abs=1e-12)
    # NUREG-0492 ch. VII: rare-event = sum of P(MCS); MCUB = 1 - prod(1 - P(MCS)).
    mcs = [P_A, P_B * P_C, p_leak]
    assert doc["top_event"]["rare_event"] == pytest.approx(sum(mcs), abs=1e-15)
    assert doc["top_event"]["mcub"] == pytest.approx(1 - math.prod(1 - p for p in mcs), abs=1e-15)
    assert doc["cut_sets"] == [
        {"events": ["A"], "order": 1, "p": pytest.approx(P_A)},
        {"events": ["B", "C"], "order": 2, "p": pytest.approx(P_B * P_C)},
        {"events": [leak], "order": 1, "p": pytest.approx(p_leak)},
    ]
    assert doc["truncated"] is False
    assert set(doc["importance"]) == {"A", "B", "C", leak}
    for measures in doc["importance"].values():
        assert set(measures) >= REQUIRED_IMPORTANCE_KEYS
    # diagnostic importance of A = P(A) / P(top) here, since A alone fails the top
    assert doc["importance"]["A"]["diagnostic"] == pytest.approx(P_A / exact, rel=1e-12)
    assert doc["probability_basis"] == "per-demand"
    assert err == ""  # no progress on quick work, nothing else on stderr


def test_infinite_rrw_is_null_in_json_and_inf_in_text(capsys, tmp_path):
    from troubleshoot.model import xmlfile as modelfile
    model = tree("t", [Gate("t", "", "and", ("A", "B"))], {"A": P_A, "B": P_B})
    path = tmp_path / "and.xml"
    modelfile.save_model(model, path)
    status, out, _ = run_cli(capsys, path, "--json")
    doc = strict_json(out)
    # parallel system: with A working the top cannot occur, RRW = P/0 (common practice)
    assert doc["importance"]["A"]["rrw"] is None
    assert doc["importance"]["A"]["rrw_infinite"] is True
    status, out, _ = run_cli(capsys, path)
    assert status == 0
    assert " inf " in out or out.rstrip().endswith("inf") or " inf\n" in out
    assert "per demand" in out


def test_report_has_the_tables_with_units(capsys, small_model_file, tmp_path):
    report = tmp_path / "figures.md"
    status, out, _ = run_cli(capsys, small_model_file, "--report", report)
    assert status == 0
    text = report.read_text(encoding="utf-8")
    assert "## Top-event probability" in text and "## Minimal cut sets" in text
    assert "## Importance of each basic event" in text
    assert "probability (per demand)" in text
    assert "| 1 | 1 | 1.00000e-01 | `A` |" in text
    assert "Fussell-Vesely" in text and "exact form" in text
    assert f"Report written to {report}" in out


def test_report_to_an_unwritable_place_is_a_clean_error(capsys, small_model_file, tmp_path):
    status, _, err = run_cli(capsys, small_model_file, "--report", tmp_path / "no" / "such" / "dir.md")
    assert status == 2
    assert "cannot write the report" in err and "Traceback" not in err


def test_missing_file_is_a_clean_error(capsys, tmp_path):
    status, _, err = run_cli(capsys, tmp_path / "absent.xml")
    assert status == 2
    assert "absent.xml" in err and "no such file" in err and "Traceback" not in err


def test_bad_option_values_exit_2(capsys, small_model_file):
    with pytest.raises(SystemExit) as info:
        cli.main(["analyze", str(small_model_file), "--max-order", "0"])
    assert info.value.code == 2
    with pytest.raises(SystemExit) as info:
        cli.main(["analyze", str(small_model_file), "--min-probability", "2"])
    assert info.value.code == 2


def test_a_family_too_long_to_list_is_truncated_with_a_bound_never_refused(capsys, tmp_path, monkeypatch):
    from troubleshoot.model import xmlfile as modelfile
    import troubleshoot.analysis.figures as figures

    # 3-of-10 voting with unequal priors: C(10,3) = 120 minimal cut sets (binomial count).
    priors = {f"e{i}": 0.01 * (i + 1) for i in range(10)}
    model = tree("t", [Gate("t", "", "atleast", tuple(priors), k=3)], priors)
    path = tmp_path / "vote.xml"
    modelfile.save_model(model, path)
    monkeypatch.setattr(figures, "COMPLETE_LIST_LIMIT", 100)
    monkeypatch.setattr(figures, "DEFAULT_SHOWN", 7)
    status, out, err = run_cli(capsys, path, "--json")
    assert status == 0, err
    doc = strict_json(out)
    # Brute force from the definition: every 3-subset is a minimal cut set, P = product of its priors.
    every = sorted((math.prod(priors[e] for e in c) for c in itertools.combinations(priors, 3)), reverse=True)
    assert doc["cut_set_count"] == 120 and doc["truncated"] is True
    assert [c["p"] for c in doc["cut_sets"]] == pytest.approx(every[:7], rel=1e-12)
    assert doc["truncation"]["dropped_probability_bound"] == pytest.approx(sum(every[7:]), rel=1e-12)
    assert doc["top_event"]["rare_event"] == pytest.approx(sum(every), rel=1e-12)
    # NUREG-0492 ch. VII: MCUB = 1 - prod(1 - P(MCS)) over every set.
    assert doc["top_event"]["mcub"] == pytest.approx(1 - math.prod(1 - p for p in every), rel=1e-12)
    assert doc["peak_memory_mib"] > 0
    # probability truncation below every set keeps none and says so
    status, out, err = run_cli(capsys, path, "--json", "--min-probability", "1")
    doc = strict_json(out)
    assert status == 0 and doc["cut_sets"] == [] and doc["truncated"] is True
    assert doc["truncation"]["dropped_probability_bound"] == pytest.approx(sum(every), rel=1e-12)


def test_all_cut_sets_streams_every_set_to_a_file(capsys, tmp_path, small_model_file):
    target = tmp_path / "all.tsv"
    status, out, err = run_cli(capsys, small_model_file, "--all-cut-sets", target)
    assert status == 0, err
    rows = [line.split("\t") for line in target.read_text().splitlines() if not line.startswith("#")]
    # (A + B.C) + leak: the sets {A}, {B, C}, {leak} (Boolean absorption, NUREG-0492 ch. VII).
    assert sorted(tuple(r[2].split()) for r in rows) == sorted([("A",), ("B", "C"), (unlisted_id("t"),)])
    assert f"written to {target}" in out


def test_a_generated_tree_with_over_10_8_cut_sets_is_analysed(capsys, tmp_path):
    from troubleshoot.model.xmlfile import save_model
    from troubleshoot.study.hardtrees import many_cut_sets_model

    model = many_cut_sets_model(300, seed=1)
    path = tmp_path / "big.xml"
    save_model(model, path)
    status, out, err = run_cli(capsys, path, "--json")
    assert status == 0, err
    doc = strict_json(out)
    assert doc["cut_set_count"] > 10**8 and doc["truncated"] is True
    # The exact probability: pyAgrum's LazyPropagation on the same tree (reference library).
    assert doc["top_event"]["exact"] == pytest.approx(pyagrum_top_probability(model), abs=1e-12)
    assert len(doc["importance"]) == len(model.hypotheses)
    ps = [c["p"] for c in doc["cut_sets"]]
    assert len(ps) == 1000 and ps == sorted(ps, reverse=True)
    assert doc["truncation"]["dropped_probability_bound"] == pytest.approx(
        doc["top_event"]["rare_event"] - math.fsum(ps), rel=1e-9)
    assert doc["top_event"]["exact"] <= doc["top_event"]["mcub"] + 1e-15  # coherent tree: MCUB bounds P(top)
    assert doc["peak_memory_mib"] > 0
    status, out, _ = run_cli(capsys, path)
    assert "Peak memory:" in out and "MiB" in out and "most probable" in out


# --------------------------------------------------------------------------- benchmarks


def benchmark_path(name: str):
    return aralia_path(name)


def test_analyze_reads_mef_and_reproduces_das9201(capsys):
    status, out, err = run_cli(capsys, benchmark_path("das9201"), "--json")
    assert status == 0, err
    doc = strict_json(out)
    # Rauzy et al. 2003 (openpra-org/generic-openpsa-models table): 14,217 MCS,
    # P(top) 1.34237E-02, rare-event 1.79689E-02, MCUB 1.78089E-02.
    assert len(doc["cut_sets"]) == 14217 and doc["truncated"] is False
    assert doc["top_event"]["exact"] == pytest.approx(1.34237e-02, rel=5e-6)
    assert doc["top_event"]["rare_event"] == pytest.approx(1.79689e-02, rel=5e-6)
    assert doc["top_event"]["mcub"] == pytest.approx(1.78089e-02, rel=5e-6)
    assert len(doc["importance"]) == 122
    ps = [c["p"] for c in doc["cut_sets"]]
    assert ps == sorted(ps, reverse=True)


def test_truncated_analysis_of_baobab2(capsys):
    status, out, _ = run_cli(capsys, benchmark_path("baobab2"), "--json", "--max-order", "3")
    doc = strict_json(out)
    # Rauzy et al. 2003: baobab2 has 6 sets of order 2 and 121 of order 3.
    assert len(doc["cut_sets"]) == 6 + 121 and doc["truncated"] is True
    assert all(c["order"] <= 3 for c in doc["cut_sets"])
    assert doc["truncation"]["dropped_probability_bound"] > 0
    status, out, _ = run_cli(capsys, benchmark_path("baobab2"), "--max-order", "3")
    assert "truncated to order at most 3: 127 of 4,805 kept" in out


# --------------------------------------------------------------------------- reference libraries


def pyagrum_top_probability(model: Model) -> float:
    """P(top) by pyAgrum's LazyPropagation on a BN of the fault tree (a deterministic
    CPT per gate, a prior per root): a general-purpose reference library."""
    gum = pytest.importorskip("pyagrum", reason="pyAgrum is not installed")
    bn = gum.BayesNet("fault tree")
    name = {}
    for i, root in enumerate(model.hypotheses):
        name[root] = f"r{i}"
        bn.add(gum.LabelizedVariable(name[root], root, 2))
    for i, gate in enumerate(model.gates):
        name[gate.id] = f"g{i}"
        bn.add(gum.LabelizedVariable(name[gate.id], gate.id, 2))
    for root in model.hypotheses:
        p = model.prior_of(root)
        bn.cpt(name[root]).fillWith([1 - p, p])
    for gate in model.gates:
        parents = list(gate.operands) + ([unlisted_id(gate.id)] if gate.unlisted is not None else [])
        for parent in parents:
            bn.addArc(name[parent], name[gate.id])
        for values in itertools.product((0, 1), repeat=len(parents)):
            given = dict(zip(parents, values))
            ins = [given[x] for x in gate.inputs]
            if gate.kind == "and":
                on = all(ins)
            elif gate.kind == "or":
                on = any(ins)
            elif gate.kind == "atleast":
                on = sum(ins) >= gate.k
            elif gate.kind == "not":
                on = not ins[0]
            else:  # inhibit
                on = ins[0] and given[gate.condition]
            if gate.unlisted is not None:
                on = on or given[unlisted_id(gate.id)]
            bn.cpt(name[gate.id])[{name[x]: v for x, v in given.items()}] = [0.0, 1.0] if on else [1.0, 0.0]
    inference = gum.LazyPropagation(bn)
    inference.makeInference()
    return float(inference.posterior(name[model.top])[1])


def demo_model(name: str) -> Model:
    from troubleshoot.model import demos
    from troubleshoot.model import xmlfile as modelfile
    path = demos.demo_path(name)
    if not path.is_file():
        pytest.skip(f"the demo model file {path.name} does not exist yet")
    return modelfile.load_model(path)


def exact_three_ways(model: Model) -> tuple[float, float | None, float]:
    bdd = FaultTreeBdd.from_model(model).probability()
    try:
        from troubleshoot.engine.inference import Engine
    except ModuleNotFoundError:
        engine = None
    else:
        engine = Engine(model).propagate([]).p_failed(model.top)
    return bdd, engine, pyagrum_top_probability(model)


@pytest.mark.parametrize("name", ["rooftop", "booster"])
def test_demo_top_probability_agrees_with_engine_and_pyagrum(name, capsys):
    model = demo_model(name)
    bdd, engine, agrum = exact_three_ways(model)
    assert abs(bdd - agrum) <= 1e-12  # pyAgrum LazyPropagation (reference library)
    if engine is not None:
        assert abs(bdd - engine) <= 1e-12  # join tree (independent exact computation)
    status, out, _ = run_cli(capsys, name, "--json")
    assert status == 0
    assert strict_json(out)["top_event"]["exact"] == pytest.approx(bdd, abs=1e-12)


def test_chinese_top_probability_agrees_with_pyagrum():
    model = read_benchmark("chinese")
    bdd, engine, agrum = exact_three_ways(model)
    assert abs(bdd - agrum) <= 1e-12  # pyAgrum LazyPropagation (reference library)
    if engine is not None:
        assert abs(bdd - engine) <= 1e-12
    assert bdd == pytest.approx(1.17058e-03, rel=5e-6)  # Rauzy et al. 2003


def test_hand_tree_with_every_gate_kind_agrees_with_pyagrum():
    gates = [
        Gate("t", "", "or", ("g1", "g2", "g4"), unlisted=0.02),
        Gate("g1", "", "atleast", ("A", "B", "C"), k=2),
        Gate("g2", "", "inhibit", ("A",), condition="D"),
        Gate("g3", "", "not", ("B",)),
        Gate("g4", "", "and", ("g3", "C")),
    ]
    model = tree("t", gates, {"A": 0.1, "B": 0.2, "C": 0.3, "D": 0.4})
    bdd, engine, agrum = exact_three_ways(model)
    assert abs(bdd - agrum) <= 1e-12  # pyAgrum LazyPropagation (reference library)
    if engine is not None:
        assert abs(bdd - engine) <= 1e-12
