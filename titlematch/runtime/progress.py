"""Progress bars and the one-line summary each command prints."""
from __future__ import annotations

import sys
import time
from typing import Iterable, TypeVar

from tqdm.auto import tqdm

T = TypeVar("T")


def progress(items: Iterable[T], *, total: int | None = None, desc: str = "", quiet: bool = False,
             min_total: int = 0) -> Iterable[T]:
    """Wrap ``items`` in a progress bar on stderr unless ``quiet`` or the job is small."""
    if quiet or (total is not None and total < min_total):
        return items
    return tqdm(items, total=total, desc=desc, file=sys.stderr, leave=False, mininterval=0.5)


class Summary:
    """Times a command and prints ``titlematch CMD: rows in N, ... time T s`` at the end."""

    def __init__(self, command: str, quiet: bool = False) -> None:
        self.command = command
        self.quiet = quiet
        self.counts: dict[str, int] = {}
        self.notes: list[str] = []
        self.start = time.perf_counter()

    def set(self, **counts: int) -> None:
        self.counts.update({k: int(v) for k, v in counts.items()})

    def note(self, text: str) -> None:
        """Add a short remark to the line (say the input's encoding and the evidence for it)."""
        if text:
            self.notes.append(text)

    def line(self) -> str:
        parts = [f"{k.replace('_', ' ')} {v:,}" for k, v in self.counts.items()]
        parts += self.notes
        parts.append(f"time {time.perf_counter() - self.start:.1f} s")
        return f"titlematch {self.command}: " + ", ".join(parts)

    def print(self) -> None:
        print(self.line())  # --quiet silences progress bars, never the summary


class Stages:
    """A progress bar over the named stages of a long step (silent when ``quiet``)."""

    def __init__(self, total: int, desc: str, quiet: bool = False) -> None:
        self._bar = None if quiet else tqdm(total=total, desc=desc, file=sys.stderr, leave=False)

    def step(self, name: str) -> None:
        if self._bar is not None:
            self._bar.set_postfix_str(name)
            self._bar.update(1)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
