"""Learning from session logs: the E-step against enumeration, the closed form on complete data, logs of
every kind of damage, the execution layer.

References named beside each check: the noisy-OR / noisy-MAX definitions (Pearl 1988; Díez 1993), with
their hidden per-cause variables enumerated here (Heckerman & Breese 1996); the Beta / Dirichlet
posterior mean (conjugate prior: e.g. Gelman et al., *Bayesian Data Analysis*, 3rd ed., section 2.4);
the OR gate's probability 1 - prod(1 - p) (NUREG-0492, chapter VI); scipy for the Beta quantiles.
"""

from __future__ import annotations

import itertools
import json
import os
import random
from dataclasses import replace

import numpy as np
import pytest

import bruteforce
from randommodels import random_model
from troubleshoot.cli import main
from troubleshoot.engine.inference import Finding
from troubleshoot.errors import ImpossibleFindings
from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, Repair
from troubleshoot.model.source import load_any_model
from troubleshoot.model.xmlfile import load_model, save_model
from troubleshoot.session.actions import Escalate
from troubleshoot.session.logfile import LOG_FORMAT_VERSION, new_session, read_log
from troubleshoot.study.execution import InProcess, LocalProcesses
from troubleshoot.study.learn import (
    Counts,
    FleetEngine,
    SessionData,
    beta_quantile,
    fold_actions,
    hidden_outcome_counts,
    learn,
    learn_sessions,
    log_files,
    model_sha256,
    parameters_of,
    session_counts,
)


# ---------------------------------------------------------------- the E-step against enumeration


def _brute_counts(model: Model, findings, repairs):
    """Expected counts by enumerating every root state and every hidden per-cause outcome.

    Written from the noisy-OR definition: each present cause i shows with probability d_i, the
    leak with probability f, independently; the check reads abnormal when anything shows.
    """
    post = bruteforce.posterior(model, findings, repairs)
    joint, values = post["joint"], post["values"]
    roots = np.array([post["marginals"][r] for r in model.hypotheses])
    checks = {}
    for f in findings:
        if f.target not in model.check_by_id:
            continue
        check = model.check_by_id[f.target]
        present = np.stack([values[f.epoch][c.target] for c in check.causes], axis=1)  # rows x causes
        p_y = bruteforce.likelihood(model, values, f)
        leak = np.zeros(2)
        causes = np.zeros((len(check.causes), 2))
        for hidden in itertools.product((0, 1), repeat=len(check.causes) + 1):
            leak_bit, bits = hidden[0], hidden[1:]
            # P(hidden | root state): a cause that is absent never shows.
            p = np.full(len(joint), check.false_alarm if leak_bit else 1.0 - check.false_alarm)
            for i, (cause, bit) in enumerate(zip(check.causes, bits)):
                p = p * np.where(present[:, i], cause.detection if bit else 1.0 - cause.detection,
                                 0.0 if bit else 1.0)
            if int(any(hidden)) != f.outcome:
                continue
            w = np.where(p_y > 0, joint * p / np.where(p_y > 0, p_y, 1.0), 0.0)
            leak[leak_bit] += w.sum()
            for i, bit in enumerate(bits):
                causes[i, bit] += (w * present[:, i]).sum()
        checks[(f.target, f.epoch)] = (leak, causes)
    return post["log_p"], roots, checks


def _sampled_session(model: Model, rng: random.Random):
    """A possible session: faults drawn given the complaint, checks answered from their noise, a repair."""
    post = bruteforce.posterior(model, [Finding(model.top, 1, 0)])
    if post["joint"] is None:
        return None
    row = rng.choices(range(len(post["joint"])), weights=post["joint"])[0]
    state = {r: bool(post["states"][row, i]) for i, r in enumerate(post["roots"])}
    findings = [Finding(model.top, 1, 0)]

    def answer(check, epoch, repaired):
        values = bruteforce.evaluate(model, post["states"][row:row + 1], post["roots"], set(repaired))
        p_normal = 1.0 - check.false_alarm
        for c in check.causes:
            if values[c.target][0]:
                p_normal *= 1.0 - c.detection
        return int(rng.random() >= p_normal)

    checks = list(model.checks)
    for check in rng.sample(checks, min(3, len(checks))):
        findings.append(Finding(check.id, answer(check, 0, ()), 0))
    failed = [r for r, v in state.items() if v]
    repairs = (rng.choice(failed if failed else list(model.hypotheses)),)
    values = bruteforce.evaluate(model, post["states"][row:row + 1], post["roots"], set(repairs))
    findings.append(Finding(model.top, int(values[model.top][0]), 1))
    check = rng.choice(checks)
    findings.append(Finding(check.id, answer(check, 1, repairs), 1))
    return findings, repairs


