"""``archivist check --scheduler``: the Dask executor (archivist/cluster.py) and the command line around it.

The tests that start a cluster need the ``dask`` extra (``pip install
'archivist[dask]'``; the ``test`` extra includes it): without it they are
skipped, since Dask is optional. The tests of the default install (no Dask
imported, a clear error without the extra) always run. Processes are
started in subprocesses where signals or a fresh ``sys.modules`` matter.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
import warnings
from pathlib import Path

import pytest

import archivist
from archivist.errors import ArchivistError
from archivist.progress import Progress
from builders import tiny_project

REPO = Path(archivist.__file__).resolve().parent.parent
DASK_MODULES = ("dask", "distributed")


def run_python(code: str, *args: str, timeout: float = 300, **kw) -> subprocess.CompletedProcess:
    """``code`` in a fresh interpreter with this checkout first on the path."""
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    return subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, env=env, timeout=timeout, **kw)


# ---------------------------------------------------------------- the default install


PROBE_NO_DASK = """
import json, sys
from archivist.cli import main
sys.argv = ["archivist", *sys.argv[1:]]
try:
    main()
except SystemExit as exc:
    code = exc.code
print(json.dumps({"code": code, "dask": sorted(m for m in sys.modules if m.split(".")[0] in %r)}))
""" % (DASK_MODULES,)


def test_a_check_without_scheduler_never_imports_dask(tmp_path):
    """A whole check on the default path (no --scheduler) loads neither dask nor distributed, installed or not."""
    project = tiny_project(tmp_path)
    proc = run_python(PROBE_NO_DASK, "check", str(project), "--format", "json", "-o", str(tmp_path / "report.json"))
    seen = json.loads(proc.stdout.strip().splitlines()[-1])
    assert seen == {"code": 0, "dask": []}, proc.stderr


@pytest.mark.parametrize("args", [["--help"], ["check", "--help"]], ids=" ".join)
def test_help_never_imports_dask(args):
    proc = run_python(PROBE_NO_DASK, *args)
    assert json.loads(proc.stdout.strip().splitlines()[-1]) == {"code": 0, "dask": []}, proc.stderr


BLOCK_DASK = """
import sys
for name in %r:
    sys.modules[name] = None  # import raises ImportError, as in an install without the extra
