"""Reading pages on a Dask cluster (``inkcount read --cluster ADDRESS``).

:func:`read_on_cluster` is the cluster path of
:func:`recognizer.reading.stream.read_scans`: the driver (the command line,
the batch store) lists the pages, sends each page job to a running Dask
``distributed`` scheduler, and yields the results **in input order**, like a
one-process read; the driver alone writes the values CSV or the batch. Dask
is an optional extra (``pip install 'inkcount[cluster]'``) imported only
here, and only when a cluster is asked for: the window and a read without
``--cluster`` never import it.

What goes where
---------------
* The **model and the templates** are loaded once by the driver and sent to
  every worker (``Client.scatter(..., broadcast=True)``), so every page is
  read with exactly the driver's model and templates, whatever files the
  worker machines hold. Each worker builds one
  :class:`~recognizer.reading.page.PageReader` from them and keeps it.
* The **scans** are read by the workers from a path they share with the
  driver (a network share mounted at the same place on every machine): only
  the file name and page number travel to a worker, and the page read
  comes back (its image too when a batch keeps it). Paths are made absolute
  on the driver; a file a worker cannot open is that page's problem line
  like any unreadable file.
* At most twice as many pages as the cluster has worker threads are in
  flight (at least 2); pages read ahead of their turn wait **on the
  workers** until the driver takes them, so the driver's memory does not
  grow with the cluster or the number of pages.

Failures
--------
A page whose worker dies is given to another worker by Dask (up to the
scheduler's ``distributed.scheduler.allowed-failures``, 3 by default). When
that is exhausted, or the scheduler cannot be reached, reading stops with a
:class:`ClusterError`: the pages yielded before stay read (each is committed
to a batch as it arrives), and running the same ``inkcount read --batch``
again reads the rest.

``ADDRESS`` is the scheduler's address (``tcp://host:8786``), or
``local:N`` for a cluster of ``N`` worker processes started on this machine
for this read (one thread each) and closed after it: the same path, on one
machine, as the tests use it.
"""

from __future__ import annotations

import os
from collections import deque
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

from recognizer import __version__
from recognizer.digits.model import DigitModel, load_model
from recognizer.forms.template import Template
from recognizer.forms.template_file import load_template
from recognizer.reading.memory import reuse_freed_blocks
from recognizer.reading.page import PageRead, PageReader, read_or_problem
from recognizer.scans.files import ScanProblem, load_page

__all__ = ["LOCAL_PREFIX", "ClusterError", "connect", "read_on_cluster"]

#: ``--cluster local:N`` starts a cluster of N worker processes on this machine.
LOCAL_PREFIX = "local:"
_CONNECT_TIMEOUT_S = 30


class ClusterError(RuntimeError):
    """The cluster could not be reached, or stopped reading (a worker lost too often, the scheduler gone)."""


@dataclass(frozen=True)
class _ReaderSpec:
    """What every worker needs to read pages as the driver would: sent once to each worker."""

    version: str
    model: DigitModel
    templates: tuple[Template, ...]
    keep_image: bool
    pdf_dpi: float
    max_pixels: int


def _import_distributed():
    try:
        import distributed
    except ImportError as exc:
        raise ClusterError("reading on a cluster needs Dask: pip install 'inkcount[cluster]'") from exc
    return distributed


def connect(address: str) -> tuple[Any, Any]:
    """A ``distributed.Client`` for ``address`` and the local cluster started for it (or None).

    ``local:N`` starts ``N`` worker processes on this machine (one thread
    each); anything else is a scheduler address. Raises :class:`ClusterError`
    when Dask is missing or the scheduler cannot be reached.
    """
    distributed = _import_distributed()
    address = address.strip()
    cluster = None
    try:
        if address.startswith(LOCAL_PREFIX):
            try:
                n = int(address[len(LOCAL_PREFIX):])
            except ValueError:
                raise ClusterError(f"--cluster {address}: say how many workers, e.g. local:2") from None
            if n < 1:
                raise ClusterError(f"--cluster {address}: at least one worker is needed")
            cluster = distributed.LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                               dashboard_address=None)
            client = distributed.Client(cluster)
        else:
            client = distributed.Client(address, timeout=_CONNECT_TIMEOUT_S)
    except ClusterError:
        raise
    except Exception as exc:  # OSError, TimeoutError, a bad address: one clear line
        if cluster is not None:
            cluster.close()
        raise ClusterError(f"cannot reach the Dask scheduler at {address}: {exc}") from exc
    return client, cluster


