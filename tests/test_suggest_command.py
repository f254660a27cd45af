"""``troubleshoot suggest``: the JSON contract, the order of findings and repairs,
and clear refusals. Posteriors are compared with brute-force enumeration
(tests/bruteforce.py) on a small model written to a file."""

from __future__ import annotations

import json
import math

import pytest

import bruteforce as bf
from test_session import pump_model
from troubleshoot.cli import main
from troubleshoot.engine.inference import Finding
from troubleshoot.model.xmlfile import save_model

TOL = 1e-9
CONTRACT_KEYS = {"model", "log_p_findings", "entropy_bits", "suspects", "ranking", "explanation",
                 "isolated", "ambiguity_group", "repair_order"}


@pytest.fixture
def model_file(tmp_path):
    path = tmp_path / "pump.xml"
    save_model(pump_model(), path)
    return str(path)


def suggest_json(capsys, *args):
    assert main(["suggest", *args, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_json_contract_and_brute_force_figures(model_file, capsys):
    # --lookahead 0: only the bits decide when to stop checking.
    doc = suggest_json(capsys, model_file, "--finding", "lamp=off", "--lookahead", "0")
    assert CONTRACT_KEYS <= set(doc)
    model = pump_model()
    findings = [Finding("top", 1, 0), Finding("lamp", 0, 0)]
    ref = bf.posterior(model, findings)  # enumeration
    assert doc["log_p_findings"] == pytest.approx(ref["log_p"], abs=TOL)
    assert doc["entropy_bits"] == pytest.approx(bf.entropy_bits(ref["joint"]), abs=TOL)
    assert [s["id"] for s in doc["suspects"]] == sorted(model.hypotheses, key=lambda r: (-ref["marginals"][r], r))
    for s in doc["suspects"]:
        assert set(s) >= {"id", "label", "p"} and s["p"] == pytest.approx(ref["marginals"][s["id"]], abs=TOL)
    assert "lamp" not in [r["id"] for r in doc["ranking"]]
    for r in doc["ranking"]:
        assert set(r) >= {"id", "label", "cost", "bits", "score", "outcomes"}
        assert r["bits"] == pytest.approx(bf.check_information_bits(model, findings, (), r["id"]), abs=TOL)
        assert sum(r["outcomes"].values()) == pytest.approx(1.0, abs=TOL)
        assert set(r["outcomes"]) == set(model.check_by_id[r["id"]].outcomes)
    scores = [r["score"] for r in doc["ranking"]]
    assert scores == sorted(scores, reverse=True)
    joint = ref["joint"]
    assert doc["explanation"]["p"] == pytest.approx(float(joint.max()), abs=TOL)
    assert doc["isolated"] is None and doc["ambiguity_group"] is None
    assert isinstance(doc["repair_order"], list)


def test_findings_and_repairs_keep_their_order(model_file, capsys):
    # Finding before the repair: epoch 0; after it: epoch 1 (the breaker held working).
    before = suggest_json(capsys, model_file, "--finding", "flow=flow low", "--repaired", "breaker")
    after = suggest_json(capsys, model_file, "--repaired", "breaker", "--finding", "flow=flow low")
    model = pump_model()
    ref_before = bf.posterior(model, [Finding("top", 1, 0), Finding("flow", 1, 0)], ("breaker",))
    ref_after = bf.posterior(model, [Finding("top", 1, 0), Finding("flow", 1, 1)], ("breaker",))
    assert before["log_p_findings"] == pytest.approx(ref_before["log_p"], abs=TOL)
    assert after["log_p_findings"] == pytest.approx(ref_after["log_p"], abs=TOL)
    assert [f["epoch"] for f in after["findings"]] == [0, 1]


def test_isolated_threshold_and_verification_on_the_top_event(model_file, capsys):
    doc = suggest_json(capsys, model_file, "--finding", "lamp=on")
    assert doc["isolated"] == "breaker" and doc["repair_order"][0] == "breaker"
    doc = suggest_json(capsys, model_file, "--finding", "flow=flow low")
    p_top = doc["suspects"][0]["p"]
    assert 0.5 < p_top < 1.0
    above = suggest_json(capsys, model_file, "--finding", "flow=flow low", "--threshold", str(p_top - 0.01))
    below = suggest_json(capsys, model_file, "--finding", "flow=flow low", "--threshold", str(p_top + 0.01))
    assert above["isolated"] == doc["suspects"][0]["id"] and below["isolated"] is None
    doc = suggest_json(capsys, model_file, "--repaired", "breaker", "--finding", "top=flows")
    assert doc["status"] == "confirmed"


def test_a_unit_in_doubt_is_advised_for_trying_and_top_ok_confirms(model_file, capsys):
    # The impeller replaced, its own check (the flow gauge) still low: only the impeller moves
    # that gauge, so the reading is most likely its 1 % false alarm and the unit may work.
    steps = ("--finding", "flow=flow low", "--repaired", "impeller", "--finding", "flow=flow low")
    doc = suggest_json(capsys, model_file, *steps)
    p_fails = bf.posterior(pump_model(), [Finding("top", 1, 0), Finding("flow", 1, 0), Finding("flow", 1, 1)],
                           ("impeller",))["marginals"]["top"]  # enumeration
    assert doc["status"] == "awaiting-verification"
    assert doc["decision"]["action"] == "verify" and doc["decision"]["target"] == "top"
    assert doc["verification"]["target"] == "top"
    reason = doc["decision"]["reasons"][0]
    assert reason["kind"] == "unit-may-work"
    assert reason["probabilities"]["unit works"] == pytest.approx(1.0 - p_fails, abs=TOL)
    assert suggest_json(capsys, model_file, *steps, "--finding", "top=ok")["status"] == "confirmed"


def test_readable_table_has_units(model_file, capsys):
    assert main(["suggest", model_file, "--finding", "flow=flow normal"]) == 0
    out = capsys.readouterr().out
    assert "bits" in out and "cost in min" in out and "Suspects (probability" in out
    assert "Next check:" in out


@pytest.mark.parametrize("args, words", [
    (["--finding", "nope=on"], "unknown check 'nope'"),
    (["--finding", "lamp=blinking"], "outcomes 1 'off', 2 'on', not 'blinking'"),
        (["--finding", "lamp=3"], "outcomes 1 'off', 2 'on', not '3'"),
    (["--finding", "lamp"], "write CHECK=OUTCOME"),
    (["--repaired", "motor"], "not a basic event"),
])
def test_bad_arguments_exit_2_with_a_clear_message(model_file, capsys, args, words):
    assert main(["suggest", model_file, *args]) == 2
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err


def test_demo_model_by_name(capsys):
    from troubleshoot.model.demos import demo_path

    if not demo_path("rooftop").is_file():
        pytest.skip("the rooftop demo model is not installed")
    doc = suggest_json(capsys, "rooftop")
    assert doc["ranking"] and math.isclose(sum(1 for _ in doc["suspects"]), len(doc["suspects"]))
