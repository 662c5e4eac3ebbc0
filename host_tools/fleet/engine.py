"""Where fleet work runs: a Dask cluster, local by default or an existing one, and progress over it.

Entry points: cluster(scheduler=None, workers=None, processes=True) is a context manager giving a
dask.distributed Client; watch(futures, what, quiet) waits for futures, with progress, until each
has finished or failed; failure(future) is the one-line reason a future failed.

- No scheduler address: a LocalCluster on this machine, one single-threaded worker process per
  core (the feature and detector work is numpy plus the detector's Python loop, which holds the
  interpreter lock: processes, not threads, use the cores). Nothing to set up, no dashboard.
- A scheduler address ("tcp://host:8786"): the same work goes to that cluster. Its workers must
  have edgevib installed and see the fleet folder at the same path (a shared file system).
Dask itself retries a task whose worker was lost (up to distributed.scheduler.allowed-failures
times), so a killed worker costs time, not results.
"""
from __future__ import annotations

import logging
import os
from contextlib import contextmanager
from typing import Iterator, Sequence

from host_tools.errors import EdgevibError


def local_cores() -> int:
    """Cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


@contextmanager
def cluster(scheduler: str | None = None, workers: int | None = None, processes: bool = True) -> Iterator:
    """A dask.distributed Client: on `scheduler` when given, else on a new local cluster of
    `workers` workers (default: one per core), each one thread; closed on exit."""
    from distributed import Client, LocalCluster

    if scheduler:
        try:
            client = Client(scheduler, timeout="20s")
        except (OSError, TimeoutError) as e:
            raise EdgevibError(f"cannot reach the Dask scheduler at {scheduler} ({e})") from None
        try:
            yield client
        finally:
            client.close()
        return
    n = workers or local_cores()
    if n < 1:
        raise EdgevibError("need at least one worker")
    with LocalCluster(n_workers=n, threads_per_worker=1, processes=processes, dashboard_address=None,
                      silence_logs=logging.ERROR) as lc, Client(lc) as client:
        yield client


def watch(futures: Sequence, what: str, quiet: bool = False) -> list:
    """Wait until every future has finished or failed, with the shared progress display
    (host_tools.progress: a bar on a terminal, a line at every tenth otherwise; off when quiet or
    `edgevib --quiet`), counting tasks as Dask's as_completed hands them back. Returns the futures."""
    from distributed import as_completed

    from host_tools.progress import progress_bar

    if not futures:
        return []
    with progress_bar(len(futures), "tasks", what, enabled=not quiet) as bar:
        for _ in as_completed(futures):
            bar.update(1)
    return list(futures)


def failure(future) -> str | None:
    """None when the future finished; else one line: the EdgevibError's message, or the type and
    message of anything else (an internal error, reported but not hidden)."""
    if future.status == "finished":
        return None
    try:
        exc = future.exception()
    except Exception as e:   # the future itself was lost (cancelled, scheduler gone)
        return f"{type(e).__name__}: {e}"
    if isinstance(exc, EdgevibError):
        return str(exc)
    return f"internal error {type(exc).__name__}: {exc}"
