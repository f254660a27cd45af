"""``troubleshoot bench``: its options, its JSON keys and its reference child processes.

No timing is asserted (speed is what ``bench`` reports, not what a test
checks); these tests check that the figures are there, consistent with the
compiled tree they describe, and that a reference library that does not
answer in time is killed and counted as not finished.
"""

from __future__ import annotations

import json

import pytest

from troubleshoot.cli import main
from troubleshoot.engine.inference import Engine
from troubleshoot.engine.network import build_network
from troubleshoot.engine.xmlbif import network_to_xmlbif
from troubleshoot.study.benchmark import _evidence_names, _findings, run_reference
from troubleshoot.study.synthetic import synthetic_model

#: The keys the README documents for ``bench --json`` before this change (they keep their meaning).
OLD_KEYS = {"basic_events", "gates", "checks", "compile_s", "propagate_ms", "step_ms", "session_step_ms",
            "width", "table_entries", "peak_mb", "pgmpy_ratio", "pyagrum_ratio", "pgmpy_step_ratio",
            "pgmpy_s", "pyagrum_s", "pgmpy_step_s"}
NEW_KEYS = {"floor_ms", "floor_ratio", "pyagrum_infer_ratio"}


def test_json_keeps_the_old_keys_and_adds_the_floor(capsys):
    assert main(["bench", "--sizes", "30", "60", "--no-references", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert [r["basic_events"] for r in out["sizes"]] == [30, 60]
    for r in out["sizes"]:
        assert OLD_KEYS | NEW_KEYS <= set(r)
        tree = Engine(synthetic_model(r["basic_events"], seed=1)).tree
        assert r["table_entries"] == tree.table_entries
        assert r["touched_entries"] == tree.touched_entries >= tree.table_entries
        assert r["floor_ms"] > 0
        assert r["floor_ratio"] == pytest.approx(r["propagate_ms"] / r["floor_ms"], rel=1e-9)
        assert r["pyagrum_infer_ratio"] is None and r["pyagrum_ratio"] is None  # --no-references


def test_table_shows_the_floor_and_both_pyagrum_ratios(capsys):
    assert main(["bench", "--sizes", "20", "--no-references"]) == 0
    out = capsys.readouterr().out
    for heading in ("floor", "prop/floor", "pyAgrum infer", "pgmpy rank"):
        assert heading in out


@pytest.mark.parametrize("size", ["3", "ten", "-5"])
def test_bad_sizes_are_refused(size, capsys):
    with pytest.raises(SystemExit) as err:
        main(["bench", "--sizes", size, "--no-references"])
    assert err.value.code == 2


def test_sizes_accept_tens_of_thousands_written_with_separators(capsys):
    from troubleshoot.commands.bench import _size

    assert [_size(s) for s in ("10000", "20,000", "50_000")] == [10000, 20000, 50000]


def _spec(tmp_path, basic_events=30):
    model = synthetic_model(basic_events, seed=1)
    engine = Engine(model)
    findings = _findings(model, engine, 1)
    evidence = _evidence_names(model, findings)
    bif = tmp_path / "network.bifxml"
    bif.write_bytes(network_to_xmlbif(build_network(model)))
    return {"bif": str(bif), "evidence": evidence,
            "variables": [v for v in engine.tree.variables if v not in evidence],
            "checks": [[c.id, [x for x in dict.fromkeys(k.target for k in c.causes) if x not in evidence],
                        list(c.outcomes)] for c in model.checks if c.id not in evidence]}


def test_pyagrum_runs_in_a_child_and_reports_both_jobs(tmp_path):
    times = run_reference("pyagrum", _spec(tmp_path), budget=120, jobs=("infer", "marginals"))
    assert set(times) == {"infer", "marginals"}
    assert all(t is not None and t > 0 for t in times.values())


def test_a_reference_past_its_hard_timeout_is_killed_and_not_finished(tmp_path):
    # No time to even import the library: the child is killed and nothing counts.
    times = run_reference("pgmpy", _spec(tmp_path, 200), budget=0.0, jobs=("marginals", "rank"),
                          load_allowance=0.05)
    assert times == {"marginals": None, "rank": None}
