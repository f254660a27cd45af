"""Shared test set-up: where the public benchmark trees are.

The three public Aralia trees live in ``../shared/benchmarks/aralia/`` beside
the repository (``TROUBLESHOOT_SHARED`` points elsewhere). Tests that need
them skip with a reason when the folder is absent; nothing else skips.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest


def shared_dir() -> Path | None:
    """The shared folder holding ``benchmarks/aralia``, or None when it is not here."""
    env = os.environ.get("TROUBLESHOOT_SHARED")
    candidates = [Path(env)] if env else []
    candidates.append(Path(__file__).resolve().parents[2] / "shared")
    for candidate in candidates:
        if (candidate / "benchmarks" / "aralia").is_dir():
            return candidate
    return None


def aralia_path(name: str) -> Path:
    """Path of one public Aralia tree (``chinese``, ``baobab2``, ``das9201``); skips when absent."""
    shared = shared_dir()
    file_name = name if name.endswith(".xml") else f"{name}.xml"
    path = shared / "benchmarks" / "aralia" / file_name if shared else None
    if path is None or not path.is_file():
        pytest.skip("the public Aralia trees are absent: ../shared/benchmarks/aralia/ is not beside the "
                    "repository (set TROUBLESHOOT_SHARED to the folder holding benchmarks/aralia)")
    return path


@pytest.fixture
def aralia():
    """``aralia(name)`` -> path of a public Aralia tree, skipping the test when the trees are absent."""
    return aralia_path
