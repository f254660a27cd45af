"""Why a check is recommended: ``suggest --json``'s ``why`` against ``suggest`` run again.

On every scripted scenario (scenarios/*.json), at every step where a check
is recommended, ``why.p_if[o]`` of each suspect listed must be the posterior
that ``suggest`` run again prints for that suspect when the finding
(check = o) is added to the same findings and repairs, to 1e-9. The second
run is ``suggest``'s own code path (its step parser and JSON document) on a
separately compiled engine, so no propagation is shared with the first. The expected costs are checked against their definition
(Heckerman, Breese & Rommelse 1995, the myopic rule): finishing now F(e) is
the policy's cost of finishing without checks, and checking first is the
check's cost plus sum_o P(o | e) F(e + o), with the outcome probabilities
that ``suggest`` prints.
"""

from __future__ import annotations

import json

import pytest

from test_scenarios import SCENARIOS, scenario_model
from troubleshoot.advice.diagnosis import suspects
from troubleshoot.advice.policy import cost_of_repair_then, finish_plan
from troubleshoot.cli import main
from troubleshoot.commands.suggest import apply_steps, suggestion_json
from troubleshoot.engine.inference import Engine
from troubleshoot.session import AMBIGUITY, AWAITING_VERIFICATION, DIAGNOSING, ISOLATED, Session, settings_for

TOL = 1e-9


class Suggest:
    """``troubleshoot suggest MODEL --finding ... --repaired ... --json`` on one compiled engine."""

    def __init__(self, name: str, model, settings) -> None:
        self.name, self.model, self.settings = name, model, settings
        self.engine = Engine(model)

    def __call__(self, steps: list[tuple[str, str]]) -> dict:
        session = Session(self.model, self.settings, engine=self.engine)
        apply_steps(session, steps)
        return json.loads(json.dumps(suggestion_json(session, self.name), allow_nan=False))

    def suspects(self, steps: list[tuple[str, str]]) -> dict[str, float]:
        """Only the ``suspects`` of the document (its ``p`` per id), without the other figures."""
        session = Session(self.model, self.settings, engine=self.engine)
        apply_steps(session, steps)
        return {s.id: s.p for s in session.state.suspects}


