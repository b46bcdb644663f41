"""Partition tasks that read their own features: what a cluster worker gets instead of the features.

A partition task (:class:`archivist.parallel.PartitionTask`) holds the
partition's project: the features of its core and halo. Sent as it is, every
feature of the map travels from the client to the workers (pickled: their
WKB and attributes), and while the tasks wait, the client and the scheduler
hold those copies. :func:`slim_task` replaces each layer a worker can read
itself with a :class:`FileRows`: the file and GDAL layer, the feature ids
(fids) of the partition's features in their order (read one by one by fid,
pyogrio's ``fids``: a partition's box is no filter, since a map-boundary line
or a long fault spans the whole map), the layer's empty frame (its columns,
their types, its CRS), and a fingerprint of what the client holds
(SHA-256 of the features' WKB, their attribute hashes and fids). A task so
slimmed weighs a few bytes per feature (its fids and feature ids).

On the worker, :func:`read_task` reads each such layer's listed fids in
their order, casts the columns to the client's types
and checks the fingerprint: the partition's project is then the very one
the client would have sent, and the partition's findings are the same. If
anything differs (the file changed since the client read it, the worker
reads another file at that path, GDAL gives a feature back otherwise), the
worker raises :class:`ReadMismatch` and the client sends the task with its
features instead (:class:`ReadingExecutor`): a mismatch costs time, never a
finding.

A layer is read by the worker only when it was read from one layer of one
vector file as it is: not a table of coordinates, not line layers combined
from several files, not moved by the alignment (another CRS, swapped axes)
or into the local frame of a map in longitude/latitude, every feature of the
partition with a geometry. The fingerprint finds any other change; such a
layer is sent with its features.

What it costs: reading by fid is slower per feature than reading a whole
layer in file order, and both sides compute the fingerprint; on one machine
(``--scheduler local``) sending the features costs less time, so the
cluster module turns this on for remote clusters only
(:func:`archivist.cluster.open_executor`); see tests/benchmarks/bench_cluster.py.
"""

from __future__ import annotations

import hashlib
import operator
from concurrent.futures import Executor, Future
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable

import numpy as np

if TYPE_CHECKING:
    from .parallel import PartitionResult, PartitionTask
    from .project import Layer, MapProject

__all__ = ["FileRows", "ReadMismatch", "ReadingExecutor", "SlimTask", "fingerprint", "read_task", "run_slim_partition", "slim_task"]


class ReadMismatch(Exception):
    """What a worker read is not what the client holds; the client sends the task with its features."""


@dataclass(frozen=True)
class FileRows:
    """Where a worker reads one layer of its partition, and how it checks that it read what the client holds."""

    path: str
    layer: str
    fids: np.ndarray  # the features to read, in the partition's order
    template: Any  # the layer's frame with no rows: columns, dtypes, index name, CRS
    digest: str  # fingerprint() of the client's rows


@dataclass(frozen=True)
class SlimTask:
    """A partition task whose readable layers have no rows, and where the worker reads them (:class:`FileRows`)."""

    task: PartitionTask
    reads: dict[str, FileRows]


def fingerprint(frame: Any) -> str:
    """SHA-256 of a layer's rows: their fids, their geometries' WKB and their attributes' hashes, in order."""
    import pandas as pd
    import shapely

    h = hashlib.sha256()
    h.update(np.asarray(frame.index, dtype=np.int64).tobytes())
    wkb = shapely.to_wkb(np.asarray(frame.geometry.array, dtype=object))  # WKB delimits itself: no lengths needed
    h.update(b"".join(wkb.tolist()))
    h.update((frame.crs.to_wkt() if frame.crs is not None else "").encode())
    attrs = pd.DataFrame(frame.drop(columns=frame.geometry.name))
    h.update(repr([(str(c), str(t)) for c, t in attrs.dtypes.items()]).encode())
    if len(attrs.columns):
        h.update(pd.util.hash_pandas_object(attrs, index=False).to_numpy().tobytes())
    return h.hexdigest()


