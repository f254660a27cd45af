"""Simulated troubleshooting: exact sampling, convergence to exact expected costs, reproducibility.

References: tests/bruteforce.py (enumeration of every root state) for the
distribution of the true state and for exact expected costs (through
tests/test_optimal.py's reference recursion); the 95% interval of a mean by
the normal approximation, mean +- 1.96 sd / sqrt(n) (common practice).
"""

from __future__ import annotations

import json
import math
from types import SimpleNamespace

import numpy as np
import pytest

import bruteforce
from test_optimal import reference_optimum, small_model
from troubleshoot.cli import main
from troubleshoot.engine.inference import Engine
from troubleshoot.model.xmlfile import save_model
from troubleshoot.study.optimal import expected_cost, solve
from troubleshoot.session import settings_for
from troubleshoot.study.simulation import (case_generator, draw_case, sample_true_state, simulate, summarise,
                                     true_values)
from troubleshoot.study.strategies import STRATEGY_NAMES, make_strategy, protocol_actor


def test_true_state_is_drawn_from_the_posterior_given_the_complaint():
    model = small_model()
    engine = Engine(model)
    rng = case_generator(11, 0, 0)
    draws = 2000
    counts = {r: 0 for r in model.hypotheses}
    for _ in range(draws):
        failed = sample_true_state(engine, rng)
        assert true_values(model, failed, frozenset())[model.top]  # every draw has the complaint
        for r in failed:
            counts[r] += 1
    # Reference: P(root failed | top) by enumeration (bruteforce.posterior).
    exact = bruteforce.posterior(model, [SimpleNamespace(target="top", outcome=1, epoch=0)])["marginals"]
    for r in model.hypotheses:
        p = exact[r]
        sd = math.sqrt(p * (1 - p) / draws)
        # 4.5 standard deviations of a binomial share: a fixed seed, far from a chance failure (common practice).
        assert abs(counts[r] / draws - p) <= 4.5 * sd + 1e-12, r


def test_case_draws_depend_on_seed_and_case_only():
    model = small_model()
    engine = Engine(model)
    a, b = draw_case(engine, 3, 7), draw_case(engine, 3, 7)
    assert a.failed == b.failed and np.array_equal(a.uniforms, b.uniforms)
    assert not np.array_equal(draw_case(engine, 3, 8).uniforms, a.uniforms)
    # The same check at the same epoch gets the same answer whoever asks (common random numbers).
    assert [a.answer(c.id, ()) for c in model.checks] == [b.answer(c.id, ()) for c in model.checks]


@pytest.mark.parametrize("name", ["info-per-cost", "info-per-cost-bits", "cheapest", "likeliest", "checklist"])
def test_simulated_mean_cost_converges_to_the_exact_expected_cost(name):
    # Two independent paths: sampling units through a Session, and the recursion over
    # every outcome with enumerated probabilities (the optimum of which is checked
    # against brute force in test_optimal.py).
    model = small_model()
    settings = settings_for(model)
    results = simulate(model, 300, 2024, [(name, None)], settings, workers=1)
    summary = summarise(name, results[name])
    exact = expected_cost(model, protocol_actor(model, make_strategy(name), settings, Engine(model)))
    low, high = summary.ci95
    assert low <= exact <= high, (summary.mean_cost, exact, summary.ci95)
    outcomes = summary.outcomes
    assert outcomes["confirmed"] + outcomes["escalated"] == 300 and outcomes["capped"] == 0


def test_optimal_policy_simulates_to_its_expected_cost():
    model = small_model(n_checks=2, n_events=3)
    solution = solve(model)
    # Reference for the optimum: the brute-force search over every policy tree.
    assert solution.expected_cost == pytest.approx(reference_optimum(model), abs=1e-9)
    results = simulate(model, 300, 7, [("optimal", solution)], settings_for(model), workers=1)
    low, high = summarise("optimal", results["optimal"]).ci95
    assert low <= solution.expected_cost <= high


def test_escalated_units_pay_the_escalation():
    # A unit whose cause lies outside the model ends escalated, its price counted.
    model = small_model(escalation=150.0)
    results = simulate(model, 200, 3, [("info-per-cost", None)], settings_for(model), workers=1)
    escalated = [r for r in results["info-per-cost"] if r.outcome == "escalated"]
    assert escalated and all(r.cost >= 150.0 for r in escalated)