def test_suggest_command_prints_why(capsys):
    assert main(["suggest", "rooftop", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["why"]["check"] == doc["next_check"]
    assert set(doc["why"]) == {"check", "text", "suspects", "cost_check_first", "cost_repair_now"}
    assert all(set(s) == {"id", "label", "p_now", "p_if"} for s in doc["why"]["suspects"])


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_why_p_if_is_suggest_run_again_with_the_finding(path):
    doc = json.loads(path.read_text(encoding="utf-8"))
    model = scenario_model(doc)
    settings = settings_for(model, **doc.get("settings", {}))
    session = Session(model, settings)
    suggest = Suggest(doc["model"], model, settings)
    steps: list[tuple[str, str]] = []
    verifications = list(doc.get("verifications", []))
    explained = runs = 0
    for _ in range(200):
        state = session.state
        if state.status == DIAGNOSING:
            now = suggest(steps)
            why = now["why"]
            assert why is not None and why["check"] == now["next_check"] == state.next_check.check
            check = model.check_by_id[why["check"]]
            assert len(why["suspects"]) >= min(3, sum(1 for s in now["suspects"] if not s["repaired"]))
            assert why["text"]
            p_now = {s["id"]: s["p"] for s in now["suspects"]}
            after = {}
            for outcome in check.outcomes:
                if now["ranking"][[r["id"] for r in now["ranking"]].index(check.id)]["outcomes"][outcome] <= 0:
                    continue
                after[outcome] = suggest.suspects(steps + [("finding", f"{check.id}={outcome}")])
            for s in why["suspects"]:
                assert abs(s["p_now"] - p_now[s["id"]]) <= TOL
                for outcome, again in after.items():
                    assert abs(s["p_if"][outcome] - again[s["id"]]) <= TOL, (path.name, check.id, outcome, s["id"])
            # The costs weighed, from their definition (myopic: check, then finish): finishing is
            # the least of the repair plan and repairing its first suspect, then diagnosing again.
            def plan_only(posterior):
                return finish_plan(model, suspects(posterior), settings).best

            def finish(posterior):
                plan = finish_plan(model, suspects(posterior), settings)
                if not plan.sequence or not settings.value_after_repair:
                    return plan.best
                return min(plan.best, cost_of_repair_then(session.engine, posterior, plan.sequence[0], settings))

            assert abs(why["cost_repair_now"] - finish(session.posterior)) <= 1e-9 * max(1.0, why["cost_repair_now"])
            p_out = now["ranking"][[r["id"] for r in now["ranking"]].index(check.id)]["outcomes"]
            first = check.cost + sum(
                p_out[o] * finish(
                    session.engine.propagate(session.findings + (_finding(session, check, o),), session.repairs))
                for o in after)
            kind = now["decision"]["reasons"][0]["kind"]
            if kind == "run-pays":
                # Chosen for a run of checks: no single check pays, and the run's cost is its definition
                # (the run finishes by the repair plan).
                assert first >= why["cost_repair_now"] - 1e-9 * max(1.0, first)
                first = _run_cost(suggest, steps, model, settings, plan_only)
                runs += 1
            if kind == "check-before-escalating":
                # Weighed against the price: after the check, the least of escalating and finishing.
                price = model.escalation.cost
                assert why["cost_repair_now"] == pytest.approx(price)
                first = check.cost + sum(
                    p_out[o] * min(price, finish(
                        session.engine.propagate(session.findings + (_finding(session, check, o),), session.repairs)))
                    for o in after)
            assert abs(why["cost_check_first"] - first) <= 1e-9 * max(1.0, first)
            explained += 1
            outcome = doc["answers"][session.epoch][check.id]
            session.record_finding(check.id, outcome)
            steps.append(("finding", f"{check.id}={outcome}"))
        elif state.status in (ISOLATED, AMBIGUITY):
            assert suggest(steps)["why"] is None  # no check recommended
            target = state.isolated.id if state.isolated else state.repair_order[0].id
            session.record_repair(target)
            steps.append(("repaired", target))
        elif state.status == AWAITING_VERIFICATION:
            outcome = verifications.pop(0)
            request = state.verification
            session.record_verification(outcome)
            steps.append(("finding", f"{request.target}={outcome}"))
        else:
            break
    assert session.status == "confirmed" and explained > 0


def _run_cost(suggest, steps, model, settings, finish) -> float:
    """Least expected cost over the prefixes of the run, from its definition, with suggest run again.

    The run: the first check of suggest's ranking giving at least min_bits
    bits; while a check reads normal, the next one ranked on the findings
    so far; at an abnormal reading or after the last check, finish (F).
    Cost of a prefix of k checks: sum_j r_j (c_j + sum_(o abnormal) P(o) F(e + normal... + o))
    + r_(k+1) F(e + k normals), r_j = P(the first j - 1 read normal).
    """
    engine = Engine(model)

    def finish_after(chain):
        session = Session(model, settings, engine=engine)
        apply_steps(session, chain)
        return finish(session.posterior)

    best, spent, reach, chain = finish_after(steps), 0.0, 1.0, list(steps)
    for _ in range(settings.value_run):
        rows = [r for r in suggest(chain)["ranking"] if r["bits"] >= settings.min_bits]
        if not rows:
            break
        row = rows[0]
        names = list(row["outcomes"])
        spent += reach * row["cost"]
        for name in names[1:]:
            if row["outcomes"][name] > 0:
                spent += reach * row["outcomes"][name] * finish_after(chain + [("finding", f"{row['id']}={name}")])
        p_normal = row["outcomes"][names[0]]
        chain = chain + [("finding", f"{row['id']}={names[0]}")]
        best = min(best, spent + (reach * p_normal * finish_after(chain) if p_normal > 0 else 0.0))
        if p_normal <= 0:
            break
        reach *= p_normal
    return best


def _finding(session, check, outcome):
    from troubleshoot.engine.inference import Finding

    return Finding(check.id, check.outcomes.index(outcome), session.epoch)


def plain_shifts(engine, posterior, row):
    """Every unrepaired suspect, p now and p after each outcome (one propagation each, written out), sorted by
    the spread of p_if (largest first), then p now (largest first), then id."""
    from troubleshoot.engine.inference import Finding
    from troubleshoot.errors import ImpossibleFindings

    model = posterior.model
    after = []
    for outcome in range(len(row.outcomes)):
        try:
            post = engine.propagate(tuple(posterior.findings) + (Finding(row.check, outcome, posterior.epoch),),
                                    posterior.repairs)
            after.append(dict(zip(model.hypotheses, post.root_marginals().tolist())))
        except ImpossibleFindings:
            after.append(None)
    rows = []
    for r, p in zip(model.hypotheses, posterior.root_marginals().tolist()):
        if r in posterior.repairs:
            continue
        p_if = tuple((name, None if a is None else a[r]) for name, a in zip(row.outcomes, after))
        values = [v for _, v in p_if if v is not None]
        spread = max(values) - min(values) if values else 0.0
        rows.append((-spread, -p, r, model.label_of(r), p, p_if))
    return [(r, label, p, p_if) for _, _, r, label, p, p_if in sorted(rows)]


@pytest.mark.parametrize("demo", ["booster", "rooftop"])
def test_suspect_shifts_are_the_plain_ones(demo):
    # Source: the definition above (p_if by one propagation per outcome; the
    # order by spread, p now, id), written out; the figures must agree exactly.
    # Three steps: the complaint, an abnormal reading, and a repair.
    from test_scenarios import load_demo
    from troubleshoot.advice.explain import suspect_shifts

    model = load_demo(demo)
    engine = Engine(model)
    session = Session(model, settings_for(model), engine=engine)
    for step in range(3):
        row = session.ranking.best
        assert row is not None
        want = plain_shifts(engine, session.posterior, row)
        got = [(s.id, s.label, s.p_now, s.p_if) for s in suspect_shifts(engine, session.posterior, row)]
        assert got == want
        assert [(s.id, s.p_if) for s in suspect_shifts(engine, session.posterior, row, limit=4)] == \
            [(r, p_if) for r, _, _, p_if in want[:4]]
        assert [(s.id, s.p_if) for s in suspect_shifts(engine, session.posterior, row, now=session.suspects)] == \
            [(r, p_if) for r, _, _, p_if in want]
        if step == 0:
            session.record_finding(row.check, 1)
        else:
            session.record_repair(next(s.id for s in session.suspects if not s.repaired and s.id in model.event_by_id))
