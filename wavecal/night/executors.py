"""Where the per-file tasks run: in this process, in local worker processes, or on an existing
Dask distributed cluster (optional dependency, ``pip install "wavecal[dask]"``)."""
from __future__ import annotations

import multiprocessing
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Any

__all__ = ["run_tasks"]


def _serial(fn: Callable[..., dict], items: Sequence[dict]) -> Iterator[tuple[int, dict]]:
    for i, kwargs in enumerate(items):
        yield i, fn(**kwargs)


def _call(fn: Callable[..., dict], kwargs: dict) -> dict:
    return fn(**kwargs)


def _processes(fn: Callable[..., dict], items: Sequence[dict], workers: int
               ) -> Iterator[tuple[int, dict]]:
    ctx = multiprocessing.get_context("spawn")  # no fork of a threaded parent
    with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
        futures = {pool.submit(_call, fn, kw): i for i, kw in enumerate(items)}
        for fut in as_completed(futures):
            yield futures[fut], _outcome(fut, items[futures[fut]])


def _outcome(fut: Any, kwargs: dict) -> dict:
    try:
        return fut.result()
    except Exception as exc:  # a worker died: report, do not stop the night
        return {"status": "failed", "reason": f"worker failed: {type(exc).__name__}: {exc}"}


def _dask(fn: Callable[..., dict], items: Sequence[dict], address: str
          ) -> Iterator[tuple[int, dict]]:
    try:
        from distributed import Client
        from distributed import as_completed as dask_completed
    except ImportError as exc:
        msg = ('running on a Dask cluster needs the optional dependency: '
               'pip install "wavecal[dask]" (dask[distributed])')
        raise ImportError(msg) from exc
    with Client(address) as client:
        futures = [client.submit(_call, fn, kw, pure=False) for kw in items]
        index = {f.key: i for i, f in enumerate(futures)}
        for fut in dask_completed(futures):
            yield index[fut.key], _outcome(fut, items[index[fut.key]])


def run_tasks(fn: Callable[..., dict], items: Sequence[dict], *, workers: int = 1,
              scheduler: str | None = None) -> Iterator[tuple[int, dict]]:
    """Run ``fn(**kwargs)`` for each entry of ``items``; yield ``(index, result)`` as each ends.

    ``fn`` must be a module-level function returning a dict (it should catch its own errors);
    a task whose worker dies yields ``{"status": "failed", "reason": ...}``.

    Parameters
    ----------
    workers : int
        Local worker processes (1: run here, in order).
    scheduler : str, optional
        Address of a Dask distributed scheduler (``tcp://host:port``); overrides ``workers``.
    """
    if scheduler:
        return _dask(fn, items, scheduler)
    if workers > 1 and len(items) > 1:
        return _processes(fn, items, min(workers, len(items)))
    return _serial(fn, items)
