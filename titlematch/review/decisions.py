"""The coders' decisions journal: one JSON object per line, appended and flushed to disk at once.

The journal is the only state of a review session. Every step a coder takes (a code chosen, a
title set aside, "not codable", an undo) and every lease (which coder holds which title) is one
line, written with ``O_APPEND`` under an exclusive file lock and ``fsync``-ed before the page is
told it is saved, so killing the server at any moment loses at most a line that was being
written and never acknowledged. Nothing is rewritten: an undo is a new line naming the line it
takes back.

A line cut short by a crash is the last line of the file; the next writer closes it with a
newline and the reader counts it in ``damaged`` (line number and text) instead of failing, so
the count is reported, never silently dropped.

Lines (all carry ``id``, ``action``, ``coder`` and ``time``, UTC ISO 8601):

- ``code``: ``title`` (normalized key), ``code``, ``machine_code``, ``machine_confidence``,
  ``records``, ``context``, ``example_title``, ``remark``, ``round`` (1, or 2 for the second coder
  of a double-coded title);
- ``uncodable``: as ``code``; ``code`` is the classification's residual code or ``""``;
- ``skip``: ``title`` set aside by this coder for later;
- ``undo``: ``undoes`` (the id of the coder's own line it takes back);
- ``lease``: ``title`` now held by ``coder`` (one lease per coder; it lapses after a while);
- ``start``: a server started (``double_code`` share, queue file) - an audit trail.
"""
from __future__ import annotations

import contextlib
import json
import os
import uuid
import zlib
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

try:  # POSIX advisory locks keep two servers on one journal from interleaving a read and a write
    import fcntl
except ImportError:  # pragma: no cover - Windows: one server per journal
    fcntl = None

DECIDED = ("code", "uncodable")
UNDOABLE = ("code", "uncodable", "skip")
ACTIONS = DECIDED + ("skip", "undo", "lease", "start")


def now_utc() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def parse_time(text: str) -> float:
    try:
        return datetime.fromisoformat(str(text).replace("Z", "+00:00")).timestamp()
    except ValueError:
        return 0.0


def in_double_sample(title: str, share: float) -> bool:
    """Whether a title belongs to the double-coded sample: a stable hash of the title, so every
    server started with the same share picks the same titles."""
    return share > 0 and zlib.crc32(title.encode("utf-8")) % 10_000 < round(share * 10_000)


@dataclass
class JournalState:
    """What the journal says so far, folded line by line."""

    lines: dict = field(default_factory=dict)            # id -> entry of every undoable line
    undone: set = field(default_factory=set)             # ids taken back
    order: list = field(default_factory=list)            # undoable ids in journal order
    leases: dict = field(default_factory=dict)           # coder -> (title, time in seconds)
    damaged: list = field(default_factory=list)          # (line number, text) of unreadable lines
    starts: list = field(default_factory=list)

    def effective(self, actions=UNDOABLE) -> list[dict]:
        """Lines of the given actions that were not taken back, in journal order."""
        return [self.lines[i] for i in self.order if i not in self.undone and self.lines[i]["action"] in actions]


class Journal:
    """Append-only decisions file shared by every coder on one queue.

    ``refresh()`` reads what other servers appended since the last call (only whole lines);
    ``append(entry)`` writes one line durably; ``locked()`` holds the exclusive lock across a
    read-decide-write step such as choosing the next title.
    """

    def __init__(self, path: str | os.PathLike):
        self.path = Path(path)
        if self.path.exists() and not self.path.is_file():
            raise ValueError(f"decisions file {str(self.path)!r} exists and is not a file")
        self.path.parent.mkdir(parents=True, exist_ok=True)
        created = not self.path.exists()
        self._fd = os.open(self.path, os.O_RDWR | os.O_APPEND | os.O_CREAT, 0o640)
        if created:  # the new name must survive a crash too
            with contextlib.suppress(OSError):
                dir_fd = os.open(self.path.parent, os.O_RDONLY)
                os.fsync(dir_fd)
                os.close(dir_fd)
        self.state = JournalState()
        self._offset = 0
        self._line_no = 0
        self.refresh()

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    @contextlib.contextmanager
    def locked(self):
        if fcntl is not None:
            fcntl.flock(self._fd, fcntl.LOCK_EX)
        try:
            yield
        finally:
            if fcntl is not None:
                fcntl.flock(self._fd, fcntl.LOCK_UN)

    def refresh(self) -> JournalState:
        size = os.fstat(self._fd).st_size
        if size <= self._offset:
            return self.state
        data = os.pread(self._fd, size - self._offset, self._offset)
        end = data.rfind(b"\n")
        if end < 0:
            return self.state  # a line still being written, or torn; closed by the next append
        for raw in data[:end].split(b"\n"):
            self._line_no += 1
            self._fold(raw)
        self._offset += end + 1
        return self.state

    def _fold(self, raw: bytes) -> None:
        text = raw.decode("utf-8", errors="replace").strip()
        if not text:
            return
        try:
            entry = json.loads(text)
        except ValueError:
            entry = None
        if not isinstance(entry, dict) or entry.get("action") not in ACTIONS or not entry.get("id"):
            self.state.damaged.append((self._line_no, text[:200]))
            return
        entry["_line"] = self._line_no
        state, action = self.state, entry["action"]
        if action in UNDOABLE:
            state.lines[entry["id"]] = entry
            state.order.append(entry["id"])
            if action in DECIDED or action == "skip":
                lease = state.leases.get(entry.get("coder"))
                if lease and lease[0] == entry.get("title"):
                    del state.leases[entry.get("coder")]
        elif action == "undo":
            target = state.lines.get(entry.get("undoes"))
            if target is not None and target.get("coder") == entry.get("coder"):
                state.undone.add(target["id"])
        elif action == "lease":
            state.leases[entry.get("coder")] = (entry.get("title"), parse_time(entry.get("time")))
        elif action == "start":
            state.starts.append(entry)

    def append(self, entry: dict) -> dict:
        """Write one line and fsync it; returns the entry with its ``id`` and ``time``."""
        entry = {"id": uuid.uuid4().hex, "time": now_utc(), **entry}
        line = json.dumps(entry, ensure_ascii=False, separators=(",", ":")).encode("utf-8") + b"\n"
        size = os.fstat(self._fd).st_size
        if size and os.pread(self._fd, 1, size - 1) != b"\n":
            line = b"\n" + line  # close a line torn by a crash so this one stays whole
        written = 0
        while written < len(line):  # O_APPEND: each write lands at the end, even with other writers
            written += os.write(self._fd, line[written:])
        os.fsync(self._fd)
        self.refresh()
        return entry


def read_journal(path: str | os.PathLike) -> JournalState:
    """Fold a decisions file without writing to it (``feedback``, ``evaluate``)."""
    from ..io import InputError

    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such decisions file")
    reader = _Reader(path)
    return reader.state


class _Reader(Journal):
    """Read-only fold: a torn last line (no newline yet) is reported as damaged too."""

    def __init__(self, path: Path):  # noqa: D107 - no file descriptor kept open for writing
        self.path = path
        self.state = JournalState()
        self._line_no = 0
        data = path.read_bytes()
        lines = data.split(b"\n")
        if lines and lines[-1] == b"":
            lines.pop()
        for raw in lines:
            self._line_no += 1
            self._fold(raw)