@pytest.mark.parametrize("seed", range(12))
def test_expected_counts_equal_enumeration(seed):
    # Source: enumeration of every root state and every hidden per-cause outcome (_brute_counts), to 1e-9.
    model = random_model(seed, n_events=5, n_gates=4, n_checks=4)
    rng = random.Random(seed)
    session = _sampled_session(model, rng)
    if session is None:
        pytest.skip("the drawn model cannot fail")
    findings, repairs = session
    if bruteforce.posterior(model, findings, repairs)["joint"] is None:
        pytest.skip("impossible findings drawn")
    params = parameters_of(model)
    counts = Counts.zeros(params)
    session_counts(FleetEngine(model), params, SessionData(tuple(findings), tuple(repairs)), 1.0, counts)
    counts.settle(params)
    log_p, roots, checks = _brute_counts(model, findings, repairs)
    assert counts.log_p == pytest.approx(log_p, abs=1e-9)
    np.testing.assert_allclose(counts.roots, roots, atol=1e-9)
    index = {c.id: j for j, c in enumerate(model.checks + model.symptoms)}
    expected_leaks = [np.zeros_like(a) for a in params.leaks]
    expected_causes = [np.zeros_like(a) for a in params.causes]
    for (check_id, _epoch), (leak, causes) in checks.items():
        expected_leaks[index[check_id]] += leak
        expected_causes[index[check_id]] += causes
    for got, want in zip(counts.leaks, expected_leaks):
        np.testing.assert_allclose(got, want, atol=1e-9)
    for got, want in zip(counts.causes, expected_causes):
        np.testing.assert_allclose(got, want, atol=1e-9)


def test_refitted_trees_equal_fresh_ones():
    # EM changes only the figures: a tree compiled under the model's figures and refitted to others gives
    # what a tree compiled under those figures gives (1e-12).
    model = load_any_model("rooftop")[0]
    shared: dict = {}
    first = FleetEngine(model, shared)
    data = SessionData((Finding(model.top, 1, 0), Finding("weak_airflow", 1, 0), Finding("filter_inspect", 0, 0),
                        Finding(model.top, 1, 1), Finding("blower_belt_inspect", 1, 1)), ("filters_clogged",))
    params = parameters_of(model)
    session_counts(first, params, data, 1.0, Counts.zeros(params))
    other = replace(params, roots=params.roots * 1.7,
                    causes=tuple(np.vstack([c[:, 0] + 0.5 * c[:, 1], 0.5 * c[:, 1]]).T for c in params.causes))
    from troubleshoot.study.learn import model_with

    changed = model_with(model, other)
    refitted, fresh = Counts.zeros(other), Counts.zeros(other)
    session_counts(FleetEngine(changed, shared), other, data, 1.0, refitted)
    session_counts(FleetEngine(changed), other, data, 1.0, fresh)
    refitted.settle(other)
    fresh.settle(other)
    assert refitted.log_p == pytest.approx(fresh.log_p, abs=1e-12)
    np.testing.assert_allclose(refitted.roots, fresh.roots, atol=1e-12)
    for a, b in zip(refitted.causes + refitted.leaks, fresh.causes + fresh.leaks):
        np.testing.assert_allclose(a, b, atol=1e-12)


def _rooftop_sessions(count: int, seed: int):
    """Sessions of simulated rooftop units (their findings and repairs), read back from their logs."""
    from troubleshoot.study.simulation import simulate

    model = load_any_model("rooftop")[0]
    logs: dict = {}
    simulate(model, count, seed, [("info-per-cost", None)], log_sink=lambda c, b: logs.__setitem__(c, b))
    return model, [fold_actions(model, [line.action for line in _parse(data).actions]) for _, data in sorted(logs.items())]


