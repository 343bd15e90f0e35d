"""Progress reporting for the nightly run: a bar on a terminal, plain lines otherwise."""
from __future__ import annotations

import sys
import time
from typing import TextIO

__all__ = ["Progress"]


class Progress:
    """Callable ``progress(done, total, message)`` writing to ``stream`` (default stderr).

    On a terminal it redraws one bar line; otherwise it writes one plain line per call.
    """

    def __init__(self, stream: TextIO | None = None, *, width: int = 30) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.width = width
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.start = time.monotonic()

    def __call__(self, done: int, total: int, message: str) -> None:
        elapsed = time.monotonic() - self.start
        if self.tty:
            filled = int(self.width * done / total) if total else self.width
            bar = "#" * filled + "-" * (self.width - filled)
            end = "\n" if done >= total else ""
            self.stream.write(f"\r[{bar}] {done}/{total} {elapsed:6.1f}s {message[:40]:<40}{end}")
        else:
            self.stream.write(f"[{done}/{total}] {elapsed:.1f}s {message}\n")
        self.stream.flush()