from archivist.cli import main
sys.argv = ["archivist", *sys.argv[1:]]
main()
""" % (DASK_MODULES,)


@pytest.mark.parametrize("scheduler", ["local", "tcp://127.0.0.1:8786"])
def test_scheduler_without_the_extra_is_one_line_naming_the_install(tmp_path, scheduler):
    project = tiny_project(tmp_path)
    proc = run_python(BLOCK_DASK, "check", str(project), "--scheduler", scheduler)
    assert proc.returncode == 2
    assert proc.stderr.strip().splitlines() == ["archivist: --scheduler needs Dask, an optional extra: pip install 'archivist[dask]'"]
    assert proc.stdout == ""


def test_worker_memory_needs_a_local_scheduler(tmp_path):
    from click.testing import CliRunner

    from archivist.cli import cli

    result = CliRunner().invoke(cli, ["check", str(tiny_project(tmp_path)), "--worker-memory", "2GB"])
    assert result.exit_code == 2
    assert result.output.strip().splitlines() == ["archivist: --worker-memory sizes the workers of --scheduler local; give both"]


# ---------------------------------------------------------------- with the dask extra


@pytest.fixture(scope="module")
def distributed():
    return pytest.importorskip("distributed", reason="the dask extra (pip install 'archivist[dask]') is not installed")


def test_local_cluster_runs_tasks_in_worker_processes_and_stops_them(distributed):
    import psutil

    from archivist.cluster import open_executor
    from archivist.progress import Progress

    progress = Progress()
    with open_executor("local", progress, workers=2, memory_limit="1.5GiB") as executor:
        pids = set(executor.inner._client.run(os.getpid).values())
        ran = {executor.submit(os.getpid).result() for _ in range(4)}
        # a task carrying a partition's features is large by design: distributed's warning of it is not shown
        with warnings.catch_warnings(record=True) as caught:  # the filters as the executor left them
            assert executor.submit(len, b"x" * (12 * 2**20)).result() == 12 * 2**20
        assert not [w for w in caught if "large graph" in str(w.message)]
        limits = executor.inner._client.run(lambda dask_worker: dask_worker.memory_manager.memory_limit)
    assert len(pids) == 2 and os.getpid() not in pids and ran <= pids
    assert set(limits.values()) == {3 * 2**29}  # 1.5 GiB, dask.utils.parse_bytes
    assert [t.label for t in progress.timings] == ["starting a local Dask cluster of 2 workers"]
    deadline = time.monotonic() + 30
    while any(psutil.pid_exists(p) for p in pids) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert not any(psutil.pid_exists(p) for p in pids)


def nap(seconds: float) -> int:
    time.sleep(seconds)
    return os.getpid()


def test_leaving_on_ctrl_c_stops_the_workers_at_once(distributed, monkeypatch):
    """Ctrl-C while tasks run: on leaving, the tasks are cancelled, the workers and the scratch folder are gone,
    while the interpreter goes on (a library caller that catches the interrupt keeps no cluster)."""
    import psutil

    from archivist import cluster

    made: list[str] = []
    real_mkdtemp = cluster.tempfile.mkdtemp

    def mkdtemp(**kw):
        made.append(real_mkdtemp(**kw))
        return made[-1]

    monkeypatch.setattr(cluster.tempfile, "mkdtemp", mkdtemp)
    with pytest.raises(KeyboardInterrupt):
        with cluster.open_executor("local", workers=2) as executor:
            pids = set(executor.inner._client.run(os.getpid).values())
            futures = [executor.submit(nap, 600) for _ in range(4)]
            time.sleep(0.5)
            raise KeyboardInterrupt
    assert all(f.cancelled() for f in futures)
    assert not any(psutil.pid_exists(p) and psutil.Process(p).status() != psutil.STATUS_ZOMBIE for p in pids)
    assert made and not Path(made[0]).exists()


@pytest.mark.parametrize("text", ["lots", "-1GB", "0"])
def test_a_worker_memory_that_is_no_size_is_one_line(distributed, text):
    from archivist.cluster import open_executor

    with pytest.raises(ArchivistError, match=r"^--worker-memory: "):
        with open_executor("local", workers=1, memory_limit=text):
            pass


def test_an_address_without_scheduler_is_one_line(distributed, monkeypatch):
    import socket

    from archivist import cluster

    with socket.socket() as s:  # a port nothing listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setattr(cluster, "CONNECT_TIMEOUT", 2.0)
    with pytest.raises(ArchivistError, match=rf"^--scheduler: cannot reach a Dask scheduler at tcp://127.0.0.1:{port} "):
        with cluster.open_executor(f"tcp://127.0.0.1:{port}"):
            pass


@pytest.fixture(scope="module")
def running_scheduler(distributed):
    """A scheduler with one worker (in threads of this process), as ``dask scheduler`` and ``dask worker`` would run it."""
    cluster = distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None,
                                       scheduler_port=0, protocol="tcp://")
    try:
        yield cluster.scheduler_address
    finally:
        cluster.close()


def test_a_running_scheduler_runs_the_tasks(running_scheduler, tmp_path):
    from archivist.cluster import open_executor

    with open_executor(running_scheduler, root=tmp_path) as executor:
        assert executor.submit(sum, [1, 2, 3]).result() == 6
        assert executor.read and executor.workers == 1  # a running cluster's workers read their partitions


def test_workers_that_cannot_see_the_project_are_named(running_scheduler, tmp_path):
    from archivist.cluster import open_executor

    missing = tmp_path / "not-shared"
    with pytest.raises(ArchivistError) as caught:
        with open_executor(running_scheduler, root=missing):
            pass
    message = str(caught.value)
    assert message.startswith(f"Dask worker tcp://") and f"of {running_scheduler} cannot see the project folder {missing}" in message
    assert "\n" not in message


@pytest.mark.parametrize("option, message", [({"memory_limit": "1GB"}, "--worker-memory applies to --scheduler local"),
                                             ({"workers": 3}, "--jobs sizes the workers of --scheduler local")])
def test_local_sizes_are_refused_for_a_running_scheduler(running_scheduler, tmp_path, option, message):
    from archivist.cluster import open_executor

    with pytest.raises(ArchivistError, match=f"^{message}"):
        with open_executor(running_scheduler, root=tmp_path, **option):
            pass


# ---------------------------------------------------------------- stopping


SLEEPER = """
import json, os, sys, time
from archivist.cluster import open_executor
from archivist.interrupt import terminate_as_exception