def _parse(data: bytes):
    from troubleshoot.session.logfile import parse_log

    return parse_log(data, "<simulated>")


def test_many_sessions_at_once_equal_one_at_a_time():
    # Reference: the engine's single propagation (itself checked against enumeration in test_propagation.py).
    # Rows sharing their repairs propagate as one array; every count, weighted by how many identical
    # sessions a row stands for, equals the weighted sum of the sessions' counts one at a time (1e-12).
    from troubleshoot.study.learn import rows_counts

    model, sessions = _rooftop_sessions(40, 21)
    params = parameters_of(model)
    engine = FleetEngine(model)
    prior = engine.propagate([Finding(model.top, 1, 0)]).root_marginals()
    by_repairs: dict = {}
    for i, data in enumerate(sessions):
        by_repairs.setdefault(data.repairs, []).append((data, float(1 + i % 4)))
    assert max(len(rows) for rows in by_repairs.values()) > 3
    together, alone = Counts.zeros(params), Counts.zeros(params)
    for rows in by_repairs.values():
        assert rows_counts(engine, params, rows, together, prior) == []
        for data, weight in rows:
            single = Counts.zeros(params)
            session_counts(FleetEngine(model), params, data, 1.0, single, prior)
            single.settle(params)
            alone.roots += weight * single.roots
            alone.log_p += weight * single.log_p
            alone.sessions += weight * single.sessions
            alone.root_informed += weight * single.root_informed
            alone.check_made += weight * single.check_made
            for mine, theirs in zip(alone.leaks + alone.causes, single.leaks + single.causes):
                mine += weight * theirs
    # Checks made after different repairs, or at different epochs, share their hidden counts' key when
    # their causes are present in the same states: fewer keys to settle than checks made apart.
    apart = {(d.repairs[:f.epoch], f.target, f.epoch, f.outcome) for rows in by_repairs.values() for d, _ in rows
             for f in d.findings if f.target in model.check_by_id}
    assert len(together.pending) < len(apart)
    together.settle(params)
    assert together.sessions == alone.sessions == sum(w for rows in by_repairs.values() for _, w in rows)
    assert together.log_p == pytest.approx(alone.log_p, rel=1e-12)
    np.testing.assert_allclose(together.roots, alone.roots, rtol=1e-12, atol=1e-12)
    np.testing.assert_array_equal(together.root_informed, alone.root_informed)
    np.testing.assert_array_equal(together.check_made, alone.check_made)
    for a, b in zip(together.leaks + together.causes, alone.leaks + alone.causes):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12)


def test_an_impossible_row_is_refused_and_the_others_counted():
    from troubleshoot.study.learn import model_with, rows_counts

    model = load_any_model("rooftop")[0]
    params = parameters_of(model)
    # No check ever reads abnormal under these figures (every detection and false alarm zero).
    zero = replace(params, leaks=tuple(np.where(np.arange(a.size) == 0, 1.0, 0.0) for a in params.leaks),
                   causes=tuple(np.where(np.arange(a.shape[1])[None, :] == 0, 1.0, 0.0) * np.ones_like(a)
                                for a in params.causes))
    silent = model_with(model, zero)
    top = model.top
    good = [(SessionData((Finding(top, 1, 0), Finding("filter_inspect", 0, 0), Finding("weak_airflow", 0, 0)), ()), 2.0),
            (SessionData((Finding(top, 1, 0), Finding("blower_belt_inspect", 0, 0)), ()), 1.0)]
    bad = SessionData((Finding(top, 1, 0), Finding("filter_inspect", 1, 0)), ())
    counts, plain = Counts.zeros(zero), Counts.zeros(zero)
    assert rows_counts(FleetEngine(silent), zero, [good[0], (bad, 5.0), good[1]], counts) == [1]
    for data, weight in good:
        session_counts(FleetEngine(silent), zero, data, weight, plain)
    assert counts.sessions == plain.sessions == 3.0
    assert counts.log_p == pytest.approx(plain.log_p, rel=1e-12)
    np.testing.assert_allclose(counts.roots, plain.roots, rtol=1e-12, atol=1e-15)
    with pytest.raises(ImpossibleFindings):
        session_counts(FleetEngine(silent), zero, bad, 1.0, Counts.zeros(zero))


