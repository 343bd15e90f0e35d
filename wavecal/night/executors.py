"""Where the per-file tasks run: in this process, in local worker processes, or on an existing
Dask distributed cluster (optional dependency, ``pip install "wavecal[dask]"``).

Local workers are safe to use from a plain script: they are started without re-running the
caller's ``__main__`` module (the tasks are wavecal functions and need nothing from it), so a
script calling :func:`~wavecal.night.run_night` with ``workers=2`` and no
``if __name__ == "__main__":`` guard works. They also end by themselves, within
:data:`PARENT_CHECK_S` seconds, when the process that started them dies, whatever killed it
(``kill -9`` included): each watches its parent process id.
"""
from __future__ import annotations

import contextlib
import multiprocessing
import os
import sys
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Any

from ..status import Status

__all__ = ["TaskPool", "PARENT_CHECK_S"]

#: Seconds between two checks, in each worker, that the parent process is still alive.
PARENT_CHECK_S = 0.25


def _watch_parent(parent_pid: int) -> None:
    """Worker initializer: end this worker as soon as ``parent_pid`` is no longer its parent."""

    def watch() -> None:
        while os.getppid() == parent_pid:
            time.sleep(PARENT_CHECK_S)
        os._exit(1)  # the parent is gone: no one will collect the results

    threading.Thread(target=watch, name="wavecal-parent-watch", daemon=True).start()


@contextlib.contextmanager
def _main_module_hidden() -> Iterator[None]:
    """Start worker processes without making them import the caller's ``__main__`` module.

    ``spawn`` workers run the parent's main script again (as ``__mp_main__``) unless it has
    neither ``__spec__`` nor ``__file__``; both are hidden while the workers start, then put
    back.
    """
    main = sys.modules.get("__main__")
    saved = {name: main.__dict__[name] for name in ("__file__", "__spec__")
             if main is not None and name in main.__dict__}
    try:
        if main is not None:
            main.__dict__.pop("__file__", None)
            if "__spec__" in saved:
                main.__spec__ = None
        yield
    finally:
        if main is not None:
            main.__dict__.update(saved)


def _serial(fn: Callable[..., dict], items: Sequence[dict]) -> Iterator[tuple[int, dict]]:
    for i, kwargs in enumerate(items):
        yield i, fn(**kwargs)


def _call(fn: Callable[..., dict], kwargs: dict) -> dict:
    return fn(**kwargs)


def _outcome(fut: Any, kwargs: dict) -> dict:
    try:
        return fut.result()
    except Exception as exc:  # a worker died: report, do not stop the night
        return {"status": Status.FAILED, "reason": f"worker failed: {type(exc).__name__}: {exc}"}


class TaskPool:
    """Where tasks run, kept open across the phases of a night (workers start once).

    Parameters
    ----------
    workers : int
        Local worker processes (1: run here, in order).
    scheduler : str, optional
        Address of a Dask distributed scheduler (``tcp://host:port``); overrides ``workers``.

    Use as a context manager; the worker processes or the cluster connection are opened at the
    first task that needs them and closed on exit.
    """

    def __init__(self, *, workers: int = 1, scheduler: str | None = None) -> None:
        self.workers = max(int(workers), 1)
        self.scheduler = scheduler
        self._pool: ProcessPoolExecutor | None = None
        self._client: Any = None

    def __enter__(self) -> TaskPool:
        return self

    def __exit__(self, *exc: object) -> None:
        if self._pool is not None:
            self._pool.shutdown()
        if self._client is not None:
            self._client.close()

    def run(self, fn: Callable[..., dict], items: Sequence[dict]) -> Iterator[tuple[int, dict]]:
        """Run ``fn(**kwargs)`` for each entry of ``items``; yield ``(index, result)`` as each
        ends.

        ``fn`` must be a module-level function returning a dict (it should catch its own
        errors); a task whose worker dies yields ``{"status": "failed", "reason": ...}``.
        """
        if self.scheduler:
            return self._dask(fn, items)
        if self.workers > 1 and len(items) > 1:
            return self._processes(fn, items)
        return _serial(fn, items)

    def _processes(self, fn, items):
        if self._pool is None:
            ctx = multiprocessing.get_context("spawn")  # no fork of a threaded parent
            self._pool = ProcessPoolExecutor(max_workers=self.workers, mp_context=ctx,
                                             initializer=_watch_parent,
                                             initargs=(os.getpid(),))
        with _main_module_hidden():  # workers start at the first submissions
            futures = {self._pool.submit(_call, fn, kw): i for i, kw in enumerate(items)}
        for fut in as_completed(futures):
            yield futures[fut], _outcome(fut, items[futures[fut]])

    def _dask(self, fn, items):
        try:
            from distributed import Client
            from distributed import as_completed as dask_completed
        except ImportError as exc:
            msg = ('running on a Dask cluster needs the optional dependency: '
                   'pip install "wavecal[dask]" (dask[distributed])')
            raise ImportError(msg) from exc
        if self._client is None:
            self._client = Client(self.scheduler)
        futures = [self._client.submit(_call, fn, kw, pure=False) for kw in items]
        index = {f.key: i for i, f in enumerate(futures)}
        for fut in dask_completed(futures):
            yield index[fut.key], _outcome(fut, items[index[fut.key]])