def nap(seconds):
    time.sleep(seconds)
    return os.getpid()

if __name__ == "__main__":
    with terminate_as_exception():
        try:
            with open_executor("local", workers=2) as executor:
                pids = executor.inner._client.run(os.getpid)
                print(json.dumps(sorted(pids.values())), flush=True)
                futures = [executor.submit(nap, 600) for _ in range(4)]
                for f in futures:
                    f.result()
        except KeyboardInterrupt:
            sys.exit(130)
        except BaseException as exc:
            print(type(exc).__name__, file=sys.stderr)
            sys.exit(143)
"""


@pytest.mark.parametrize("signum, code", [(signal.SIGINT, 130), (signal.SIGTERM, 143)], ids=["ctrl-c", "sigterm"])
@pytest.mark.parametrize("whole_group", [True, False], ids=["terminal", "process-only"])
def test_stopping_a_local_cluster_run_leaves_no_worker(distributed, tmp_path, signum, code, whole_group):
    """Ctrl-C (to the whole process group, as a terminal sends it, or to the client alone) or SIGTERM while tasks run:
    the run ends and no worker process is left."""
    import psutil

    script = tmp_path / "sleeper.py"
    script.write_text(SLEEPER, encoding="utf-8")
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.Popen([sys.executable, str(script)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
                            start_new_session=True)
    try:
        assert proc.stdout is not None
        workers = json.loads(proc.stdout.readline())
        family = [c.pid for c in psutil.Process(proc.pid).children(recursive=True)]
        assert set(workers) <= set(family)
        time.sleep(1.0)  # the tasks are running
        if whole_group:
            os.killpg(proc.pid, signum)
        else:
            os.kill(proc.pid, signum)
        assert proc.wait(timeout=120) == code, proc.stderr.read() if proc.stderr else ""
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    deadline = time.monotonic() + 30
    while any(psutil.pid_exists(p) and psutil.Process(p).status() != psutil.STATUS_ZOMBIE for p in family) and time.monotonic() < deadline:
        time.sleep(0.2)
    left = [p for p in family if psutil.pid_exists(p) and psutil.Process(p).status() != psutil.STATUS_ZOMBIE]
    assert left == []


# ---------------------------------------------------------------- the findings of a check on a local cluster


@pytest.fixture(scope="module")
def synthetic_maps(tmp_path_factory):
    """A clean and a defect-laden synthetic map of about 10^4 polygons (tests/benchmarks/topology_maps.py)."""
    sys.path.insert(0, str(Path(__file__).resolve().parent / "benchmarks"))
    from topology_maps import make

    base = tmp_path_factory.mktemp("cluster-maps")
    make(base / "clean", 10_000, seed=0)
    made = make(base / "defects", 10_000, seed=1, defects=25)
    assert len(made["defects"]) == 75
    return {"clean": base / "clean", "defects": base / "defects"}


class Recorder(Progress):
    """A progress hook that records, per step, its total and how often it advanced."""

    def __init__(self) -> None:
        super().__init__()
        self.steps: dict[str, list[int]] = {}

    def _begin(self, step) -> None:
        self.steps[step.label] = [step.total or 0, 0]

    def _advance(self, step, n: int) -> None:
        self.steps[step.label][1] += n


@pytest.mark.slow
@pytest.mark.parametrize("read", [False, True], ids=["sent", "read-by-workers"])
@pytest.mark.parametrize("name", ["clean", "defects"])
def test_a_local_cluster_finds_what_one_process_finds(distributed, synthetic_maps, name, read):
    """Same rules, features, places, measures and notes, in the same order, whether the partitions' features are sent
    with the tasks (the default of a local cluster) or read by the workers from the files (of a running cluster)."""
    from archivist import engine
    from archivist.cluster import open_executor
    from archivist.project import load_project

    from archivist.registry import select

    project = load_project(synthetic_maps[name])
    # the whole check, and the partitioned rules alone (a family goes to the partitions when all its rules that run can)
    partitioned = [r.id for r in select((), ()) if r.partitioned]
    progress = Recorder()
    with open_executor("local", workers=2, read_on_workers=read) as executor:
        executor.reading(project)
        many = engine.check(project, executor=executor, parts=4)
        some = engine.check(project, rules=partitioned, executor=executor, parts=4, progress=progress)
        assert executor.partitions > 0 and (executor.sent_slim > 0) == read and executor.fell_back == 0
    one = engine.check(project, jobs=1)
    assert many.findings == one.findings
    assert (many.notes, many.rules_run) == (one.notes, one.rules_run)
    alone = engine.check(project, rules=partitioned, jobs=1)
    assert (some.findings, some.notes, some.rules_run) == (alone.findings, alone.notes, alone.rules_run)
    if name == "defects":
        assert {"unit-overlap", "unit-gap", "line-dangle"} <= {f.rule for f in one.findings}
        assert {"line-dangle"} <= {f.rule for f in alone.findings}
    else:
        assert not [f for f in one.findings if f.family in ("topology", "linework")]
    # the bars of the partitioned families advance once per rule, to their total; the partitions (sent together for
    # both families) advance the first family's bar once each
    for family, sent in (("topology", 4), ("linework", 0)):
        total, done = progress.steps[f"{family} rules"]
        rules = sum(1 for r in select((), ()) if r.id in partitioned and r.family == family)
        assert total == done == rules + sent


@pytest.mark.slow
def test_the_command_line_with_a_local_cluster_writes_the_single_process_report(distributed, synthetic_maps, tmp_path):
    code = "from archivist.cli import main; import sys; sys.argv = ['archivist', *sys.argv[1:]]; main()"
    one = run_python(code, "check", str(synthetic_maps["defects"]), "--format", "json", "-o", str(tmp_path / "one.json"))
    many = run_python(code, "check", str(synthetic_maps["defects"]), "--format", "json", "-o", str(tmp_path / "many.json"),
                      "--scheduler", "local", "--worker-memory", "1GiB")
    assert one.returncode == many.returncode == 1, many.stderr
    assert many.stderr == ""
    assert (tmp_path / "many.json").read_bytes() == (tmp_path / "one.json").read_bytes()


@pytest.mark.slow
def test_ctrl_c_during_a_check_on_a_local_cluster_leaves_no_worker(distributed, synthetic_maps):
    """Ctrl-C from the terminal (to the whole process group) once the cluster is up: exit 130, one line, no worker left."""
    import psutil

    code = "from archivist.cli import main; import sys; sys.argv = ['archivist', *sys.argv[1:]]; main()"
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.Popen([sys.executable, "-c", code, "check", str(synthetic_maps["defects"]), "--scheduler", "local", "-v"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, start_new_session=True)
    try:
        assert proc.stderr is not None
        for line in proc.stderr:  # -v prints a timing line as each step ends
            if "starting a local Dask cluster" in line:
                break
        family = [c.pid for c in psutil.Process(proc.pid).children(recursive=True)]
        assert family
        os.killpg(proc.pid, signal.SIGINT)
        assert proc.wait(timeout=120) == 130
        rest = proc.stderr.read()
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    assert "archivist: interrupted (Ctrl-C); an output not yet complete was not written" in rest.splitlines()
    deadline = time.monotonic() + 30
    while any(psutil.pid_exists(p) and psutil.Process(p).status() != psutil.STATUS_ZOMBIE for p in family) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert [p for p in family if psutil.pid_exists(p) and psutil.Process(p).status() != psutil.STATUS_ZOMBIE] == []