def test_noisy_max_counts_equal_enumeration():
    # Three outcomes (noisy-MAX, Díez 1993): the check shows the largest outcome any present cause or the
    # leak produces. Enumerated over every hidden outcome of every cause, to 1e-12.
    rng = np.random.default_rng(5)
    K, n_causes, S = 3, 3, 8
    leak = rng.dirichlet([5, 1, 1])
    causes = rng.dirichlet([1, 1, 1], size=n_causes)
    present = rng.random((S, n_causes)) < 0.6
    weights = rng.random(S)
    weights /= weights.sum()
    for y in range(K):
        want_leak, want_causes = np.zeros(K), np.zeros((n_causes, K))
        p_y = np.zeros(S)
        terms = []
        for hidden in itertools.product(range(K), repeat=n_causes + 1):
            p = np.full(S, leak[hidden[0]])
            for i in range(n_causes):
                p = p * np.where(present[:, i], causes[i, hidden[i + 1]], float(hidden[i + 1] == 0))
            if max(hidden) == y:
                p_y += p
                terms.append((hidden, p))
        for hidden, p in terms:
            w = np.where(p_y > 0, weights * p / np.where(p_y > 0, p_y, 1.0), 0.0)
            want_leak[hidden[0]] += w.sum()
            for i in range(n_causes):
                want_causes[i, hidden[i + 1]] += (w * present[:, i]).sum()
        got_leak, got_causes = hidden_outcome_counts(present, weights, leak, causes, y)
        np.testing.assert_allclose(got_leak, want_leak, atol=1e-12)
        np.testing.assert_allclose(got_causes, want_causes, atol=1e-12)


# ---------------------------------------------------------------- complete data: the closed form


def _complete_model() -> Model:
    events = (BasicEvent("a", "part a", 0.02, repair=Repair("replace a", 10.0)),
              BasicEvent("b", "part b", 0.05, repair=Repair("replace b", 10.0)),
              BasicEvent("c", "part c", 0.01, repair=Repair("replace c", 10.0)))
    checks = (Check("ta", "test a", 5.0, ("ok", "bad"), (Cause("a", 0.8),), false_alarm=0.0),
              Check("tb", "test b", 5.0, ("ok", "bad"), (Cause("b", 0.7),), false_alarm=0.0),
              Check("tc", "test c", 5.0, ("ok", "bad"), (Cause("c", 0.9),), false_alarm=0.1))
    return Model("complete", "top", (Gate("top", "unit fails", "or", ("a", "b", "c")),), events, checks)


def test_complete_data_gives_the_beta_posterior_mean():
    # Every session has one fault, repaired and confirmed by "the unit works": in an OR tree that fixes
    # every root's state, and with no false alarm on ta/tb (tc only made when c is not at fault) every
    # check's hidden outcome is known. The EM estimate is then the conjugate posterior mean, written out.
    model = _complete_model()
    rng = random.Random(3)
    sessions, faults = [], []
    det = {"ta": 0.6, "tb": 0.5, "tc": 0.9}
    shows = {"ta": [0, 0], "tb": [0, 0], "tc": [0, 0]}  # [trials, abnormal]
    for s in range(300):
        fault = rng.choice(["a", "a", "b", "b", "b", "c"])
        actions = []
        for check in ("ta", "tb", "tc"):
            if check == "tc" and fault == "c":
                continue
            cause_present = check[1] == fault
            p_bad = det[check] if cause_present else (0.2 if check == "tc" else 0.0)
            bad = rng.random() < p_bad
            if cause_present or check == "tc":
                shows[check][0] += 1
                shows[check][1] += bad
            actions.append({"action": "finding", "check": check, "outcome": "bad" if bad else "ok"})
        actions += [{"action": "repair", "event": fault}, {"action": "verify", "outcome": "works"}]
        sessions.append((f"s{s}", fold_actions(model, actions)))
        faults.append(fault)
    w, exposure = 7.0, 4000.0
    result = learn_sessions(model, sessions, prior_weight=w, exposure=exposure)
    p = {"a": 0.02, "b": 0.05, "c": 0.01}
    p_top = 1.0 - (1 - 0.02) * (1 - 0.05) * (1 - 0.01)  # OR gate of independent events (NUREG-0492)
    learned = dict(zip(model.hypotheses, result.params_after.roots))
    for r in "abc":
        alpha, beta = w * p[r] / p_top, w * (1 - p[r]) / p_top  # the prior, worth w sessions
        k = faults.count(r)
        assert learned[r] == pytest.approx((alpha + k) / (alpha + beta + exposure), rel=1e-12, abs=1e-15)
    dets = {c.id: c.causes[0].detection for c in model.checks}
    after = {c.id: c for c in result.learned.checks}
    for check in ("ta", "tb"):
        trials, bad = shows[check]
        want = (w * dets[check] + bad) / (w + trials)
        assert after[check].causes[0].detection == pytest.approx(want, rel=1e-12)
        assert after[check].false_alarm == 0.0  # a zero figure stays zero
    trials, bad = shows["tc"]
    assert after["tc"].false_alarm == pytest.approx((w * 0.1 + bad) / (w + trials), rel=1e-12)
    assert after["tc"].causes[0].detection == pytest.approx(0.9, rel=1e-12)  # never informed: the prior


