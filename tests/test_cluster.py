"""A real Dask scheduler and two workers, as separate processes on this machine, give exactly the local
results for ``learn`` and ``simulate`` (the issue's check; Dask distributed is the reference engine)."""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from troubleshoot.cli import main
from troubleshoot.model.source import load_any_model
from troubleshoot.study.execution import DaskCluster, InProcess
from troubleshoot.study.learn import learn, log_files, model_sha256
from troubleshoot.study.simulation import simulate

pytest.importorskip("distributed", reason="the cluster extra (dask[distributed]) is not installed")

#: Seconds the cluster may take to come up; the whole test is bounded by it and the work itself.
START_TIMEOUT = 90


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _dask_command() -> list[str]:
    exe = shutil.which("dask", path=os.path.dirname(sys.executable)) or shutil.which("dask")
    return [exe] if exe else [sys.executable, "-m", "distributed.cli.dask_spec"]


@pytest.fixture(scope="module")
def cluster():
    """A scheduler and two single-threaded workers, each its own process group; always stopped."""
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    dask = _dask_command()
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    procs = []
    try:
        procs.append(subprocess.Popen(dask + ["scheduler", "--host", "127.0.0.1", "--port", str(port),
                                              "--no-dashboard"], stdout=subprocess.DEVNULL,
                                      stderr=subprocess.DEVNULL, start_new_session=True, env=env))
        for _ in range(2):
            procs.append(subprocess.Popen(dask + ["worker", address, "--nthreads", "1", "--nworkers", "1",
                                                  "--no-dashboard", "--memory-limit", "0"],
                                          stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                          start_new_session=True, env=env))
        from distributed import Client

        deadline = time.monotonic() + START_TIMEOUT
        client = None
        while client is None:
            try:
                client = Client(address, timeout=5, set_as_default=False)
            except OSError:
                if time.monotonic() > deadline:
                    pytest.fail("the Dask scheduler did not come up")
                time.sleep(0.5)
        try:
            client.wait_for_workers(2, timeout=max(1.0, deadline - time.monotonic()))
        finally:
            client.close()
        yield address
    finally:
        for p in procs:
            try:
                os.killpg(p.pid, signal.SIGTERM)
            except ProcessLookupError:
                pass
        for p in procs:
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                os.killpg(p.pid, signal.SIGKILL)
                p.wait(timeout=20)


def _without_times(data: bytes) -> list:
    """The log's records without what depends on the clock (times, and the hash chain over them)."""
    records = [json.loads(line) for line in data.splitlines()]
    for record in records:
        for key in ("time", "hash", "prev"):
            record.pop(key, None)
    return records


def test_simulate_and_learn_on_dask_equal_local(cluster, tmp_path):
    model, _ = load_any_model("rooftop")
    local_logs: dict = {}
    dask_logs: dict = {}
    specs = [("info-per-cost", None), ("cheapest", None)]
    local = simulate(model, 48, 5, specs, log_sink=local_logs.__setitem__, executor=InProcess())
    with DaskCluster(cluster) as executor:
        assert executor.workers == 2
        remote = simulate(model, 48, 5, specs, log_sink=dask_logs.__setitem__, executor=executor)
    assert local == remote  # every case's cost, checks, repairs and outcome, in case order
    assert sorted(local_logs) == sorted(dask_logs) == list(range(48))
    for case in local_logs:
        assert _without_times(local_logs[case]) == _without_times(dask_logs[case])
        (tmp_path / f"case-{case:03d}.jsonl").write_bytes(local_logs[case])

    paths = log_files([tmp_path])
    sha = model_sha256(model.source)
    one = learn(model, sha, paths, executor=InProcess())
    with DaskCluster(cluster) as executor:
        two = learn(model, sha, paths, executor=executor)
    assert np.array_equal(one.params_after.flat(), two.params_after.flat())  # same to the last bit
    assert [h[1] for h in one.history] == [h[1] for h in two.history]
    assert [(f.id, f.after, f.low, f.high) for f in one.figures] == [(f.id, f.after, f.low, f.high)
                                                                     for f in two.figures]


def test_commands_take_the_scheduler(cluster, tmp_path, capsys):
    logs = tmp_path / "logs"
    assert main(["simulate", "rooftop", "--cases", "20", "--seed", "2", "--strategy", "info-per-cost",
                 "--logs", str(logs), "--scheduler", cluster, "--json"]) == 0
    remote = json.loads(capsys.readouterr().out)
    assert main(["simulate", "rooftop", "--cases", "20", "--seed", "2", "--strategy", "info-per-cost",
                 "--workers", "1", "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == remote
    assert len(list(Path(logs).glob("case-*.jsonl"))) == 20
    out_dask, out_local = tmp_path / "dask.xml", tmp_path / "local.xml"
    assert main(["learn", "rooftop", str(logs), "-o", str(out_dask), "--scheduler", cluster]) == 0
    assert main(["learn", "rooftop", str(logs), "-o", str(out_local)]) == 0
    capsys.readouterr()
    assert out_dask.read_bytes() == out_local.read_bytes()


def test_an_unreachable_scheduler_is_one_line(capsys, tmp_path):
    port = _free_port()
    status = main(["learn", "rooftop", str(tmp_path), "-o", str(tmp_path / "x.xml"),
                   "--scheduler", f"tcp://127.0.0.1:{port}"])
    err = capsys.readouterr().err
    assert status == 2
    assert "Traceback" not in err
