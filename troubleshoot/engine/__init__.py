"""The exact engine: the diagnostic network, the observation model, the join tree and inference. Pure."""