def test_without_exposure_the_top_probability_is_kept():
    model = _complete_model()
    sessions = [(f"s{i}", fold_actions(model, [{"action": "repair", "event": "ab"[i % 2]},
                                                {"action": "verify", "outcome": "works"}])) for i in range(50)]
    result = learn_sessions(model, sessions)
    assert result.p_top_after == pytest.approx(result.p_top_before, rel=1e-9)
    learned = dict(zip(model.hypotheses, result.params_after.roots))
    assert learned["c"] < 0.01 < learned["a"]  # never the fault: less likely; often: more


# ---------------------------------------------------------------- logs


def _log_session(model_path, path, actions):
    session = new_session(model_path, path)
    for action in actions:
        session.apply(action)
    session.close()
    return session


def test_fold_follows_the_session(tmp_path):
    # Undo, retract, correct, the verifying check and the unit's verification: what the log leaves
    # standing is what the Session itself holds.
    model_path = str(load_any_model("rooftop")[0].source)
    actions = [
        {"action": "finding", "check": "weak_airflow", "outcome": "airflow weak"},
        {"action": "finding", "check": "filter_inspect", "outcome": "filters clean"},
        {"action": "undo"},
        {"action": "finding", "check": "blower_belt_inspect", "outcome": "belt intact and tight"},
        {"action": "correct", "check": "weak_airflow", "outcome": "airflow normal"},
        {"action": "finding", "check": "refrigerant_pressures", "outcome": "pressures abnormal"},
        {"action": "retract", "check": "blower_belt_inspect"},
        {"action": "note", "text": "oil stain at the service valve"},
        {"action": "repair", "event": "refrigerant_leak"},
        {"action": "finding", "check": "refrigerant_pressures", "outcome": "pressures normal"},
        {"action": "verify", "outcome": "cools"},
    ]
    session = _log_session(model_path, tmp_path / "s.jsonl", actions)
    contents = read_log(tmp_path / "s.jsonl")
    data = fold_actions(session.model, [line.action for line in contents.actions])
    assert data.findings == session.findings
    assert data.repairs == session.repairs
    assert data.confirmed == "refrigerant_leak"


def test_fold_follows_the_session_when_the_unit_in_doubt_is_tried(tmp_path):
    # The leak repaired, its own check still abnormal: the unit may work, and the next
    # verification is the unit's (advised or not); the learner reads what the Session holds.
    model_path = str(load_any_model("rooftop")[0].source)
    actions = [
        {"action": "finding", "check": "leak_search", "outcome": "leak found"},
        {"action": "repair", "event": "refrigerant_leak"},
        {"action": "finding", "check": "refrigerant_pressures", "outcome": "pressures abnormal"},
        {"action": "verify", "outcome": "cools"},
    ]
    session = _log_session(model_path, tmp_path / "s.jsonl", actions)
    assert session.status == "confirmed"
    data = fold_actions(session.model, [line.action for line in read_log(tmp_path / "s.jsonl").actions])
    assert data.findings == session.findings
    assert data.findings[-1] == Finding(session.model.top, 0, 1)
    assert data.confirmed == "refrigerant_leak"