def _readable(layer: Layer) -> tuple[str, str] | None:
    """(file, GDAL layer) of a layer read as it is from one layer of one vector file; None otherwise."""
    from . import vectorio

    if layer.parts or layer.origin or layer.spec.get("x_field"):
        return None
    name = layer.spec.get("layer")
    path = Path(layer.path)
    if name is None:  # the file's one layer (the loader refused a file of several without a name)
        try:
            names = [n for n, _ in vectorio.list_layers(path)]
        except vectorio.VectorReadError:
            return None
        if len(names) != 1:
            return None
        name = names[0]
    return str(path), str(name)


def _file_rows(sub: Layer, loaded: Layer | None, where: tuple[str, str]) -> FileRows | None:
    """The :class:`FileRows` of one partition layer, or None when it is not the loaded layer's rows as read."""
    import shapely

    frame = sub.frame
    if loaded is None or not frame.index.is_unique or not len(frame) or not _fid_index(frame):
        return None
    geoms = sub.geometry
    if (shapely.is_missing(geoms) | shapely.is_empty(geoms)).any():
        return None
    crs, loaded_crs = frame.crs, loaded.frame.crs
    if (crs is None) != (loaded_crs is None) or (crs is not None and not crs.equals(loaded_crs)):
        return None
    pos = loaded.frame.index.get_indexer(frame.index)
    if (pos < 0).any() or not all(map(operator.is_, geoms, loaded.geometry[pos])):  # moved by the alignment: a new object
        return None
    try:
        digest = fingerprint(frame)
    except TypeError:  # an attribute pandas cannot hash
        return None
    return FileRows(where[0], where[1], np.asarray(frame.index, dtype=np.int64), frame.iloc[:0].copy(), digest)


def _fid_index(frame: Any) -> bool:
    """Whether the frame's index holds integers (the file's fids, as the loader reads them)."""
    import pandas as pd

    return bool(pd.api.types.is_integer_dtype(frame.index.dtype))


def slim_task(task: PartitionTask, loaded: MapProject) -> SlimTask | None:
    """``task`` with the layers a worker can read itself as :class:`FileRows` (see the module docstring); None when none can.

    ``loaded`` is the project as loaded, before any alignment: a partition
    layer is read by the worker only where its geometries are the loaded
    layer's own objects.
    """
    project = task.project
    if project.local is not None:  # the local frame of a map in longitude/latitude: computed, not read
        return None
    reads: dict[str, FileRows] = {}
    for role, sub in project.layers.items():
        where = _readable(loaded.layers[role]) if role in loaded.layers else None
        if where is None:
            continue
        rows = _file_rows(sub, loaded.layers.get(role), where)
        if rows is not None:
            reads[role] = rows
    if not reads:
        return None
    layers = {role: (replace(layer, frame=reads[role].template) if role in reads else layer) for role, layer in project.layers.items()}
    return SlimTask(replace(task, project=replace(project, layers=layers)), reads)


def _read_layer(rows: FileRows) -> Any:
    """One layer's rows as the client holds them, read from the file; :class:`ReadMismatch` when they differ."""
    from . import vectorio

    try:
        frame = vectorio.read_dataframe(rows.path, layer=rows.layer, fids=rows.fids, fid_as_index=True, on_invalid="ignore")
    except (vectorio.VectorReadError, OSError) as exc:
        raise ReadMismatch(f"{rows.path}: {exc}") from None
    template = rows.template
    if not np.array_equal(np.asarray(frame.index, dtype=np.int64), rows.fids):
        raise ReadMismatch(f"{rows.path}:{rows.layer}: the features of the partition are not all in the file")
    if list(frame.columns) != list(template.columns):
        raise ReadMismatch(f"{rows.path}:{rows.layer}: the fields differ")
    types = {c: t for c, t in template.dtypes.items() if c != template.geometry.name}
    try:
        frame = frame.astype(types)
    except (TypeError, ValueError) as exc:
        raise ReadMismatch(f"{rows.path}:{rows.layer}: {exc}") from None
    frame.index = frame.index.astype(template.index.dtype)
    frame.index.name = template.index.name
    from .project import share_text

    frame = share_text(frame)  # equal text values as one object, as the client's loader holds them
    if template.crs is not None:
        frame = frame.set_crs(template.crs, allow_override=True)
    if fingerprint(frame) != rows.digest:
        raise ReadMismatch(f"{rows.path}:{rows.layer}: the features differ from the client's")
    return frame


