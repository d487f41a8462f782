"""A register index in partitions: each a slice of the register that fits in memory on its own.

Rows go to a partition by a region key (the postcode, else the place name), hashed, so one
postcode's establishments share a partition. A partition holds the
prepared field values and the TF-IDF rows of its records, and their positions in the whole
register; what blocking needs about the whole register (how many names hold each n-gram and each
word, the ids shown in the output) stays in the index itself.

On disk a partition is a checksummed artefact of its own, ``part-NNNNN/``, whose manifest's
SHA-256 the index's manifest records: a partition that is missing, replaced or altered is refused
by name when the index opens (missing, replaced) or when the partition is read (altered).

Linking reads the partitions one at a time and keeps the most recently used ones while they stay
under a row budget, so an index larger than memory links in the memory of a few partitions.
"""
from __future__ import annotations

import hashlib
import logging
from collections import OrderedDict
from pathlib import Path

import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..io.artefact import MANIFEST, ArtefactError, csr_arrays, csr_from, load_artefact, write_artefact

log = logging.getLogger(__name__)

PARTITION_KIND = "register-partition"
PARTITION_ROWS = 1_000_000  # default rows per partition when an index is saved
CACHE_ROWS = 4_000_000  # partitions kept in memory while linking, in register rows


class RegisterPartition:
    """Some of a register's records: ``positions_`` (their rows in the whole register, ascending),
    ``prepared_`` (normalized field parts), ``char_matrix_`` and ``word_matrix_`` (TF-IDF rows)."""

    def __init__(self, positions: np.ndarray, prepared: pd.DataFrame, char_matrix: sp.csr_matrix,
                 word_matrix: sp.csr_matrix, name: str = "memory") -> None:
        self.positions_ = np.asarray(positions, dtype=np.int64)
        self.prepared_ = prepared.reset_index(drop=True)
        self.char_matrix_ = char_matrix
        self.word_matrix_ = word_matrix
        self.name = name

    def __len__(self) -> int:
        return len(self.positions_)

    def take(self, rows: np.ndarray, name: str) -> "RegisterPartition":
        return RegisterPartition(self.positions_[rows], self.prepared_.iloc[rows], self.char_matrix_[rows],
                                 self.word_matrix_[rows], name)

    def write(self, directory: Path) -> str:
        """Write into ``directory`` (inside a staging directory); returns its manifest's SHA-256."""
        directory.mkdir()
        arrays = {"positions": self.positions_}
        arrays.update(csr_arrays("char_matrix", self.char_matrix_))
        arrays.update(csr_arrays("word_matrix", self.word_matrix_))
        write_artefact(directory, PARTITION_KIND, {"prepared": self.prepared_}, arrays=arrays,
                       meta={"rows": len(self)})
        return sha256_of(directory / MANIFEST)

    @classmethod
    def read(cls, directory: Path, expected_sha256: str) -> "RegisterPartition":
        check_manifest(directory, expected_sha256)
        art = load_artefact(directory, PARTITION_KIND)
        return cls(art.arrays["positions"], _shared_text(art.tables["prepared"].astype(str)),
                   csr_from(art.arrays, "char_matrix"), csr_from(art.arrays, "word_matrix"), directory.name)


def _shared_text(prepared: pd.DataFrame) -> pd.DataFrame:
    """``text`` is a copy of another column (an establishment's name key): point it at that column's
    strings instead of holding a second string per row (about 70 bytes a row)."""
    if "text" not in prepared.columns:
        return prepared
    for column in prepared.columns:
        if column != "text" and prepared[column].equals(prepared["text"]):
            prepared["text"] = prepared[column]
            break
    return prepared


def region_keys(prepared: pd.DataFrame, fields) -> pd.Series:
    """The partitioning key of each prepared record: its postcode, else its place."""
    postcode = next((f for f in fields if f.kind == "postcode"), None)
    if postcode is not None:
        return prepared[f"{postcode.name}.value"].astype(str)
    city = next((f for f in fields if f.kind == "city"), None)
    if city is not None:
        return prepared[f"{city.name}.value"].astype(str)
    return pd.Series("", index=prepared.index, dtype=object)


def region_columns(fields) -> set[str]:
    """Prepared columns whose equal values imply the same region (so the same partition)."""
    postcode = next((f for f in fields if f.kind == "postcode"), None)
    if postcode is not None:
        return {f"{postcode.name}.value"}
    city = next((f for f in fields if f.kind == "city"), None)
    return {f"{city.name}.value"} if city is not None else set()


