"""Run a row-wise step over a table too big for memory: streamed in chunks, resumable, local or on Dask.

:func:`run_chunked` reads the input chunk by chunk (:class:`titlematch.io.TableReader`), calls
``process`` on each chunk, stores each result in a run directory and, when every chunk is done,
assembles the output and the rejects file atomically. Memory holds about one chunk at a time.

Run directory (default ``OUT.run/`` beside the output)::

    manifest.json                 what the run is: input fingerprint (size and SHA-256), options and
                                  their hash, chunk size, encoding; on success also the counts
    journal.jsonl                 one JSON line per finished chunk (index, row range, read position,
                                  counts, checksums of its files), appended and fsync'd: the commit point
    chunk-000000.parquet          a chunk's output rows
    chunk-000000.rejects.parquet  a chunk's rejected and flagged rows (row, column, reason, value)
    lock                          held while a run is going, so two runs cannot share the directory

Rerunning the same command after a crash continues after the last chunk in the journal; a chunk
written but not journaled is done again. A run directory made for another input (different
content), other options, another chunk size, encoding or library version is refused with a
message; ``restart=True`` (``--restart``) deletes it and starts over. On success the directory is
removed unless ``keep_run=True`` (``--keep-run``); a kept, finished directory makes a rerun only
reassemble the output.

Counts always add up: ``rows_in = rows_out + rows_rejected``. A row is rejected once however many
reasons it has. Rows kept with a note (a cell truncated at ``MAX_CELL_CHARS``) are listed in the
rejects file too and counted as ``rows_flagged``, not as rejected.
"""
from __future__ import annotations

import fcntl
import functools
import glob
import hashlib
import json
import logging
import os
import shutil
from collections.abc import Callable, Iterable, Iterator
from contextlib import ExitStack
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from .. import __version__
from ..io import (CSV_SUFFIXES, EXCEL_SUFFIXES, PARQUET_SUFFIXES, REJECT_COLUMNS, ROW_COLUMN, InputError,
                 ReadPosition, Rejects, TableChunk, TableReader, atomic_path, file_sha256, refuse_overwrite,
                 rejects_path_for, write_table)
from ..io.write import csv_quoting
from .progress import progress

log = logging.getLogger(__name__)

# Working columns a step adds to mark refusals. Their names start with a NUL character, which no
# column of a read table can hold (the readers refuse such names), so a user's own column, even one
# called "_reject_reason", is never taken for them.
REJECT_REASON_COLUMN = "\x00reject_reason"  # process sets it non-empty on rows it refuses
REJECT_COLUMN_COLUMN = "\x00reject_column"  # optional: the column the refusal is about
RUN_FORMAT = 1
ENGINES = ("local", "dask")
_MANIFEST, _JOURNAL, _LOCK = "manifest.json", "journal.jsonl", "lock"
_CHUNK_REJECT_COLUMNS = ["row", "column", "reason", "value"]
PROGRESS_MIN_ROWS = 10_001  # progress bars only on files over 10,000 rows

Process = Callable[[pd.DataFrame], pd.DataFrame]


class RunConflict(InputError):
    """An existing run directory belongs to another run (input, options or settings differ), or is in use."""


@dataclass(frozen=True)
class RunResult:
    """What a chunked run did. ``rows_in == rows_out + rows_rejected`` always holds."""

    output: Path
    rows_in: int
    rows_out: int
    rows_rejected: int
    rows_flagged: int
    chunks: int
    resumed_from: int  # chunks taken from an earlier, interrupted run (0 for a fresh run)
    rejects_path: Path
    run_dir: Path | None  # None when removed after success
    encoding: str | None
    encoding_note: str = ""  # CSV: the encoding, how it was chosen, lines set aside ("" for other formats)


def default_run_dir(out_path: str | os.PathLike) -> Path:
    """``OUT.run/`` beside the output file."""
    out_path = Path(out_path)
    return out_path.with_name(out_path.name + ".run")