def _run_cli(capsys, argv):
    code = main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_json_is_byte_identical_for_one_and_two_workers(tmp_path, capsys):
    path = tmp_path / "fan.xml"
    save_model(small_model(n_checks=2), path)
    argv = ["simulate", str(path), "--cases", "16", "--seed", "5", "--json"]
    code1, out1, err1 = _run_cli(capsys, argv + ["--workers", "1"])
    code2, out2, _ = _run_cli(capsys, argv + ["--workers", "2"])
    code3, out3, _ = _run_cli(capsys, argv + ["--workers", "1"])
    assert code1 == code2 == code3 == 0
    assert out1 == out2 == out3
    assert "16/16 cases" in err1  # progress goes to standard error
    data = json.loads(out1)
    assert data["cases"] == 16 and data["seed"] == 5
    assert list(data["strategies"]) == list(STRATEGY_NAMES)
    for row in data["strategies"].values():
        assert {"mean_cost", "ci95", "mean_checks", "accuracy", "wrong_repairs"} <= set(row)
        assert row["ci95"][0] <= row["mean_cost"] <= row["ci95"][1]
    assert data["optimal_expected_cost"] == pytest.approx(solve(small_model(n_checks=2)).expected_cost, abs=1e-12)
    for name, row in data["strategies"].items():  # every exact cost on the same protocol, none below the optimum
        assert row["exact_expected_cost"] >= data["optimal_expected_cost"] - 1e-9, name


def test_optimal_skipped_with_a_message_on_a_large_model(capsys):
    code, out, err = _run_cli(capsys, ["simulate", "rooftop", "--cases", "2", "--seed", "1", "--json",
                                       "--strategy", "info-per-cost", "--strategy", "optimal", "--workers", "1"])
    assert code == 0
    assert "optimal skipped" in err and "root events" in err
    data = json.loads(out)
    assert data["optimal_expected_cost"] is None and list(data["strategies"]) == ["info-per-cost"]


def test_plot_writes_a_png(tmp_path, capsys):
    pytest.importorskip("matplotlib")
    path = tmp_path / "fan.xml"
    save_model(small_model(), path)
    png = tmp_path / "costs.png"
    code, out, _ = _run_cli(capsys, ["simulate", str(path), "--cases", "4", "--plot", str(png), "--workers", "1"])
    assert code == 0 and "95% interval" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, section 5.2)


def test_bad_arguments_exit_2_with_a_message(capsys):
    code, _, err = _run_cli(capsys, ["simulate", "rooftop", "--cases", "0"])
    assert code == 2 and "--cases must be at least 1" in err


def test_cases_beyond_the_cap_are_refused_before_any_work(capsys):
    # Issue reproducer: --cases 10^30 used to run unbounded.
    code = main(["simulate", "rooftop", "--cases", str(10**30), "--seed", "1"])
    err = capsys.readouterr().err
    assert code == 2
    assert "--cases is at most" in err and "Traceback" not in err


def test_a_bad_plot_path_is_refused_before_the_simulation(tmp_path, capsys):
    # Issue reproducer: a --plot path in a missing folder failed only after the whole simulation.
    missing = tmp_path / "no-such-folder" / "costs.png"
    code = main(["simulate", "rooftop", "--cases", "50", "--seed", "1", "--plot", str(missing)])
    err = capsys.readouterr().err
    assert code == 2
    assert "does not exist" in err
    assert "simulating" not in err  # nothing was simulated


class _RecordingLog:
    """Stands in for a session log writer: keeps each action with what the session showed after it."""

    def __init__(self):
        from troubleshoot.session.logfile import snapshot

        self._snapshot = snapshot
        self.lines: list = []

    def write_action(self, action, view):
        self.lines.append((action, self._snapshot(view)))

    def close(self):
        pass


def test_remembered_views_and_draws_change_no_result():
    # The per-worker memos (views by record content, draws by what was drawn before) only save work:
    # every case, every logged snapshot and every draw is the same with them as without them.
    from troubleshoot.model.source import load_any_model
    from troubleshoot.study.simulation import STREAM_STRATEGY, ViewMemo, run_case

    model, _ = load_any_model("rooftop")
    engine = Engine(model)
    settings = settings_for(model)
    views = ViewMemo(capacity=40)  # small, so views are forgotten and met again too
    draws: dict = {}
    for name in ("info-per-cost", "random"):
        strategy = make_strategy(name, None)
        for case in range(30):
            plain, remembered = draw_case(engine, 5, case), draw_case(engine, 5, case, draws)
            assert plain.failed == remembered.failed and np.array_equal(plain.uniforms, remembered.uniforms)
            logs = (_RecordingLog(), _RecordingLog())
            a = run_case(engine, strategy, plain, case_generator(5, case, STREAM_STRATEGY), settings,
                         log=lambda session, log=logs[0]: log)
            b = run_case(engine, strategy, remembered, case_generator(5, case, STREAM_STRATEGY), settings,
                         log=lambda session, log=logs[1]: log, views=views)
            assert a == b
            assert logs[0].lines == logs[1].lines
    assert views.hits > 0 and views.misses > 0


