"""Seeded hard fault trees: many repeated events shared across distant gates.

Plant fault trees share their support systems (power buses, cooling water,
instrument air, control cabinets) between front-line systems that sit far
apart in the tree. Each shared event is an input of many gates in different
subsystems, so the moral graph of the diagnostic network is dense and its
join tree grows wide (width over 30 from a few hundred basic events on),
while the gate logic itself stays simple: most paths from a shared event to
the top pass through OR gates only, and only a few cross a redundancy (AND
or voting) gate. That is the case where the determinism of the gates pays.

The structure: front-line systems under an OR top; each system is a
redundancy of trains (AND, or 2-of-3 voting); each train an OR of its own
components, of small local sub-gates, and of a few support events; support
events come from a shared pool and are read by gates chosen anywhere in the
tree. Probabilities and costs are illustrative. Same arguments, same model.
"""

from __future__ import annotations

import random

from troubleshoot.model import BasicEvent, Cause, Check, Gate, Model, Repair, Verification


def hard_model(basic_events: int, seed: int = 0, shared_share: float = 0.06, uses: int = 12,
               redundant_uses: float = 0.08, check_rate: float = 0.5) -> Model:
    """A plant-like fault tree with about ``basic_events`` basic events and a wide join tree.

    Parameters
    ----------
    basic_events : int
        Number of basic events (at least 40).
    seed : int
        Seed of the random generator.
    shared_share : float
        Share of the basic events that are shared support events.
    uses : int
        Average number of gates reading each shared event, chosen anywhere in the tree.
    redundant_uses : float
        Share of those uses on the OR gate of a train under a redundancy gate,
        the rest on subsystem OR gates right under the top's OR chain.
    check_rate : float
        Share of gates with a check on them.

    Returns
    -------
    Model
    """
    if basic_events < 40:
        raise ValueError("a hard tree needs at least 40 basic events")
    rng = random.Random(seed)
    probabilities = [1e-4, 3e-4, 1e-3, 3e-3, 1e-2]
    costs = [10, 15, 30, 45, 60, 120]
    n_shared = max(4, int(basic_events * shared_share))
    n_local = basic_events - n_shared
    events = [BasicEvent(f"be{i}", f"component {i} failed", rng.choice(probabilities),
                         repair=Repair(f"replace component {i}", float(rng.choice(costs))))
              for i in range(n_local)]
    shared = [BasicEvent(f"sup{i}", f"support {i} lost (shared)", rng.choice(probabilities),
                         repair=Repair(f"restore support {i}", float(rng.choice(costs))))
              for i in range(n_shared)]
    gates: list[Gate] = []
    local = [e.id for e in events]
    trains: list[list[str]] = []  # the inputs of each train's OR gate, filled before it is made
    systems: list[tuple[str, list[int]]] = []
    sub_count = 0
    while local:
        kind = rng.choice(["and", "and", "atleast"])
        n_trains = 3 if kind == "atleast" else rng.choice([2, 2, 3])
        members = []
        for _ in range(n_trains):
            take = min(len(local), rng.randint(2, 5))
            inputs = [local.pop() for _ in range(take)]
            if len(inputs) >= 3 and rng.random() < 0.5:  # a small local sub-gate
                a, b = inputs.pop(), inputs.pop()
                sub = Gate(f"s{sub_count}", f"part {sub_count} lost", rng.choice(["and", "or"]), (a, b))
                sub_count += 1
                gates.append(sub)
                inputs.append(sub.id)
            if inputs:
                trains.append(inputs)
                members.append(len(trains) - 1)
        if members:
            systems.append((kind, members))
    # Shared events: each read by several gates chosen anywhere.
    n_trains = len(trains)
    or_uses: list[list[str]] = [[] for _ in systems]
    for ev in shared:
        for _ in range(max(2, int(rng.expovariate(1.0 / uses)) + 1)):
            if rng.random() < redundant_uses:
                t = rng.randrange(n_trains)
                if ev.id not in trains[t]:
                    trains[t].append(ev.id)
            else:
                s = rng.randrange(len(systems))
                if ev.id not in or_uses[s]:
                    or_uses[s].append(ev.id)
    train_ids = []
    for t, inputs in enumerate(trains):
        if len(inputs) == 1:
            train_ids.append(inputs[0])
            continue
        gate = Gate(f"t{t}", f"train {t} lost", "or", tuple(inputs), unlisted=1e-4 if rng.random() < 0.1 else None)
        gates.append(gate)
        train_ids.append(gate.id)
    system_ids = []
    for s, (kind, members) in enumerate(systems):
        ins = tuple(train_ids[m] for m in members)
        if len(ins) == 1:
            core = ins[0]
        elif kind == "atleast" and len(ins) == 3:
            core = f"r{s}"
            gates.append(Gate(core, f"system {s}: 2 of 3 trains lost", "atleast", ins, k=2))
        else:
            core = f"r{s}"
            gates.append(Gate(core, f"system {s}: every train lost", "and", ins))
        if or_uses[s]:
            gate = Gate(f"f{s}", f"function {s} lost", "or", (core, *or_uses[s]))
            gates.append(gate)
            system_ids.append(gate.id)
        else:
            system_ids.append(core)
    # The top: an OR over the functions, as a balanced tree of OR gates of four.
    level = system_ids
    depth = 0
    while len(level) > 1:
        nxt = []
        for i in range(0, len(level), 4):
            chunk = level[i:i + 4]
            if len(chunk) == 1:
                nxt.append(chunk[0])
                continue
            gate = Gate(f"o{depth}_{i // 4}", f"plant group {depth}.{i // 4} lost", "or", tuple(chunk))
            gates.append(gate)
            nxt.append(gate.id)
        level = nxt
        depth += 1
    top = level[0]
    if top not in {g.id for g in gates}:
        gates.append(Gate("top", "plant lost", "or", (top,)))
        top = "top"
    used: set[str] = set()
    for g in gates:
        used.update(g.inputs)
    unused = [e for e in shared if e.id not in used]
    if unused:  # a support nobody read: put it under the top, so every event counts
        top_gate = next(g for g in gates if g.id == top)
        gates[gates.index(top_gate)] = Gate(top_gate.id, top_gate.label, top_gate.kind,
                                            top_gate.inputs + tuple(e.id for e in unused),
                                            k=top_gate.k, unlisted=top_gate.unlisted)
    checks = []
    for gate in gates:
        if rng.random() < check_rate:
            causes = [Cause(gate.id, rng.choice([0.9, 0.95, 0.99]))]
            if rng.random() < 0.3:
                causes.append(Cause(rng.choice(gate.inputs), rng.choice([0.5, 0.7])))
            checks.append(Check(f"k_{gate.id}", f"test {gate.label}", float(rng.choice([2, 5, 10, 20, 30])),
                                ("normal", "abnormal"), tuple(causes), false_alarm=rng.choice([0.0, 0.01, 0.02])))
    for ev in shared:
        if rng.random() < 0.5:
            checks.append(Check(f"k_{ev.id}", f"inspect support {ev.id[3:]}", float(rng.choice([5, 10, 15])),
                                ("normal", "abnormal"), (Cause(ev.id, 0.95),), false_alarm=0.01))
    return Model(
        name=f"hard-{basic_events}-seed{seed}", top=top, gates=tuple(gates), basic_events=tuple(events + shared),
        checks=tuple(checks), equipment="generated plant with shared supports (illustrative)", cost_unit="min",
        description="Generated for benchmarking wide join trees; probabilities and costs are illustrative.",
        top_label="plant lost", verification=Verification("run the plant and confirm it works", 10.0),
    )