def options_digest(options: dict) -> str:
    """SHA-256 of the options as canonical JSON (sorted keys); options must be JSON values."""
    try:
        text = json.dumps(options, sort_keys=True, separators=(",", ":"), allow_nan=False)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"options must be a dict of JSON values (str, numbers, lists, dicts), got {options!r}: "
                         f"{exc}") from exc
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def run_chunked(input_path: str | os.PathLike, out_path: str | os.PathLike, process: Process, *,
                required: Iterable[str] = (), options: dict, run_dir: str | os.PathLike | None = None,
                chunk_rows: int = 50_000, encoding: str | None = None, quiet: bool = False,
                engine: str = "local", scheduler=None, rejects_path: str | os.PathLike | None = None,
                restart: bool = False, keep_run: bool = False, desc: str | None = None) -> RunResult:
    """Apply ``process`` to ``input_path`` chunk by chunk and write ``out_path`` (CSV or Parquet by suffix).

    Parameters
    ----------
    input_path : CSV, Parquet or .xlsx table; never modified.
    out_path : output table; .csv/.txt/.tsv and .parquet/.pq are written as they stream; .xlsx is
        assembled in memory.
    process : called with each chunk (strings plus ``_row``, the source row number) and returning
        one row per input row, in the same order. Extra columns are the step's results. A row with a
        non-empty ``REJECT_REASON_COLUMN`` goes to the rejects file instead of the output (with the column
        named in ``REJECT_COLUMN_COLUMN`` if present); both columns are never written. ``_row`` may be
        dropped or kept unchanged. It is also called on empty chunks and must return the same
        columns every time. For ``engine="dask"`` it must be picklable (a module-level function or
        an object such as a fitted coder); it is sent to each worker once.
    required : columns the input must have (``InputError`` naming the file and its columns).
    options : JSON-serialisable dict of everything that changes the output (step name, parameters,
        artefact checksums); a run is resumed only with equal options.
    run_dir : run directory; default ``OUT.run`` beside the output.
    chunk_rows : records per chunk.
    encoding : CSV encoding; None to detect (logged).
    quiet : no progress bar (shown only for inputs over 10,000 rows).
    engine : "local" or "dask".
    scheduler : for Dask, a scheduler address ("tcp://host:8786"), a ``distributed.Client``, or None
        to start a local cluster with one single-threaded worker process per core.
    rejects_path : where rejected and flagged rows go; default ``OUT.rejects.csv``. Always written.
    restart : delete an existing run directory and start over.
    keep_run : keep the run directory after success.
    desc : progress bar label.

    Returns
    -------
    RunResult

    Example::

        def shout(frame):
            return frame.assign(title_upper=frame["title"].str.upper())

        result = run_chunked("titles.csv", "titles_upper.csv", shout, required=["title"],
                             options={"step": "shout"}, chunk_rows=10_000)
        assert result.rows_in == result.rows_out + result.rows_rejected
    """
    input_path, out_path = Path(input_path), Path(out_path)
    if engine not in ENGINES:
        raise ValueError(f"engine must be one of {', '.join(ENGINES)}, got {engine!r}")
    if not isinstance(options, dict):
        raise ValueError(f"options must be a dict, got {type(options).__name__}")
    if scheduler is not None and engine != "dask":
        raise ValueError(f"a scheduler ({scheduler!r}) is only used with engine='dask'")
    suffix = out_path.suffix.lower()
    if suffix not in CSV_SUFFIXES | PARQUET_SUFFIXES | EXCEL_SUFFIXES:
        raise InputError(f"{out_path}: unknown output format {suffix!r}; use .csv or .parquet")
    refuse_overwrite(out_path, [input_path])
    if rejects_path is not None:
        refuse_overwrite(rejects_path, [input_path], "rejects file")
    else:
        refuse_overwrite(rejects_path_for(out_path), [input_path], "rejects file")
    reader = TableReader(input_path, chunk_rows=chunk_rows, required=tuple(required), encoding=encoding)
    run_dir = Path(run_dir) if run_dir is not None else default_run_dir(out_path)
    rejects_path = Path(rejects_path) if rejects_path is not None else rejects_path_for(out_path)
    identity = {
        "format": RUN_FORMAT,
        "titlematch": __version__,
        "input": {"size": input_path.stat().st_size, "sha256": file_sha256(input_path)},
        "options_sha256": options_digest(options),
        "chunk_rows": chunk_rows,
        "encoding": reader.encoding,
        # CSV output: chunks are stored as CSV text and assembly only concatenates them
        "chunk_format": "csv" if suffix in CSV_SUFFIXES else "parquet",
    }
    with ExitStack() as stack:
        run = _RunDirectory(run_dir, identity, options, input_path)
        stack.enter_context(run.open(restart))
        _remove_stale_temporaries(out_path, rejects_path)
        entries = run.entries
        counts = _Counts.of(entries)
        resumed_from = len(entries)
        if resumed_from:
            log.info("%s: resuming from chunk %d (%d rows done)", run_dir, resumed_from, counts.rows_in)
        start = ReadPosition.from_dict(entries[-1]["end"]) if entries else None
        bar = progress(range(0), total=reader.total_rows, desc=desc or input_path.name,
                       quiet=quiet, min_total=PROGRESS_MIN_ROWS)
        update = getattr(bar, "update", None)
        if update and counts.rows_in:
            update(counts.rows_in)
        chunks = reader.chunks(start=start, first_index=resumed_from)
        try:
            work = functools.partial(work_on_chunk, chunk_format=identity["chunk_format"])
            for chunk, done in _mapped(work, process, chunks, engine, scheduler):
                entry = run.commit(chunk, done)
                counts.add(entry)
                if update:
                    update(entry["rows_in"])
        except BaseException:
            run.forget_if_empty()
            raise
        finally:
            if hasattr(bar, "close"):
                bar.close()
        columns = run.columns if run.columns is not None else _empty_columns(process, reader)
        _assemble_rejects(run, rejects_path, input_path)
        _assemble_output(run, out_path, columns)
        run.finish(counts, out_path, rejects_path)
    if not keep_run:
        shutil.rmtree(run_dir, ignore_errors=True)
    return RunResult(output=out_path, rows_in=counts.rows_in, rows_out=counts.rows_out,
                     rows_rejected=counts.rows_rejected, rows_flagged=counts.rows_flagged,
                     chunks=len(run.entries), resumed_from=resumed_from, rejects_path=rejects_path,
                     run_dir=run_dir if keep_run else None, encoding=reader.encoding,
                     encoding_note=reader.encoding_note)


