"""Running the partitioned checks on a Dask cluster (``archivist check --scheduler``).

The expensive rule families are cut into spatial partitions and run as one
task per partition (:mod:`archivist.parallel`); any
:class:`concurrent.futures.Executor` can run those tasks. This module opens
the executor that sends them to Dask workers:

* ``--scheduler local`` starts a :class:`distributed.LocalCluster` on this
  machine: one worker process per usable core (or ``--jobs N``), one thread
  each, each with its own memory limit (``--worker-memory``; by default the
  machine's memory shared out equally). Each worker holds only the
  partition it is working on and its analyses, so a map whose analyses
  one process could not hold is checked across several processes; a
  worker that grows past its limit is restarted by its nanny and its task
  run again.
* ``--scheduler tcp://HOST:PORT`` connects to a running scheduler (started
  with ``dask scheduler``, workers with ``dask worker tcp://HOST:PORT``).
  Before any task is sent, every worker is asked whether it runs the same
  archivist version and sees the project folder at the same path (the
  workers read the project's files themselves: they must be on a path every
  worker sees, such as a shared file system); a worker that does not is
  named in a one-line error.

What each task carries: the rules to run, the partition's cells and reach,
the settings and the tables, and the partition's features. On a running
cluster, the features of the layers a worker can read itself are not sent
(:mod:`archivist.partread`): for those the task names the file, the
feature ids in order and a fingerprint of what the client holds; the worker
reads them by fid from the project's files and checks the fingerprint, and
on any difference the client sends that task with its features instead. So
the map's features do not travel through the client's network link nor
wait, pickled, in the scheduler. With ``local`` the features are sent: on
one machine that costs less time than reading them by fid (measured with
tests/benchmarks/bench_cluster.py).

The client loads the project once, as a one-process run does: it cuts the
partitions, runs the families that are not partitioned (metadata, legend,
samples, structures, the CRS labels) and merges the partitions' findings.
What the workers hold is each partition and its analyses (half-edges,
coverage, line network), several times the size of the features they are
built from.

What this does not do yet: a family goes to the workers only when every
rule of it that runs is partitioned (:func:`archivist.engine.run_rules`: the
rules of a family share their analyses). The linework family does (its sums
over the map settled from the partitions' partial sums,
:mod:`archivist.tally`), and the topology family does on a map with an
extent layer (its coverage rules need one: without it the extent is the
outline of every unit, a whole-map thing, and the family stays here). The
client still loads the whole map to cut it (2.3 GB after loading at 10^6
polygons), so a map larger than this machine's memory is not yet checked
(tests/benchmarks/bench_cluster.py; the README's Performance section).

How the map is cut and the findings merged is :mod:`archivist.parallel`'s
(Hilbert order of the features' boxes, a halo around each partition, each
finding reported by the partition owning its representative point); here
only the number of partitions is chosen, :func:`partitions`: a multiple of
the workers, each of at most about :data:`PARTITION_FEATURES` features.
Findings are identical to a one-process run, in the same order.

Stopping: leaving :func:`open_executor` (normally, on an error, on Ctrl-C
or on SIGTERM, which the command line turns into an exception) cancels
every task still queued or running, closes the client and, for a local
cluster, stops its scheduler and worker processes and removes their
scratch folder; a second Ctrl-C during that clean-up is ignored so that it
finishes. A task already running on a remote worker runs to its end there
(Dask cannot interrupt a running Python function); its result is dropped.

Dask is an optional extra (``pip install 'archivist[dask]'``): nothing here
imports it until a cluster is asked for, and ``import archivist`` never does.
"""

from __future__ import annotations

import logging
import os
import shutil
import signal
import tempfile
import threading
import warnings
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any, Iterator

from .errors import ArchivistError
from .progress import Progress

if TYPE_CHECKING:
    from .partread import ReadingExecutor
    from .project import MapProject

__all__ = ["DASK_EXTRA", "LOCAL", "PARTITION_FEATURES", "open_executor", "partitions", "require_dask", "worker_facts"]

DASK_EXTRA = "pip install 'archivist[dask]'"
"""The install command that brings Dask (named in the error when it is missing)."""

LOCAL = "local"
"""The ``--scheduler`` value that starts a cluster on this machine."""

CONNECT_TIMEOUT = 30.0
"""Seconds to reach a scheduler, and to wait for its first worker (common practice: long enough for a busy network)."""


