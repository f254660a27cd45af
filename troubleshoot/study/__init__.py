"""Studies over many sessions: simulation, baseline strategies, the exact optimal policy, the benchmark."""