def many_cut_sets_model(basic_events: int, seed: int = 0, shared_share: float = 0.05) -> Model:
    """A fault tree with redundancy nested in redundancy: few events, a vast number of minimal cut sets.

    Each function is an OR of components and of redundant pairs or triples
    of trains, each train again an OR of components and smaller
    redundancies, three levels deep; shared support events are read by
    trains anywhere. The minimal cut sets multiply at every redundancy: from
    about 1,000 basic events on there are more than 10^8 of them, while the
    decision diagrams stay small. Probabilities are illustrative.

    Parameters
    ----------
    basic_events : int
        Number of basic events (at least 100).
    seed : int
    shared_share : float
        Share of the basic events that are shared support events.
    """
    if basic_events < 100:
        raise ValueError("this tree needs at least 100 basic events")
    rng = random.Random(seed)
    n_shared = max(4, int(basic_events * shared_share))
    shared = [BasicEvent(f"sup{i}", f"support {i} lost (shared)", rng.choice([1e-4, 1e-3, 3e-3]),
                         repair=Repair(f"restore support {i}", 30.0)) for i in range(n_shared)]
    events: list[BasicEvent] = []
    gates: list[Gate] = []

    def component() -> str:
        i = len(events)
        events.append(BasicEvent(f"be{i}", f"component {i} failed", rng.choice([1e-3, 3e-3, 1e-2, 3e-2]),
                                 repair=Repair(f"replace component {i}", float(rng.choice([10, 30, 60])))))
        return events[-1].id

    def train(depth: int) -> str:
        inputs = [component() for _ in range(rng.randint(3, 6))]
        if depth > 0:
            for _ in range(rng.randint(1, 2)):
                inputs.append(redundancy(depth - 1))
        if depth == 2 and rng.random() < 0.3:  # supports feed the outer trains only
            inputs.append(rng.choice(shared).id)
        gate = Gate(f"t{len(gates)}", f"train {len(gates)} lost", "or", tuple(dict.fromkeys(inputs)))
        gates.append(gate)
        return gate.id

    def redundancy(depth: int) -> str:
        k = rng.choice([2, 2, 3])
        ins = tuple(train(depth) for _ in range(k))
        gid = f"r{len(gates)}"
        if k == 3:
            gates.append(Gate(gid, f"redundancy {gid}: 2 of 3 trains lost", "atleast", ins, k=2))
        else:
            gates.append(Gate(gid, f"redundancy {gid}: both trains lost", "and", ins))
        return gid

    functions = []
    while len(events) < basic_events - n_shared:
        functions.append(redundancy(2))
    top = Gate("top", "plant lost", "or", tuple(functions) + tuple(e.id for e in shared[:2]))
    gates.append(top)
    return Model(name=f"many-cut-sets-{basic_events}-seed{seed}", top="top", gates=tuple(gates),
                 basic_events=tuple(events + shared), equipment="generated plant (illustrative)",
                 description="Generated for analysis benchmarks; probabilities are illustrative.",
                 top_label="plant lost")