def read_task(slim: SlimTask) -> PartitionTask:
    """The partition task the client would have sent, rebuilt by reading ``slim``'s layers (on the worker)."""
    task = slim.task
    layers = dict(task.project.layers)
    for role, rows in slim.reads.items():
        layers[role] = replace(layers[role], frame=_read_layer(rows))
    return replace(task, project=replace(task.project, layers=layers))


def run_slim_partition(slim: SlimTask) -> PartitionResult:
    """:func:`archivist.parallel.run_partition` of the task ``slim`` stands for, its layers read by the worker."""
    from . import vectorio
    from .parallel import run_partition

    with vectorio.reading():  # one reading session: a private copy of a changing SQLite file is made once
        task = read_task(slim)
    return run_partition(task)


class ReadingExecutor(Executor):
    """An executor that sends partition tasks slimmed (:func:`slim_task`) and falls back to the whole task on a mismatch.

    Every other call goes to ``inner`` as it is. ``loaded`` (the project as
    loaded) is given with :meth:`reading` once the project is read.
    """

    def __init__(self, inner: Executor, *, read: bool = True) -> None:
        self.inner = inner
        self.read = read  # False: every task is sent as it is
        self.loaded: MapProject | None = None
        self.workers = 1  # how many tasks ``inner`` runs at once (set by whoever made it)
        self.partitions = 0  # partition tasks submitted
        self.sent_slim = 0
        self.fell_back = 0

    def reading(self, loaded: MapProject) -> None:
        """The project as loaded: partition layers that are its own rows are read by the workers (when ``read``)."""
        self.loaded = loaded if self.read else None

    def submit(self, fn: Callable[..., Any], /, *args: Any, **kwargs: Any) -> Future:
        from .parallel import PartitionTask, run_partition

        if fn is run_partition:
            self.partitions += 1
        if fn is run_partition and len(args) == 1 and not kwargs and isinstance(args[0], PartitionTask) and self.loaded is not None:
            slim = slim_task(args[0], self.loaded)
            if slim is not None:
                self.sent_slim += 1
                return self._with_fallback(self.inner.submit(run_slim_partition, slim), args[0])
        return self.inner.submit(fn, *args, **kwargs)

    def _with_fallback(self, first: Future, task: PartitionTask) -> Future:
        """A future of the slim task's result; on :class:`ReadMismatch`, of the whole task's."""
        from .parallel import run_partition

        out: Future = Future()

        def relay(src: Future) -> None:
            if out.done():  # cancelled by the caller
                return
            if src.cancelled():
                out.cancel()
                out.set_running_or_notify_cancel()  # wakes as_completed() and wait()
                return
            exc = src.exception()
            if exc is None:
                out.set_result(src.result())
            else:
                out.set_exception(exc)

        def first_done(src: Future) -> None:
            exc = None if src.cancelled() else src.exception()
            if isinstance(exc, ReadMismatch) and not out.done():
                self.fell_back += 1
                try:
                    second = self.inner.submit(run_partition, task)
                except RuntimeError as err:  # the executor is shutting down
                    out.set_exception(err)
                    return
                out.add_done_callback(lambda o: second.cancel() if o.cancelled() else None)
                second.add_done_callback(relay)
            else:
                relay(src)

        out.add_done_callback(lambda o: first.cancel() if o.cancelled() else None)
        first.add_done_callback(first_done)
        return out

    def shutdown(self, wait: bool = True, *, cancel_futures: bool = False) -> None:
        """Shut ``inner`` down; ``cancel_futures`` where it takes it (a Dask client's executor cancels when not waiting)."""
        try:
            self.inner.shutdown(wait=wait, cancel_futures=cancel_futures)
        except TypeError:
            self.inner.shutdown(wait=wait and not cancel_futures)