def read_on_cluster(
    jobs: Iterable[Any],
    settings: Any,
    *,
    model: DigitModel | None = None,
) -> Iterator[PageRead | ScanProblem]:
    """Read the page ``jobs`` on the cluster of ``settings.cluster``; yield results in input order.

    ``jobs`` are :func:`~recognizer.reading.stream.page_jobs` (a file refused
    while counting is passed on as it is), ``settings`` the
    :class:`~recognizer.reading.stream.ReadSettings` of the read. ``model`` is the driver's model,
    loaded from ``settings.model_path`` when not given. Raises
    :class:`ClusterError` as the module notes say; stopping early (closing
    the generator) cancels the pages in flight.
    """
    assert settings.cluster
    spec = _ReaderSpec(
        __version__, model or load_model(settings.model_path),
        tuple(load_template(p) for p in settings.template_paths),
        settings.keep_image, settings.pdf_dpi, settings.max_pixels,
    )
    distributed = _import_distributed()
    client, cluster = connect(settings.cluster)
    pending: deque[tuple[Any, Any]] = deque()
    try:
        try:
            shared = client.scatter(spec, broadcast=True, hash=False)
        except Exception as exc:
            raise ClusterError(f"cannot send the model to the cluster at {settings.cluster}: {exc}") from exc
        limit, submitted = _in_flight_limit(client), 0
        for job in jobs:
            if isinstance(job, ScanProblem):
                pending.append((None, job))
            else:
                absolute = replace(job, source=Path(os.path.abspath(job.source)))
                pending.append((job, client.submit(_read_job, absolute, shared, pure=False)))
                submitted += 1
                if submitted % 64 == 0:
                    limit = _in_flight_limit(client)
            while len(pending) > limit:
                yield _take(pending.popleft(), distributed, settings.cluster)
        while pending:
            yield _take(pending.popleft(), distributed, settings.cluster)
    finally:
        futures = [f for job, f in pending if job is not None]
        pending.clear()
        try:
            if futures:
                client.cancel(futures)
            client.close()
        finally:
            if cluster is not None:
                cluster.close()


def _in_flight_limit(client) -> int:
    """Twice the worker threads of the cluster, at least 2."""
    try:
        threads = sum(client.nthreads().values())
    except Exception:  # the scheduler briefly unreachable: keep a small window
        threads = 1
    return max(2, 2 * threads)


def _take(item: tuple[Any, Any], distributed, address: str) -> PageRead | ScanProblem:
    """The result of one pending page, with its file named as the caller named it."""
    job, future = item
    if job is None:
        return future  # a problem met while listing the pages
    try:
        result = future.result()
    except distributed.KilledWorker as exc:
        raise ClusterError(
            f"{job.source}: page {job.page}: the Dask workers reading this page stopped "
            f"({exc}); the pages before it are read, run the same command again to read the rest"
        ) from exc
    except _VersionMismatch as exc:
        raise ClusterError(str(exc)) from exc
    except Exception as exc:  # the scheduler gone, a lost connection
        raise ClusterError(
            f"{job.source}: page {job.page}: the cluster at {address} stopped answering "
            f"({type(exc).__name__}: {exc}); the pages before it are read, run the same command again "
            "to read the rest"
        ) from exc
    finally:
        future.release()
    return replace(result, source=job.source)


# ---------------------------------------------------------------- on the workers

class _VersionMismatch(RuntimeError):
    pass


# One reader per worker process, for the spec it was built from (kept alive
# with it, so its id cannot be reused).
_worker_reader: tuple[_ReaderSpec, PageReader] | None = None


def _reader_for(spec: _ReaderSpec) -> PageReader:
    global _worker_reader
    if _worker_reader is None or _worker_reader[0] is not spec:
        if spec.version != __version__:
            raise _VersionMismatch(f"a Dask worker runs Inkcount {__version__}, this computer {spec.version}: "
                                   "install the same version on every machine")
        _one_opencv_thread()
        reuse_freed_blocks()
        _worker_reader = (spec, PageReader(spec.model, keep_image=spec.keep_image, templates=spec.templates))
    return _worker_reader[1]


def _one_opencv_thread() -> None:
    """Each worker reads one page at a time on one core (as a pool worker does)."""
    import cv2

    cv2.setNumThreads(1)


def _read_job(job: Any, spec: _ReaderSpec) -> PageRead | ScanProblem:
    """Run on a worker: load one page (a ``PageJob``) from the shared path and read it."""
    reader = _reader_for(spec)
    page = load_page(job.source, job.page, pdf_dpi=spec.pdf_dpi, max_pixels=spec.max_pixels)
    return page if isinstance(page, ScanProblem) else read_or_problem(reader, page)