# -- engines ---------------------------------------------------------------------------------------
def _mapped(work: Callable, process: Process, chunks: Iterator[TableChunk], engine: str, scheduler) \
        -> Iterator[tuple[TableChunk, "ChunkDone"]]:
    """(chunk, work(chunk, process)) in chunk order, computed here or on a Dask cluster."""
    if engine == "local":
        for chunk in chunks:
            yield chunk, work(chunk, process)
        return
    from .dask_engine import DaskChunkMap
    with DaskChunkMap(process, scheduler=scheduler) as mapper:
        yield from mapper.map(chunks, work)


# -- one chunk -------------------------------------------------------------------------------------
@dataclass
class ChunkDone:
    """A chunk's finished results, as the engine hands them back: output bytes, rejects, counts."""

    payload: bytes          # the output rows, CSV text without header or a Parquet file
    columns: list[str]
    rejects: pd.DataFrame   # row, column, reason, value
    counts: dict


def work_on_chunk(chunk: TableChunk, process: Process, chunk_format: str = "csv") -> ChunkDone:
    """Everything done to one chunk, wherever it runs: the step, its checks, the output's bytes.

    Both engines call this very function, so their results are the same bytes.
    """
    result = process(chunk.frame.copy())
    output, rejects, counts = _finish_chunk(chunk, result)
    if chunk_format == "csv":
        payload = output.to_csv(index=False, header=False, lineterminator="\n",
                                quoting=csv_quoting(output)).encode("utf-8")
    else:
        sink = pa.BufferOutputStream()
        pq.write_table(pa.Table.from_pandas(output, preserve_index=False), sink)
        payload = sink.getvalue().to_pybytes()
    return ChunkDone(payload, [str(c) for c in output.columns], rejects, counts)


