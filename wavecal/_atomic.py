"""Atomic file output: write to a temporary file in the target folder, then rename into place."""
from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

__all__ = ["atomic_path", "atomic_write_text", "atomic_write_bytes"]


@contextlib.contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it replaces ``path`` atomically.

    On any exception the temporary file is removed and ``path`` is left as it was.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    os.chmod(tmp_path, 0o644)  # mkstemp makes 0600; products are meant to be shared
    try:
        yield tmp_path
        os.replace(tmp_path, path)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def atomic_write_bytes(path: str | Path, data: bytes, *, durable: bool = True) -> None:
    """Write ``data`` to ``path`` atomically.

    ``durable`` also flushes the data to the disk (fsync) before the rename, so that a power
    cut cannot leave an empty file behind. Products that can be regenerated from others (the
    QA reports) skip it: the rename alone still guarantees that a reader sees the old file or
    the new one, never a part.
    """
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            fh.write(data)
            if durable:
                fh.flush()
                os.fsync(fh.fileno())


def atomic_write_text(path: str | Path, text: str, *, durable: bool = True) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically (see :func:`atomic_write_bytes`)."""
    atomic_write_bytes(path, text.encode("utf-8"), durable=durable)
