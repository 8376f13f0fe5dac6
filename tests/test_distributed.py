"""Tasks on a Dask cluster (policy.running.distributed): the same bytes as in this process for a bootstrap
and a constrained sweep, a worker killed mid-run, and the messages of --run-on.

Each test starts its own Dask cluster of two worker processes on loopback and stops it.
"""

from __future__ import annotations

import os
import signal
import sys
from pathlib import Path

import cloudpickle
import pytest
import distributed  # a test dependency (the `test` extra): missing, the suite fails here, never skips
from distributed.diagnostics.plugin import WorkerPlugin

from .conftest import SCENARIOS, run_cli

# the worker plugin below travels to the worker processes by value
cloudpickle.register_pickle_by_value(sys.modules[__name__])

DEMO_CONSTRAINED = SCENARIOS / "demo_constrained.toml"


@pytest.fixture
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as c:
        yield c


def same_bytes(a: Path, b: Path) -> None:
    names = sorted(p.name for p in a.iterdir())
    assert names == sorted(p.name for p in b.iterdir())
    for name in names:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


def test_bootstrap_on_a_cluster_gives_the_bytes_of_this_process(cluster, tmp_path, capsys):
    args = ["compare", DEMO_CONSTRAINED, "--replicates", "60", "--seed", "5", "--no-progress"]
    code, _, err = run_cli(args + ["--out", tmp_path / "here", "--run-on", "here"], capsys)
    assert code == 0, err
    code, _, err = run_cli(args + ["--out", tmp_path / "cluster", "--run-on", cluster.scheduler_address], capsys)
    assert code == 0, err
    same_bytes(tmp_path / "here", tmp_path / "cluster")


def test_constrained_sweep_on_a_cluster_gives_the_bytes_of_this_process(cluster, tmp_path, capsys):
    args = ["sweep", DEMO_CONSTRAINED, "--ratio", "new_offense", "--lp-points", "25", "--replicates", "30",
            "--vary", "at most 15% held=0.12,0.15", "--no-figures", "--no-progress"]
    code, _, err = run_cli(args + ["--out", tmp_path / "here"], capsys)
    assert code == 0, err
    code, _, err = run_cli(args + ["--out", tmp_path / "cluster", "--run-on", cluster.scheduler_address], capsys)
    assert code == 0, err
    assert (tmp_path / "here" / "sweep_constrained.csv").exists() and (tmp_path / "here" / "sweep_bands.csv").exists()
    same_bytes(tmp_path / "here", tmp_path / "cluster")


class KillOnStart(WorkerPlugin):
    """Kills (SIGKILL) its own worker process as that worker starts one of the tool's tasks, once
    for the whole cluster: the first worker to start such a task creates ``flag`` (exclusively,
    so only one can) and dies. Nothing is timed or polled: the kill happens in the worker's own
    transition of the task to executing, so the run always loses a task mid-run."""

    name = "kill-on-start"

    def __init__(self, flag: str, prefix: str = "policy-run_chunk"):
        self.flag = flag
        self.prefix = prefix

    def transition(self, key, start, finish, **kwargs):
        if finish != "executing" or not str(key).startswith(self.prefix):
            return
        try:
            fd = os.open(self.flag, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
        except FileExistsError:
            return
        os.write(fd, str(key).encode())
        os.close(fd)
        os.kill(os.getpid(), signal.SIGKILL)


class Killer:
    """Installs :class:`KillOnStart` on every worker of a cluster (also on restarted ones)."""

    def __init__(self, address: str, flag: Path):
        self.flag = flag
        self.client = distributed.Client(address)
        self.client.register_plugin(KillOnStart(str(flag)))

    @property
    def killed(self) -> str | None:
        """The key of the task whose worker was killed, or None."""
        return self.flag.read_text() if self.flag.exists() else None

    def close(self) -> None:
        self.client.close()


def test_a_worker_killed_mid_run_and_the_run_completes_with_the_same_bytes(cluster, tmp_path, capsys):
    args = ["compare", DEMO_CONSTRAINED, "--replicates", "100", "--seed", "9", "--no-progress"]
    code, _, err = run_cli(args + ["--out", tmp_path / "here"], capsys)
    assert code == 0, err
    killer = Killer(cluster.scheduler_address, tmp_path / "killed")
    try:
        code, _, err = run_cli(args + ["--out", tmp_path / "cluster", "--run-on", cluster.scheduler_address], capsys)
    finally:
        killer.close()
    assert killer.killed is not None, "no worker was killed during the run"
    assert code == 0, err  # Dask ran the lost worker's tasks again elsewhere
    same_bytes(tmp_path / "here", tmp_path / "cluster")


def test_tasks_that_cannot_complete_stop_the_run_and_nothing_is_written(tmp_path, capsys):
    import dask

    # a cluster that gives up on a task the first time its worker dies
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}), \
            distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                     dashboard_address=None) as cluster:
        killer = Killer(cluster.scheduler_address, tmp_path / "killed")
        try:
            code, _, err = run_cli(["compare", DEMO_CONSTRAINED, "--replicates", "100", "--no-progress",
                                    "--out", tmp_path / "out", "--run-on", cluster.scheduler_address], capsys)
        finally:
            killer.close()
    assert killer.killed is not None
    text = " ".join(err.split())
    assert code == 5, err
    assert "could not be completed" in text and "worker process died" in text and "nothing was written" in text
    assert not (tmp_path / "out").exists()