def test_simulated_logs_are_real_session_logs(tmp_path, capsys):
    # simulate --logs writes logs a real session would: they replay to 1e-9, and what the learner reads
    # from each is what the replayed session holds.
    from troubleshoot.session.replay import replay_log

    folder = tmp_path / "fleet"
    assert main(["simulate", "rooftop", "--cases", "6", "--seed", "4", "--strategy", "info-per-cost",
                 "--workers", "1", "--logs", str(folder), "--json"]) == 0
    capsys.readouterr()
    logs = sorted(folder.glob("case-*.jsonl"))
    assert [p.name for p in logs] == [f"case-{i:06d}.jsonl" for i in range(1, 7)]
    model, _ = load_any_model("rooftop")
    for path in logs:
        report = replay_log(path)
        assert report.confirmed, report.messages
        data = fold_actions(model, [line.action for line in read_log(path).actions])
        assert data.findings == report.session.findings
        assert data.repairs == report.session.repairs
    assert main(["simulate", "rooftop", "--cases", "6", "--seed", "4", "--logs", str(folder)]) == 2
    assert "already exists" in capsys.readouterr().err


def test_simulated_hand_overs_are_logged_as_escalations_and_learned_as_such(tmp_path, capsys):
    # A simulated unit that is handed over ends its log with an escalate action, as a technician's
    # would; the learner counts exactly those sessions, and the simulated costs do not change.
    folder = tmp_path / "fleet"
    assert main(["simulate", "rooftop", "--cases", "40", "--seed", "3", "--strategy", "info-per-cost",
                 "--workers", "1", "--logs", str(folder), "--json"]) == 0
    outcomes = json.loads(capsys.readouterr().out)["strategies"]["info-per-cost"]["outcomes"]
    handed_over = outcomes["escalated"] + outcomes["capped"] + outcomes["engine-refused"]
    assert handed_over > 0, "seed 3 has hand-overs among its 40 units"
    ends = [read_log(path).actions[-1].action for path in sorted(folder.glob("case-*.jsonl"))]
    assert sum(1 for a in ends if isinstance(a, Escalate)) == handed_over
    out = tmp_path / "learned.xml"
    assert main(["learn", "rooftop", str(folder), "-o", str(out), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["escalated_sessions"] == handed_over


def test_bad_logs_are_counted_and_named(tmp_path, capsys):
    model, _ = load_any_model("rooftop")
    good = tmp_path / "logs" / "good.jsonl"
    good.parent.mkdir()
    actions = [{"action": "finding", "check": "filter_inspect", "outcome": "filters clogged"},
               {"action": "repair", "event": "filters_clogged"}, {"action": "verify", "outcome": "cools"}]
    _log_session(str(model.source), good, actions)
    text = good.read_text()
    lines = text.splitlines(keepends=True)
    (tmp_path / "logs" / "torn.jsonl").write_text("".join(lines[:-1]) + lines[-1][:40])
    version = f'"format_version": {LOG_FORMAT_VERSION}'
    assert version in text
    (tmp_path / "logs" / "version.jsonl").write_text(text.replace(version, '"format_version": 99'))
    (tmp_path / "logs" / "edited.jsonl").write_text(text.replace('"outcome": "filters clogged"',
                                                                 '"outcome": "filters clean"'))
    (tmp_path / "logs" / "junk.jsonl").write_text("not a log\n")
    other = tmp_path / "other.xml"
    save_model(replace(model, name="another model"), other)
    _log_session(str(other), tmp_path / "logs" / "other.jsonl", actions)
    out = tmp_path / "learned.xml"
    report = tmp_path / "report.md"
    status = main(["learn", "rooftop", str(tmp_path / "logs"), "-o", str(out), "--report", str(report), "--json"])
    assert status == 0
    data = json.loads(capsys.readouterr().out)
    kinds = {os.path.basename(p["path"]): p["kind"] for p in data["skipped"]}
    assert kinds == {"torn.jsonl": "torn", "version.jsonl": "other-version", "edited.jsonl": "edited",
                     "junk.jsonl": "damaged", "other.jsonl": "other-model"}
    assert data["sessions"] == 2  # the good log and the torn one's whole lines
    text = report.read_text()
    for name in kinds:
        assert name in text
    assert main(["check", str(out)]) == 0
    learned = load_model(out)
    assert "2 session logs" in learned.description and model_sha256(model.source) in learned.description


def test_learn_refuses_what_it_cannot_use(tmp_path, capsys):
    assert main(["learn", "rooftop", str(tmp_path / "nowhere"), "-o", str(tmp_path / "x.xml")]) == 2
    assert "no such file or folder" in capsys.readouterr().err
    (tmp_path / "junk.jsonl").write_text("{}\n")
    assert main(["learn", "rooftop", str(tmp_path), "-o", str(tmp_path / "x.xml")]) == 2
    err = capsys.readouterr().err
    assert "none of the 1 log(s)" in err and "Traceback" not in err
    assert not (tmp_path / "x.xml").exists()


def test_beta_quantiles_match_scipy():
    # Reference library: scipy.stats.beta.ppf.
    stats = pytest.importorskip("scipy.stats")
    for a, b in [(0.5, 0.5), (2.0, 30.0), (150.3, 12.7), (0.02, 5.0), (4000.0, 9.0)]:
        for q in (0.05, 0.5, 0.95):
            assert beta_quantile(q, a, b) == pytest.approx(float(stats.beta.ppf(q, a, b)), abs=1e-9)


# ---------------------------------------------------------------- the execution layer


def _die_once(item, marker):
    # Kills its own worker process the first time it meets item 3: the piece must be run again.
    if item == 3 and not os.path.exists(marker):
        open(marker, "w").close()
        os._exit(1)
    return item * item


def test_local_processes_redo_the_work_of_a_dead_worker(tmp_path):
    marker = str(tmp_path / "died")
    with LocalProcesses(2) as executor:
        seen = []
        result = executor.map(_die_once, list(range(8)), marker, on_result=lambda i, r: seen.append(i) or r)
    assert os.path.exists(marker)
    assert result == [i * i for i in range(8)]
    assert sorted(seen) == list(range(8))  # every piece taken exactly once: nothing counted twice


def test_same_numbers_in_process_and_in_local_processes(tmp_path, monkeypatch):
    from troubleshoot.study import learn as learn_module
    from troubleshoot.study.simulation import simulate

    # Small pieces, so the E-step and the reading are cut into several, summed in their order.
    monkeypatch.setattr(learn_module, "ROWS_PER_PIECE", 5)
    monkeypatch.setattr(learn_module, "LOGS_PER_PIECE", 7)
    model, _ = load_any_model("rooftop")
    logs: dict = {}
    simulate(model, 40, 3, [("info-per-cost", None)], log_sink=lambda c, b: logs.__setitem__(c, b))
    for case, data in logs.items():
        (tmp_path / f"case-{case:03d}.jsonl").write_bytes(data)
    paths = log_files([tmp_path])
    sha = model_sha256(model.source)
    one = learn(model, sha, paths, executor=InProcess())
    with LocalProcesses(2) as executor:
        two = learn(model, sha, paths, executor=executor)
    assert np.array_equal(one.params_after.flat(), two.params_after.flat())
    assert one.log_likelihood == two.log_likelihood
    assert [f.id for f in one.figures] == [f.id for f in two.figures]


def test_packed_values_are_decoded_once_per_process_and_old_tables_let_go(monkeypatch):
    # What EM sends to every piece is pickled once where it is made; each process decodes a key once.
    import pickle

    from troubleshoot.study import learn as learn_module
    from troubleshoot.study.learn import Packed, unpacked

    monkeypatch.setattr(learn_module, "_UNPACKED", {})
    rows = Packed("rows", "table-1", [1.5, ("x", 2)])
    first = unpacked(rows)
    assert first == [1.5, ("x", 2)]  # the pickle module's round trip
    assert unpacked(pickle.loads(pickle.dumps(rows))) is first  # sent again: not decoded again
    assert unpacked(Packed("rows", "table-1", [1.5, ("x", 3)])) == [1.5, ("x", 3)]  # other bytes, other key
    unpacked(Packed("rows", "table-2", 1))
    unpacked(Packed("rows", "table-3", 2))
    again = unpacked(rows)
    assert again == first and again is not first  # only the latest tables are kept