def routing_columns(fields) -> list[str]:
    """Prepared columns whose values the index maps to the partitions holding them (postcode, place):
    a rule that pairs only records with equal values of one of them reads only those partitions."""
    out = []
    for kind in ("postcode", "city"):
        field = next((f for f in fields if f.kind == kind), None)
        if field is not None:
            out.append(f"{field.name}.value")
    return out


def routing_table(prepared: pd.DataFrame, owner: np.ndarray, fields) -> pd.DataFrame:
    """Distinct (column, value, partition) of the routing columns' non-empty values."""
    frames = []
    for column in routing_columns(fields):
        values = prepared[column].fillna("").astype(str).to_numpy(dtype=object)
        frame = pd.DataFrame({"column": column, "value": values, "partition": np.asarray(owner, dtype=np.int64)})
        frames.append(frame[frame["value"] != ""].drop_duplicates())
    if not frames:
        return pd.DataFrame({"column": pd.Series(dtype=object), "value": pd.Series(dtype=object),
                             "partition": pd.Series(dtype=np.int64)})
    table = pd.concat(frames, ignore_index=True).drop_duplicates()
    return table.sort_values(["column", "value", "partition"], kind="stable").reset_index(drop=True)


def assign_partitions(regions: pd.Series, partitions: int) -> np.ndarray:
    """Partition number of each record: a stable hash of its region; records without one are dealt
    round the partitions by position."""
    hashed = pd.util.hash_array(regions.fillna("").astype(str).to_numpy(dtype=object))
    out = (hashed % np.uint64(partitions)).astype(np.int64)
    empty = (regions.fillna("") == "").to_numpy()
    out[empty] = np.flatnonzero(empty) % partitions
    return out


class PartitionStore:
    """The partitions of a saved index, read on demand, checked, and kept while under ``cache_rows``."""

    def __init__(self, directory: Path, entries: list[dict], cache_rows: int = CACHE_ROWS) -> None:
        self.directory = Path(directory)
        self.entries = entries
        self.cache_rows = cache_rows
        self._cache: OrderedDict[int, RegisterPartition] = OrderedDict()
        for entry in entries:  # missing or replaced partitions are found when the index opens
            check_manifest(self.directory / entry["name"], entry["manifest_sha256"])

    def __len__(self) -> int:
        return len(self.entries)

    def get(self, k: int) -> RegisterPartition:
        if k in self._cache:
            self._cache.move_to_end(k)
            return self._cache[k]
        entry = self.entries[k]
        part = RegisterPartition.read(self.directory / entry["name"], entry["manifest_sha256"])
        log.info("read register partition %s (%d rows)", entry["name"], len(part))
        self._cache[k] = part
        while len(self._cache) > 1 and sum(len(p) for p in self._cache.values()) > self.cache_rows:
            self._cache.popitem(last=False)
        return part

    def preload(self, ks) -> bool:
        """Read partitions ``ks`` now if together they fit the cache (so forked workers share them)."""
        ks = [int(k) for k in ks]
        if sum(self.entries[k]["rows"] for k in ks) > self.cache_rows:
            return False
        for k in ks:
            self.get(k)
        return True

    def groups(self, ks) -> list[list[int]]:
        """``ks`` cut into groups that fit the cache together (a partition larger than the cache is
        a group of its own), those in memory first: the next batch starts with what the last one
        left, and reads the rest."""
        ks = [int(k) for k in ks]
        held = [k for k in self._cache if k in set(ks)]
        out: list[list[int]] = []
        rows = 0
        for k in held + [k for k in ks if k not in set(held)]:
            size = self.entries[k]["rows"]
            if out and rows + size <= self.cache_rows:
                out[-1].append(k)
                rows += size
            else:
                out.append([k])
                rows = size
        return out

    def release(self) -> int:
        """Let go of the partitions in memory (read again when next needed); the rows they held."""
        rows = sum(len(p) for p in self._cache.values())
        self._cache.clear()
        return rows

    def __getstate__(self) -> dict:
        # Sent to a Dask worker: the worker reads the partitions itself, from the same directory.
        state = dict(self.__dict__)
        state["_cache"] = OrderedDict()
        return state


def check_manifest(directory: Path, expected_sha256: str) -> None:
    path = directory / MANIFEST
    if not path.is_file():
        raise ArtefactError(f"{directory}: register partition missing (listed in the index's manifest)")
    if sha256_of(path) != expected_sha256:
        raise ArtefactError(f"{directory}: register partition replaced or altered since the index was saved "
                            "(its manifest's checksum differs)")


def sha256_of(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()