def _finish_chunk(chunk: TableChunk, result: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    """Check what ``process`` returned; split off refused rows; count. Returns (output, rejects, counts)."""
    frame = chunk.frame
    if not isinstance(result, pd.DataFrame):
        raise TypeError(f"process must return a DataFrame, got {type(result).__name__} for chunk {chunk.index}")
    if len(result) != len(frame):
        raise ValueError(f"process returned {len(result)} rows for chunk {chunk.index} of {len(frame)} rows; "
                         f"it must return one row per input row (mark refusals in {REJECT_REASON_COLUMN!r})")
    result = result.reset_index(drop=True)
    rows = frame[ROW_COLUMN].to_numpy()
    if ROW_COLUMN in result.columns and not (result[ROW_COLUMN].to_numpy() == rows).all():
        raise ValueError(f"process changed or reordered {ROW_COLUMN!r} in chunk {chunk.index}; "
                         "it must return the rows in the order given")
    rejects = Rejects()
    rejects.extend(chunk.rejects)
    refused = pd.Series(False, index=result.index)
    if REJECT_REASON_COLUMN in result.columns:
        reasons = result[REJECT_REASON_COLUMN].fillna("").astype(str)
        refused = reasons.str.len() > 0
        about = result.get(REJECT_COLUMN_COLUMN, pd.Series("", index=result.index)).fillna("").astype(str)
        for i in refused[refused].index:
            column = about[i]
            value = frame.at[i, column] if column in frame.columns else ""
            rejects.add("", int(rows[i]), column, reasons[i], value)
    output = result[~refused.to_numpy()].drop(columns=[ROW_COLUMN, REJECT_REASON_COLUMN, REJECT_COLUMN_COLUMN],
                                              errors="ignore").reset_index(drop=True)
    read = set(rows.tolist())
    noted = {row for _, row in rejects.rows()}
    set_aside = noted - read
    if len(set_aside) != chunk.records - len(frame):  # the reader's own bookkeeping must add up
        raise RuntimeError(f"chunk {chunk.index}: {chunk.records} records read, {len(frame)} kept, "
                           f"but {len(set_aside)} rows set aside")
    kept = set(rows[~refused.to_numpy()].tolist())
    counts = {"rows_in": chunk.records, "rows_out": len(output), "rows_rejected": chunk.records - len(output),
              "rows_flagged": len(kept & noted)}
    all_rows = read | noted
    counts["first_row"] = min(all_rows) if all_rows else None
    counts["last_row"] = max(all_rows) if all_rows else None
    table = rejects.frame()[_CHUNK_REJECT_COLUMNS]
    table = table.astype({"row": "int64"}).sort_values("row", kind="stable").reset_index(drop=True)
    return output, table, counts


def _empty_columns(process: Process, reader: TableReader) -> list[str]:
    """Output columns when no chunk was read (an empty input): what process makes of an empty frame."""
    empty = pd.DataFrame({c: pd.Series([], dtype=object) for c in reader.columns})
    empty[ROW_COLUMN] = pd.Series([], dtype="int64")
    result = process(empty)
    return [c for c in result.columns if c not in (ROW_COLUMN, REJECT_REASON_COLUMN, REJECT_COLUMN_COLUMN)]


@dataclass
class _Counts:
    rows_in: int = 0
    rows_out: int = 0
    rows_rejected: int = 0
    rows_flagged: int = 0

    @classmethod
    def of(cls, entries: list[dict]) -> "_Counts":
        counts = cls()
        for entry in entries:
            counts.add(entry)
        return counts

    def add(self, entry: dict) -> None:
        for name in ("rows_in", "rows_out", "rows_rejected", "rows_flagged"):
            setattr(self, name, getattr(self, name) + int(entry[name]))

    def as_dict(self) -> dict:
        return {"rows_in": self.rows_in, "rows_out": self.rows_out, "rows_rejected": self.rows_rejected,
                "rows_flagged": self.rows_flagged}


# -- the run directory -----------------------------------------------------------------------------
class _RunDirectory:
    """Manifest, journal and chunk files of one run; see the module docstring for the layout."""

    def __init__(self, path: Path, identity: dict, options: dict, input_path: Path) -> None:
        self.path = path
        self.identity = identity
        self.options = options
        self.input_path = input_path
        self.entries: list[dict] = []
        self.columns: list[str] | None = None
        self.fresh = False
        self._journal = None

    def chunk_file(self, index: int, rejects: bool = False) -> Path:
        if rejects:
            return self.path / f"chunk-{index:06d}.rejects.parquet"
        return self.path / f"chunk-{index:06d}.{self.identity['chunk_format']}"

    # opening, resuming, refusing
    def open(self, restart: bool):
        stack = ExitStack()
        self._check_ours()
        self.path.mkdir(parents=True, exist_ok=True)
        lock = stack.enter_context(open(self.path / _LOCK, "a+b"))
        try:
            fcntl.flock(lock.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            stack.close()
            raise RunConflict(f"{self.path}: another titlematch run is using this run directory") from None
        try:
            if restart:
                log.info("%s: discarding the earlier run (restart)", self.path)
                for path in self.path.iterdir():
                    if path.name != _LOCK:
                        path.unlink()
            manifest = self.path / _MANIFEST
            if manifest.exists() and not (self.path / _JOURNAL).exists():
                (self.path / _JOURNAL).touch()  # a crash between writing the manifest and the journal
            if manifest.exists():
                self._check_same_run(manifest)
                self.entries = self._read_journal()
            else:
                self.fresh = True
                self._write_manifest({"state": "running"})
                (self.path / _JOURNAL).touch()
            self._remove_orphans()
            if self.entries:
                self.columns = list(self.entries[0]["columns"])
            self._journal = stack.enter_context(open(self.path / _JOURNAL, "ab"))
        except BaseException:
            stack.close()
            raise
        return stack

    def _check_ours(self) -> None:
        if not self.path.exists():
            return
        if not self.path.is_dir():
            raise RunConflict(f"{self.path}: exists and is not a run directory; choose another --run-dir")
        ours = {_MANIFEST, _JOURNAL, _LOCK}
        strangers = [p.name for p in self.path.iterdir()
                     if p.name not in ours and not (p.name.startswith("chunk-") and p.suffix in (".parquet", ".csv"))
                     and not p.name.endswith(".tmp")]
        if strangers:
            raise RunConflict(f"{self.path}: is not a titlematch run directory (it holds {', '.join(strangers[:5])}); "
                              "choose another --run-dir")

    def _check_same_run(self, manifest: Path) -> None:
        try:
            saved = json.loads(manifest.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise RunConflict(f"{manifest}: unreadable run manifest ({exc}); rerun with --restart to start over"
                              ) from None
        saved_identity = saved.get("identity", {})
        labels = {"input": "input file content", "options_sha256": "options", "chunk_rows": "--chunk-rows",
                  "encoding": "encoding", "titlematch": "titlematch version", "format": "run format",
                  "chunk_format": "output format (CSV or Parquet)"}
        differs = [name for name in labels if saved_identity.get(name) != self.identity[name]]
        if differs:
            detail = ""
            if "options_sha256" in differs:  # name the options that changed, not their (long) values
                then = saved.get("options") if isinstance(saved.get("options"), dict) else {}
                changed = sorted(k for k in set(then) | set(self.options) if then.get(k) != self.options.get(k))
                detail = f" ({', '.join(changed[:8]) or 'unreadable'}{' ...' if len(changed) > 8 else ''})"
            state = "a finished" if saved.get("state") == "complete" else "an unfinished"
            raise RunConflict(f"{self.path}: holds {state} run with different "
                              f"{', '.join(labels[d] for d in differs)}{detail}; rerun with --restart to discard "
                              "it and start over, or give another --run-dir")

    def _read_journal(self) -> list[dict]:
        """Journal entries whose chunk files are present and intact, in order; the rest is cut off."""
        journal = self.path / _JOURNAL
        entries: list[dict] = []
        good_bytes = 0
        with open(journal, "rb") as handle:
            for raw in handle:
                if not raw.endswith(b"\n"):
                    break  # a line cut short by a crash
                try:
                    entry = json.loads(raw)
                except ValueError:
                    break
                if entry.get("chunk") != len(entries) or not self._chunk_intact(entry):
                    break
                entries.append(entry)
                good_bytes += len(raw)
        if good_bytes != journal.stat().st_size:
            log.warning("%s: journal cut back to %d complete chunks", journal, len(entries))
            with open(journal, "r+b") as handle:
                handle.truncate(good_bytes)
                os.fsync(handle.fileno())
        return entries

    def _chunk_intact(self, entry: dict) -> bool:
        for rejects, key in ((False, "output_sha256"), (True, "rejects_sha256")):
            path = self.chunk_file(entry["chunk"], rejects)
            if not path.exists() or file_sha256(path) != entry.get(key):
                return False
        return True

    def _remove_orphans(self) -> None:
        """Chunk files written after the last journaled chunk (a crash before the commit) are redone."""
        done = {self.chunk_file(e["chunk"]).name for e in self.entries} | \
               {self.chunk_file(e["chunk"], True).name for e in self.entries}
        for path in self.path.iterdir():
            if (path.name.startswith("chunk-") and path.name not in done) or path.name.endswith(".tmp"):
                path.unlink()

    def forget_if_empty(self) -> None:
        """A fresh run that failed before any chunk leaves nothing behind, so a corrected rerun starts clean."""
        if self.fresh and not self.entries:
            if self._journal is not None:
                self._journal.close()
            shutil.rmtree(self.path, ignore_errors=True)

    # writing
    def commit(self, chunk: TableChunk, done: ChunkDone) -> dict:
        """Write a chunk's files durably, then append its journal line: the chunk is done once that line is."""
        if self.columns is None:
            self.columns = done.columns
        elif done.columns != self.columns:
            raise ValueError(f"process returned columns {done.columns} for chunk {chunk.index}, "
                             f"but {self.columns} for the first chunk; every chunk must have the same columns")
        out_file, rej_file = self.chunk_file(chunk.index), self.chunk_file(chunk.index, True)
        _write_durable(lambda tmp: tmp.write_bytes(done.payload), out_file)
        _write_durable(lambda tmp: pq.write_table(pa.Table.from_pandas(done.rejects, preserve_index=False), tmp),
                       rej_file)
        counts = dict(done.counts)
        entry = {"chunk": chunk.index, "first_row": counts.pop("first_row"), "last_row": counts.pop("last_row"),
                 "start": chunk.start.to_dict(), "end": chunk.end.to_dict(), **counts, "columns": done.columns,
                 "output_sha256": hashlib.sha256(done.payload).hexdigest(), "rejects_sha256": file_sha256(rej_file)}
        self._journal.write((json.dumps(entry, sort_keys=True) + "\n").encode("utf-8"))
        self._journal.flush()
        os.fsync(self._journal.fileno())
        self.entries.append(entry)
        return entry

    def _write_manifest(self, extra: dict) -> None:
        manifest = {"identity": self.identity, "options": self.options, "input_path": str(self.input_path),
                    **extra}
        with atomic_path(self.path / _MANIFEST) as tmp:
            tmp.write_text(json.dumps(manifest, indent=2, sort_keys=True) + "\n", encoding="utf-8")
            _fsync(tmp)

    def finish(self, counts: _Counts, out_path: Path, rejects_path: Path) -> None:
        self._write_manifest({"state": "complete", "chunks": len(self.entries), **counts.as_dict(),
                              "output": str(out_path), "rejects": str(rejects_path)})


def _remove_stale_temporaries(*paths: Path) -> None:
    """Temporary files an interrupted assembly left beside the outputs (named as atomic_path names them)."""
    for path in paths:
        if path.parent.is_dir():
            for stale in path.parent.glob(f".{glob.escape(path.name)}.*.tmp"):
                stale.unlink(missing_ok=True)


def _fsync(path: Path) -> None:
    with open(path, "rb") as handle:
        os.fsync(handle.fileno())


def _write_durable(write: Callable[[Path], object], path: Path) -> None:
    """``write(tmp)`` then fsync, rename into place, fsync the directory: the file is whole or absent."""
    with atomic_path(path) as tmp:
        write(tmp)
        _fsync(tmp)
    try:
        directory = os.open(path.parent, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(directory)
    finally:
        os.close(directory)


# -- assembling the final files ------------------------------------------------------------------------
def _chunk_frames(run: _RunDirectory, rejects: bool) -> Iterator[pd.DataFrame]:
    for entry in run.entries:
        yield pd.read_parquet(run.chunk_file(entry["chunk"], rejects))


def _assemble_output(run: _RunDirectory, out_path: Path, columns: list[str]) -> None:
    suffix = out_path.suffix.lower()
    if suffix in PARQUET_SUFFIXES:
        _assemble_parquet(run, out_path, columns)
    elif suffix in EXCEL_SUFFIXES:
        frames = list(_chunk_frames(run, False))
        write_table(pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=columns), out_path)
    else:
        _concatenate_csv(run, out_path, columns)


def _concatenate_csv(run: _RunDirectory, path: Path, columns: list[str]) -> None:
    """The header, then each chunk's CSV text as written when the chunk was done (byte for byte)."""
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as handle:
            handle.write(pd.DataFrame(columns=columns).to_csv(index=False, lineterminator="\n").encode("utf-8"))
            for entry in run.entries:
                with open(run.chunk_file(entry["chunk"]), "rb") as chunk:
                    shutil.copyfileobj(chunk, handle, 1 << 20)
            handle.flush()
            os.fsync(handle.fileno())


def _assemble_csv(frames: Iterable[pd.DataFrame], path: Path, columns: list[str]) -> None:
    """Chunks appended one after another to a temporary file, renamed into place at the end."""
    with atomic_path(path) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="") as handle:
            header = True
            for frame in frames:
                frame.to_csv(handle, index=False, header=header, lineterminator="\n", quoting=csv_quoting(frame))
                header = False
            if header:
                pd.DataFrame(columns=columns).to_csv(handle, index=False, lineterminator="\n")
            handle.flush()
            os.fsync(handle.fileno())


def _assemble_parquet(run: _RunDirectory, path: Path, columns: list[str]) -> None:
    """One row group per chunk, under one schema unified over all chunks (a column all empty in one
    chunk takes its type from the others); schema metadata is dropped so equal data gives equal bytes."""
    files = [run.chunk_file(entry["chunk"]) for entry in run.entries]
    schemas = [pq.read_schema(f).remove_metadata() for f in files]
    if schemas:
        schema = pa.unify_schemas(schemas, promote_options="permissive")
    else:
        schema = pa.schema([pa.field(c, pa.string()) for c in columns])
    with atomic_path(path) as tmp:
        with pq.ParquetWriter(tmp, schema) as writer:
            for file in files:
                table = pq.read_table(file).select(schema.names).replace_schema_metadata(None)
                if table.num_rows:
                    writer.write_table(table.cast(schema))
        _fsync(tmp)


def _assemble_rejects(run: _RunDirectory, path: Path, input_path: Path) -> None:
    """The rejects of every chunk, with the input file named as given to this run."""
    def frames() -> Iterator[pd.DataFrame]:
        for frame in _chunk_frames(run, True):
            frame.insert(0, "file", str(input_path))
            yield frame[REJECT_COLUMNS]

    if path.suffix.lower() in CSV_SUFFIXES:
        _assemble_csv(frames(), path, REJECT_COLUMNS)
    else:
        collected = list(frames())
        write_table(pd.concat(collected, ignore_index=True) if collected else pd.DataFrame(columns=REJECT_COLUMNS),
                    path)