PARTITION_FEATURES = 50_000
"""Features (of every partitioned layer) per partition on a cluster, at most: a design choice keeping one
partition's analyses to a few hundred MB, and the halo a small part of each partition at 10^6 features and more."""


def partitions(project: MapProject, workers: int) -> int:
    """How many partitions to cut ``project`` into for ``workers`` workers: a multiple of ``workers`` (every worker has
    work until the end), each of at most about :data:`PARTITION_FEATURES` features."""
    n = sum(len(layer.frame) for role, layer in project.layers.items() if role != "extent")
    workers = max(1, workers)
    return workers * max(1, -(-n // (workers * PARTITION_FEATURES)))


def require_dask() -> Any:
    """The ``distributed`` module, or the one-line error naming the install command."""
    try:
        import distributed
    except ImportError:
        raise ArchivistError(f"--scheduler needs Dask, an optional extra: {DASK_EXTRA}") from None
    return distributed


def _memory_limit(text: str | None) -> str | int:
    """``--worker-memory`` as bytes ("4GB", "500MiB", a number of bytes); "auto" when not given."""
    if text is None or text.strip().lower() == "auto":
        return "auto"
    from dask.utils import parse_bytes

    try:
        size = int(parse_bytes(text.strip()))
    except (ValueError, TypeError):
        raise ArchivistError(f"--worker-memory: cannot read {text!r} as a size (write it like 4GB or 500MiB)") from None
    if size <= 0:
        raise ArchivistError(f"--worker-memory: {text!r} is not a positive size")
    return size


def worker_facts(root: str) -> dict[str, Any]:
    """What a worker reports before it gets any task: its archivist version and whether it sees ``root``."""
    from ._version import __version__

    return {"version": __version__, "sees": os.path.isdir(root), "pid": os.getpid()}


def _check_workers(client: Any, address: str, root: Path | None) -> None:
    """Every worker runs this archivist version and sees the project folder; else a one-line error naming one that does not."""
    from ._version import __version__

    facts = client.run(worker_facts, str(root or "."), on_error="return")
    for worker, fact in sorted(facts.items()):
        if isinstance(fact, BaseException):
            raise ArchivistError(f"Dask worker {worker} of {address} cannot run archivist ({type(fact).__name__}: "
                                 f"{' '.join(str(fact).split())}); install archivist {__version__} on every worker")
        if fact["version"] != __version__:
            raise ArchivistError(f"Dask worker {worker} of {address} runs archivist {fact['version']}, this client "
                                 f"{__version__}; install the same version on every worker")
        if root is not None and not fact["sees"]:
            raise ArchivistError(f"Dask worker {worker} of {address} cannot see the project folder {root}; "
                                 "put the project on a path every worker sees (a shared file system) and check it from there")


@contextmanager
def _no_sigint() -> Iterator[None]:
    """While inside, Ctrl-C is ignored (main thread only): a clean-up in progress finishes."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    before = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, before)


@contextmanager
def open_executor(
    scheduler: str,
    progress: Progress | None = None,
    *,
    workers: int | None = None,
    memory_limit: str | None = None,
    root: Path | None = None,
    read_on_workers: bool | None = None,
) -> Iterator[ReadingExecutor]:
    """An executor whose tasks run on Dask workers; everything is stopped on leaving.

    Parameters
    ----------
    scheduler
        ``"local"`` to start a :class:`distributed.LocalCluster` on this
        machine, or the address of a running scheduler (``tcp://host:8786``).
    progress
        Told about starting the cluster or connecting to it.
    workers
        ``local`` only: the number of worker processes (default: the usable cores).
    memory_limit
        ``local`` only: each worker's memory limit ("4GB"; default: the
        machine's memory shared out equally among the workers).
    root
        The project folder: every worker of a remote cluster must see it at
        this path (checked before any task is sent).
    read_on_workers
        Whether the workers read their partitions' features from the
        project's files (:mod:`archivist.partread`) rather than receive them
        with each task; default: for a running cluster yes, for ``local``
        no (on one machine, sending them costs less time; see
        tests/benchmarks/bench_cluster.py).

    Raises
    ------
    ArchivistError
        Dask is not installed, the scheduler cannot be reached or has no
        workers, a worker runs another archivist or cannot see ``root``, or
        a setting is not understood.
    """
    distributed = require_dask()
    progress = progress or Progress()
    cluster: Any = None
    client: Any = None
    executor: Any = None
    scratch: str | None = None
    try:
        if scheduler.strip().lower() == LOCAL:
            from .parallel import default_jobs

            n = workers or default_jobs()
            if n < 1:
                raise ArchivistError(f"--jobs: {n} workers cannot run a cluster; give 1 or more")
            limit = _memory_limit(memory_limit)
            scratch = tempfile.mkdtemp(prefix="archivist-dask-")  # spilled data and worker files, never in the project
            with progress.step(f"starting a local Dask cluster of {n} worker{'s' if n != 1 else ''}"):
                cluster = distributed.LocalCluster(
                    n_workers=n,
                    threads_per_worker=1,
                    processes=True,
                    memory_limit=limit,
                    dashboard_address=None,
                    # the workers' own log: at ERROR it printed a worker's heartbeat that met the scheduler
                    # already closing (distributed's "Failed to communicate with scheduler during heartbeat" and
                    # its traceback) at the end of a good run; a failing task still reaches the client as its
                    # exception, and a lost worker as distributed's KilledWorker
                    silence_logs=logging.CRITICAL,
                    local_directory=scratch,
                )
                client = distributed.Client(cluster, set_as_default=False)
                # The local scheduler runs in this process and turns on distributed's GC diagnosis, a gc
                # callback: a Ctrl-C that lands while it runs is raised inside the callback, where Python
                # only prints "Exception ignored" and the run carries on. Off, Ctrl-C always stops the run.
                from distributed.gc import disable_gc_diagnosis

                disable_gc_diagnosis(force=True)
        else:
            if workers is not None:
                raise ArchivistError("--jobs sizes the workers of --scheduler local; a running cluster has its own workers")
            if memory_limit is not None:
                raise ArchivistError("--worker-memory applies to --scheduler local; a running cluster's workers set their own "
                                     "(dask worker --memory-limit)")
            address = scheduler.strip()
            with progress.step(f"connecting to the Dask scheduler at {address}"):
                logging.getLogger("distributed").setLevel(logging.ERROR)
                try:
                    client = distributed.Client(address, timeout=CONNECT_TIMEOUT, set_as_default=False)
                except (OSError, TimeoutError, ValueError) as exc:
                    reason = " ".join(str(exc).split()) or type(exc).__name__
                    raise ArchivistError(f"--scheduler: cannot reach a Dask scheduler at {address} ({reason})") from None
                try:
                    client.wait_for_workers(1, timeout=CONNECT_TIMEOUT)
                except (OSError, TimeoutError):
                    raise ArchivistError(f"--scheduler: the Dask scheduler at {address} has no worker after "
                                         f"{CONNECT_TIMEOUT:g} s; start some with 'dask worker {address}'") from None
                _check_workers(client, address, root)
        from .partread import ReadingExecutor

        # pure=False: partitions are never the same task twice, so their arguments are not hashed
        local = cluster is not None
        executor = ReadingExecutor(client.get_executor(pure=False), read=not local if read_on_workers is None else read_on_workers)
        executor.workers = max(1, sum(client.nthreads().values()))  # threads across the workers: tasks at once
        with warnings.catch_warnings():
            # a task carrying its partition's features (local, or a worker that could not read them) is a large
            # graph by design; distributed warns of each one, hundreds of lines on a large map
            warnings.filterwarnings("ignore", message="Sending large graph", category=UserWarning)
            yield executor
    finally:
        with _no_sigint():
            _close(executor, client, cluster)
            if scratch is not None:
                shutil.rmtree(scratch, ignore_errors=True)


def _close(executor: Any, client: Any, cluster: Any) -> None:
    """Cancel what is still queued or running, close the client, stop a local cluster; each step whatever the last did."""
    steps = []
    if executor is not None:
        steps.append(lambda: executor.shutdown(wait=False, cancel_futures=True))  # cancels its futures on the scheduler
    if client is not None:
        steps.append(client.close)
    if cluster is not None:
        steps.append(cluster.close)
    for close in steps:
        try:
            close()
        except Exception:  # a clean-up step that fails must not stop the next one (the scheduler may already be gone)
            logging.getLogger(__name__).debug("closing the Dask cluster", exc_info=True)