def test_faults_known_is_each_units_cheapest_putting_right_and_no_strategy_costs_less():
    # The figure written out here from the fault tree alone (tests/bruteforce.evaluate): for each
    # unit, every subset of its failed repairable parts that puts the top event right, each repair
    # with its verification, or the escalation when cheaper or when a cause outside the model failed.
    from itertools import combinations

    from troubleshoot.advice.policy import escalation_charge
    from troubleshoot.model.demos import demo_path
    from troubleshoot.model.xmlfile import load_model

    model = load_model(demo_path("rooftop"))
    results = simulate(model, 30, 4, [("info-per-cost", None), ("checklist", None), ("likeliest", None)])
    engine = Engine(model)
    roots = list(model.hypotheses)
    charge = escalation_charge(model)
    for case in range(30):
        failed = draw_case(engine, 4, case).failed
        expected = charge
        if not any(r not in model.event_by_id for r in failed):
            parts = sorted(failed)
            states = np.array([[r in failed for r in roots]])
            for k in range(1, len(parts) + 1):
                for subset in combinations(parts, k):
                    if not bruteforce.evaluate(model, states, roots, set(subset))[model.top][0]:
                        cost = 0.0
                        for r in subset:
                            event = model.event_by_id[r]
                            verify = model.check_by_id[event.repair.verify].cost if event.repair.verify else 0.0
                            cost += event.repair.cost + verify + model.verification.cost
                        expected = min(expected, cost)
        for name, rows in results.items():
            assert rows[case].faults_known == pytest.approx(expected, abs=1e-9), (name, case)
            if rows[case].outcome != "left-failed":
                assert rows[case].cost >= expected - 1e-9, (name, case)
    summary = summarise("info-per-cost", results["info-per-cost"])
    assert summary.faults_known == tuple(r.faults_known for r in results["info-per-cost"])


def test_simulate_json_and_table_give_the_faults_known_mean(capsys):
    from troubleshoot.model.demos import demo_path
    from troubleshoot.model.xmlfile import load_model

    code, out, _ = _run_cli(capsys, ["simulate", "rooftop", "--cases", "12", "--seed", "5", "--strategy",
                                     "info-per-cost", "--workers", "1", "--json"])
    assert code == 0
    doc = json.loads(out)
    rows = simulate(load_model(demo_path("rooftop")), 12, 5, [("info-per-cost", None)])["info-per-cost"]
    assert doc["faults_known_mean_cost"] == pytest.approx(sum(r.faults_known for r in rows) / 12, rel=1e-12)
    assert doc["faults_known_mean_cost"] <= doc["strategies"]["info-per-cost"]["mean_cost"]
    code, out, _ = _run_cli(capsys, ["simulate", "rooftop", "--cases", "12", "--seed", "5", "--strategy",
                                     "info-per-cost", "--workers", "1"])
    assert f"faults known: {doc['faults_known_mean_cost']:.1f} min per unit, a lower bound" in out


def test_a_unit_in_doubt_is_tried_and_simulates_to_its_exact_expected_cost():
    # The fuse check, the fuse repair's own check, false-alarms one time in four here
    # (illustrative): after a right fuse repair it often reads "open" while the fan
    # works, and the tool tries the unit rather than repair on. The simulated mean
    # and the exact recursion (reference as above) must agree on that path too.
    from dataclasses import replace

    from troubleshoot.session import AWAITING_VERIFICATION, Session

    base = small_model()
    model = replace(base, checks=tuple(replace(c, false_alarm=0.25) if c.id == "fuse" else c for c in base.checks))
    session = Session(model)
    session.record_finding("fuse", "open")
    session.record_repair("e1")
    session.record_verification("open")
    assert session.status == AWAITING_VERIFICATION and session.state.verification.target == model.top

    settings = settings_for(model)
    results = simulate(model, 400, 5, [("info-per-cost", None)], settings, workers=1)
    summary = summarise("info-per-cost", results["info-per-cost"])
    exact = expected_cost(model, protocol_actor(model, make_strategy("info-per-cost"), settings, Engine(model)))
    low, high = summary.ci95
    assert low <= exact <= high, (summary.mean_cost, exact, summary.ci95)
    assert solve(model).expected_cost <= exact + 1e-9
