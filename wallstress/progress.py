"""A small progress line on stderr for long batches; silent when stderr is not a terminal."""

from __future__ import annotations

import sys
import time


class Progress:
    """Stage-by-stage progress: ``with Progress(total=3) as p: p.step("reading")``."""

    def __init__(self, total: int, *, enabled: bool | None = None, stream=None):
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.total = max(int(total), 1)
        self.done = 0
        self.t0 = time.perf_counter()

    def step(self, label: str, advance: int = 1) -> None:
        self.done = min(self.done + advance, self.total)
        if not self.enabled:
            return
        width = 24
        filled = int(width * self.done / self.total)
        bar = "#" * filled + "-" * (width - filled)
        elapsed = time.perf_counter() - self.t0
        self.stream.write(f"\r[{bar}] {self.done}/{self.total} {label:<28} {elapsed:6.1f}s")
        self.stream.flush()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        if self.enabled:
            self.stream.write("\n")
            self.stream.flush()
        return False