def test_run_on_messages(tmp_path, capsys, monkeypatch):
    out = tmp_path / "out"
    code, _, err = run_cli(["compare", DEMO_CONSTRAINED, "--out", out, "--run-on", "the cloud"], capsys)
    assert code == 2 and "expected here, local, local:N or a Dask scheduler address" in " ".join(err.split())
    code, _, err = run_cli(["compare", DEMO_CONSTRAINED, "--out", out, "--run-on", "local:0"], capsys)
    assert code == 2 and "positive integer" in err
    code, _, err = run_cli(["compare", DEMO_CONSTRAINED, "--out", out, "--run-on", "here", "--workers", "2"], capsys)
    assert code == 2 and "not both" in err
    monkeypatch.setattr("policy.running.distributed.CONNECT_TIMEOUT", 1)
    code, _, err = run_cli(["compare", DEMO_CONSTRAINED, "--out", out, "--replicates", "5", "--run-on", "tcp://127.0.0.1:9"], capsys)
    assert code == 5 and "could not reach a Dask scheduler" in " ".join(err.split())
    assert not out.exists()


def test_without_dask_the_default_works_and_the_option_says_how_to_install(tmp_path, capsys, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed now raises ImportError
    code, _, err = run_cli(["compare", DEMO_CONSTRAINED, "--out", tmp_path / "a", "--replicates", "5", "--run-on", "local:2"], capsys)
    text = " ".join(err.split())
    assert code == 2 and 'pip install "policy-release-rules[distributed]"' in text and 'pip install ".[distributed]"' in text
    code, _, err = run_cli(["compare", DEMO_CONSTRAINED, "--out", tmp_path / "b", "--replicates", "5", "--run-on", "here",
                            "--no-progress"], capsys)
    assert code == 0, err


def _pid_and_shared(shared, task):
    """A task that says which process ran it and what shared data it saw."""
    return os.getpid(), shared, task


def test_local_processes_start_once_and_keep_each_maps_shared_data_apart():
    from policy.assessment.workers import LocalProcesses

    with LocalProcesses(2) as pool:
        first = pool.map(_pid_and_shared, "first", list(range(6)))
        second = pool.map(_pid_and_shared, "second", list(range(6)))
    assert [r[1:] for r in first] == [("first", i) for i in range(6)]
    assert [r[1:] for r in second] == [("second", i) for i in range(6)]
    pids = {r[0] for r in first + second}
    assert os.getpid() not in pids and len(pids) <= 2  # the same two processes served both maps
    assert pool._pool is None  # stopped at the end of the block


def test_default_runner_keeps_light_work_in_this_process():
    from policy.assessment.workers import Adaptive

    done = []
    with Adaptive(max_workers=2) as runner:
        out = runner.map(_pid_and_shared, "s", list(range(20)), done.append)
    assert out == [(os.getpid(), "s", i) for i in range(20)]
    assert sorted(done) == list(range(20))
    assert runner.pool is None and "in this process" in runner.decisions[0]
