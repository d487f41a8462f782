"""The business register as a linking target: fields, prepared values and a saved index.

A register is prepared once: every compared field is normalized (names, USPS-style
addresses, postcodes, phonetic keys), the register's names are vectorized with two
TF-IDF models (character 3-grams for blocking, word tokens for IDF-weighted name
similarity) and the result is saved as a checksummed artefact of Parquet tables and
``.npy`` arrays. ``titlematch link`` then reads the index instead of the raw register.

Example
-------
>>> index = RegisterIndex().fit(register_frame)          # doctest: +SKIP
>>> index.save("register_index")                           # doctest: +SKIP
>>> index = RegisterIndex.load("register_index")           # doctest: +SKIP
"""
from __future__ import annotations

import logging
import os
import re
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd
import pyarrow as pa
import scipy.sparse as sp
from sklearn.feature_extraction.text import TfidfTransformer, TfidfVectorizer
from unidecode import unidecode

from ..io.artefact import ArtefactError, load_artefact, read_mapped_table, staged_directory, write_artefact
from ..io import ROW_COLUMN, InputError, file_sha256, require_columns
from ..normalize.address import normalize_addresses, normalize_postcodes
from ..normalize.name import normalize_names
from ..normalize.phonetic import phonetic_keys
from ..runtime.pool import map_slices, resolve_workers, slices
from .tfidf import PARALLEL_ROWS, local_counts
from .partitions import (CACHE_ROWS, PARTITION_ROWS, PartitionStore, RegisterPartition, assign_partitions,
                         csr_from, region_keys, routing_table)

log = logging.getLogger(__name__)

ARTEFACT_KIND = "register-index"

# Field kinds and what each compares; a kind decides preparation, blocking and comparison.
KINDS = {
    "name": "establishment name: normalized key, trade name, legal form, branch number",
    "address": "street address parsed to USPS Publication 28 form: house number, street, unit",
    "city": "place name, compared with Jaro-Winkler",
    "postcode": "postal code, compared exactly and on its first three characters",
    "industry": "NAICS code, compared on the depth of the shared prefix (2, 3, 4, 6 digits)",
    "person_name": "a person's given name or surname, compared with Jaro-Winkler and phonetic keys",
    "string": "any other text, compared with Jaro-Winkler",
    "number": "a number such as a house number, compared exactly and within a tolerance",
    "date": "a date as digits (YYYYMMDD), compared exactly and by edit distance",
    "exact": "a category (state, sex), compared exactly",
}

# The establishment defaults: role -> kind. ``naics`` is optional: used when both tables have it.
ESTABLISHMENT_KINDS = {"name": "name", "address": "address", "city": "city", "postcode": "postcode",
                       "naics": "industry"}
OPTIONAL_FIELDS = {"naics"}

# Words that never start a blocking key: articles and conjunctions say nothing about the business.
STOP_WORDS = frozenset({"the", "and", "of", "a", "an", "at", "for", "to", "in", "on", "by", "de", "la", "le",
                        "el", "los", "las", "y", "et"})
_NON_WORD = re.compile(r"[^0-9a-z]+")
_NON_DIGIT = re.compile(r"\D+")


@dataclass(frozen=True)
class Field:
    """One compared field: its ``name`` (feature prefix), ``kind`` (see ``KINDS``) and the column
    holding it in the incoming records (``column``) and in the register (``register_column``).

    Example: ``Field("employer", "name", column="employer_name", register_column="name")``.
    """

    name: str
    kind: str
    column: str = ""
    register_column: str = ""
    optional: bool = False

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"field {self.name!r}: kind {self.kind!r} is not one of {', '.join(KINDS)}")
        if not self.column:
            object.__setattr__(self, "column", self.name)
        if not self.register_column:
            object.__setattr__(self, "register_column", self.column)


def resolve_fields(fields: Mapping[str, str | Field] | Sequence[Field] | None = None) -> list[Field]:
    """Turn a field specification into a list of ``Field``.

    ``None`` gives the establishment fields (name, address, city, postcode, optional naics);
    a mapping ``{"name": "employer_name", "address": "street"}`` overrides columns of those
    roles (the kind follows the role; an unknown role is a plain ``string``);
    a list of ``Field`` is taken as it is.
    """
    if fields is None:
        return [Field(role, kind, optional=role in OPTIONAL_FIELDS) for role, kind in ESTABLISHMENT_KINDS.items()]
    if isinstance(fields, Mapping):
        resolved = {f.name: f for f in resolve_fields(None)}
        for role, spec in fields.items():
            if isinstance(spec, Field):
                resolved[role] = spec
            else:
                kind = ESTABLISHMENT_KINDS.get(role, "string")
                resolved[role] = Field(role, kind, column=str(spec), optional=role in OPTIONAL_FIELDS)
        return list(resolved.values())
    out = list(fields)
    if not out or not all(isinstance(f, Field) for f in out):
        raise ValueError("fields must be a mapping of role -> column or a non-empty list of Field")
    names = [f.name for f in out]
    if len(set(names)) != len(names):
        raise ValueError(f"field names must be unique: {names}")
    return out


# --------------------------------------------------------------------------- preparation

def clean_text(values: pd.Series) -> pd.Series:
    """Lower-case ASCII words separated by single spaces (accents folded with unidecode)."""
    uniq, inverse = _unique(values)
    cleaned = [(" ".join(_NON_WORD.sub(" ", unidecode(v).lower()).split())) for v in uniq]
    return pd.Series(np.asarray(cleaned, dtype=object)[inverse], index=values.index)


def _unique(values: pd.Series) -> tuple[list[str], np.ndarray]:
    codes, uniq = pd.factorize(values.fillna("").astype(str), sort=False)
    return list(uniq), codes


def _first_significant(key: str) -> str:
    for token in key.split():
        if token not in STOP_WORDS:
            return token
    return ""


def _prepare_name(values: pd.Series, p: str) -> dict[str, pd.Series]:
    uniq, inverse = _unique(values)
    norm = normalize_names(pd.Series(uniq, dtype=object)).reset_index(drop=True)
    key = clean_text(norm["key"].fillna("").astype(str))
    trade = clean_text(norm["trade_name"].fillna("").astype(str))
    first = key.map(_first_significant)
    phonetic = pd.Series(phonetic_keys(first.tolist(), "metaphone"), dtype=object).fillna("").astype(str)
    parts = {"key": key, "trade": trade, "legal_form": clean_text(norm["legal_form"].fillna("").astype(str)),
             "branch": clean_text(norm["branch"].fillna("").astype(str)), "first": first,
             "phonetic": phonetic.where(first != "", "")}
    return {f"{p}.{k}": pd.Series(v.to_numpy()[inverse], index=values.index) for k, v in parts.items()}


def _prepare_address(values: pd.Series, p: str) -> dict[str, pd.Series]:
    uniq, inverse = _unique(values)
    parsed = normalize_addresses(pd.Series(uniq, dtype=object)).reset_index(drop=True).fillna("").astype(str)
    street = (parsed["predirectional"] + " " + parsed["street_name"] + " " + parsed["suffix"] + " "
              + parsed["postdirectional"])
    direction = (parsed["predirectional"] + " " + parsed["postdirectional"]).str.strip()
    parts = {"house_number": parsed["house_number"].str.upper().str.strip(),
             "street": clean_text(street), "street_name": clean_text(parsed["street_name"]),
             "suffix": parsed["suffix"].str.upper().str.strip(), "direction": direction.str.upper(),
             "unit": parsed["unit"].str.upper().str.replace(r"[^0-9A-Z]", "", regex=True),
             "key": parsed["key"].str.upper().str.strip()}
    return {f"{p}.{k}": pd.Series(v.to_numpy()[inverse], index=values.index) for k, v in parts.items()}


def _prepare_postcode(values: pd.Series, p: str) -> dict[str, pd.Series]:
    uniq, inverse = _unique(values)
    code = pd.Series(normalize_postcodes(pd.Series(uniq, dtype=object)), dtype=object).fillna("").astype(str)
    code = code.reset_index(drop=True).str.upper()
    compact = code.str.replace(r"[^0-9A-Z]", "", regex=True)
    # The five-digit ZIP (or the whole Canadian code) is the unit compared; ZIP+4 adds a delivery route.
    main = code.str.split("-").str[0].str.replace(" ", "", regex=False)
    return {f"{p}.value": pd.Series(main.to_numpy()[inverse], index=values.index),
            f"{p}.prefix": pd.Series(compact.str[:3].to_numpy()[inverse], index=values.index)}


def _prepare_digits(values: pd.Series, p: str) -> dict[str, pd.Series]:
    digits = values.fillna("").astype(str).str.replace(_NON_DIGIT, "", regex=True)
    return {f"{p}.value": digits}


def _prepare_person_name(values: pd.Series, p: str) -> dict[str, pd.Series]:
    cleaned = clean_text(values)
    uniq, inverse = _unique(cleaned)
    phonetic = pd.Series(phonetic_keys(uniq, "nysiis"), dtype=object).fillna("").astype(str).to_numpy()
    return {f"{p}.value": cleaned, f"{p}.phonetic": pd.Series(phonetic[inverse], index=values.index)}


def _prepare_text(values: pd.Series, p: str) -> dict[str, pd.Series]:
    return {f"{p}.value": clean_text(values)}


# Abbreviations written in place names ("St Louis", "Ft Worth", "N Haverly"); common practice,
# the directionals as in USPS Publication 28.
PLACE_ABBREVIATIONS = {"st": "saint", "ste": "sainte", "ft": "fort", "mt": "mount", "pt": "point",
                       "n": "north", "s": "south", "e": "east", "w": "west", "hts": "heights", "spgs": "springs"}


def _prepare_place(values: pd.Series, p: str) -> dict[str, pd.Series]:
    cleaned = clean_text(values)
    uniq, inverse = _unique(cleaned)
    expanded = np.asarray([" ".join(PLACE_ABBREVIATIONS.get(w, w) for w in v.split()) for v in uniq], dtype=object)
    return {f"{p}.value": pd.Series(expanded[inverse] if len(uniq) else [], index=values.index, dtype=object)}


_PREPARERS = {"name": _prepare_name, "address": _prepare_address, "city": _prepare_place,
              "postcode": _prepare_postcode, "industry": _prepare_digits, "person_name": _prepare_person_name,
              "string": _prepare_text, "number": _prepare_digits, "date": _prepare_digits, "exact": _prepare_text}




def prepare_records(frame: pd.DataFrame, fields: Sequence[Field], *, side: str = "new",
                    workers: int = 1) -> pd.DataFrame:
    """Normalize the compared fields of ``frame`` into ``FIELD.PART`` columns plus ``text``.

    ``side`` picks ``Field.column`` ("new") or ``Field.register_column`` ("register").
    ``text`` is what the TF-IDF models read: the first name field, else the person names joined.
    ``workers`` processes share the rows (-1 = every core); every row is prepared on its own, so
    the result does not depend on it.
    """
    parts = slices(len(frame), resolve_workers(workers), PARALLEL_ROWS)
    if len(parts) > 1:
        done = map_slices(lambda rows: _prepare_serial(frame.iloc[rows], fields, side), parts, workers)
        return pd.concat(done, ignore_index=True)
    return _prepare_serial(frame, fields, side)


def _prepare_serial(frame: pd.DataFrame, fields: Sequence[Field], side: str) -> pd.DataFrame:
    columns: dict[str, pd.Series] = {}
    for f in fields:
        column = f.column if side == "new" else f.register_column
        values = frame[column] if column in frame.columns else pd.Series("", index=frame.index, dtype=object)
        columns.update(_PREPARERS[f.kind](values, f.name))
    prepared = pd.DataFrame(columns, index=frame.index)
    prepared["text"] = text_of(prepared, fields)
    return prepared.reset_index(drop=True)


def text_of(prepared: pd.DataFrame, fields: Sequence[Field]) -> pd.Series:
    """The text vectorized for blocking and name similarity (see ``prepare_records``)."""
    names = [f for f in fields if f.kind == "name"]
    if names:
        return prepared[f"{names[0].name}.key"]
    people = [f"{f.name}.value" for f in fields if f.kind == "person_name"]
    if not people:
        people = [f"{f.name}.value" for f in fields if f.kind == "string"][:1]
    if not people:
        return pd.Series("", index=prepared.index, dtype=object)
    joined = prepared[people[0]]
    for column in people[1:]:
        joined = joined + " " + prepared[column]
    return joined.str.strip()


def check_fields(frame: pd.DataFrame, fields: Sequence[Field], source: str, side: str) -> list[Field]:
    """Return the fields usable on ``frame``: required ones must exist, missing optional ones are dropped."""
    usable, missing = [], []
    for f in fields:
        column = f.column if side == "new" else f.register_column
        if column in frame.columns:
            usable.append(f)
        elif not f.optional:
            missing.append(f"{column!r} (field {f.name})")
    if missing:
        have = ", ".join(c for c in frame.columns if c != ROW_COLUMN) or "(no columns)"
        raise InputError(f"{source}: missing column(s) {', '.join(missing)}; the file has: {have}; "
                         "map other column names with --fields, e.g. --fields name=employer_name")
    return usable


# --------------------------------------------------------------------------- vectorizers

def _char_vectorizer(vocabulary=None) -> TfidfVectorizer:
    # Character 3-grams inside word boundaries survive typos and word splits (common practice).
    return TfidfVectorizer(analyzer="char_wb", ngram_range=(3, 3), sublinear_tf=True, dtype=np.float32,
                           vocabulary=vocabulary)


def _word_vectorizer(vocabulary=None) -> TfidfVectorizer:
    # Word IDF makes "services", "company", "and" count little in a name similarity.
    return TfidfVectorizer(analyzer="word", token_pattern=r"(?u)\b\w+\b", sublinear_tf=True,
                           dtype=np.float32, vocabulary=vocabulary)


def _vocabulary_table(vectorizer: TfidfVectorizer) -> pd.DataFrame:
    terms = sorted(vectorizer.vocabulary_.items(), key=lambda item: item[1])
    return pd.DataFrame({"term": [t for t, _ in terms], "column": [c for _, c in terms]})


def _restore_vectorizer(make, table: pd.DataFrame, idf: np.ndarray) -> TfidfVectorizer:
    vocabulary = dict(zip(table["term"].astype(str), table["column"].astype(int)))
    vectorizer = make(vocabulary)
    vectorizer.idf_ = idf
    return vectorizer


# --------------------------------------------------------------------------- the index

def fit_tfidf(make, text: pd.Series, nonempty: np.ndarray, workers: int = 1) -> tuple[TfidfVectorizer, sp.csr_matrix]:
    """``make()`` fitted on the non-empty texts, and the TF-IDF rows of every text.

    The same vocabulary, idf and rows as ``TfidfVectorizer.fit`` then ``transform`` in one process,
    but the n-grams are found and counted once, by ``workers`` processes (``tfidf.local_counts``).
    """
    values = text.fillna("").astype(str).to_numpy(dtype=object)
    counts, terms = local_counts(make, values, workers)  # empty texts add no term
    fit_rows = np.flatnonzero(nonempty)
    if len(fit_rows):
        fit_counts = counts[fit_rows]
    else:  # an all-empty register: the vocabulary of "_", so that the models still exist
        fit_counts, terms = local_counts(make, np.asarray(["_"], dtype=object), 1)
        counts = sp.csr_matrix((len(values), len(terms)), dtype=counts.dtype)
    vectorizer = make({term: k for k, term in enumerate(terms.tolist())})
    transformer = TfidfTransformer(norm=vectorizer.norm, use_idf=True, smooth_idf=vectorizer.smooth_idf,
                                   sublinear_tf=vectorizer.sublinear_tf).fit(fit_counts)
    vectorizer.idf_ = transformer.idf_
    return vectorizer, transformer.transform(counts).tocsr()


def register_ids(register: pd.DataFrame, id_column: str, source: str, first_row: int = 1
                 ) -> tuple[pd.Series, pd.Series]:
    """The register's ids (stripped text) and source rows; an empty or repeated id is an InputError
    naming its rows. ``first_row`` numbers the rows of a frame without ``_row``."""
    ids = register[id_column].fillna("").astype(str).str.strip()
    rows = register[ROW_COLUMN] if ROW_COLUMN in register.columns else pd.Series(
        np.arange(first_row, first_row + len(register)), index=register.index)
    empty = ids == ""
    if empty.any():
        shown = ", ".join(str(r) for r in rows[empty].head(10))
        raise InputError(f"{source}: column {id_column!r} is empty in {int(empty.sum())} row(s): "
                         f"row {shown}; every register record needs an id")
    duplicated = ids.duplicated(keep=False)
    if duplicated.any():
        groups = (pd.DataFrame({"id": ids[duplicated], "row": rows[duplicated].astype(str)})
                  .groupby("id", sort=False)["row"].agg(", ".join).head(10))
        shown = "; ".join(f"{i!r} in rows {r}" for i, r in groups.items())
        raise InputError(f"{source}: column {id_column!r} has {int(ids[duplicated].nunique())} "
                         f"duplicated id(s): {shown}")
    return ids, rows


def write_index_root(staging: Path, *, id_column: str, fields: Sequence[Field], register: pd.DataFrame,
                     char_vectorizer: TfidfVectorizer, word_vectorizer: TfidfVectorizer,
                     char_postings: np.ndarray, word_frequency: np.ndarray, partition_of: np.ndarray,
                     entries: list[dict], routing: pd.DataFrame) -> None:
    """Write the index's own files (ids and display columns, vocabularies, idf, postings, the
    partition of each record and the partitions' checksums) into ``staging``, after its partitions."""
    arrays = {"char_idf": char_vectorizer.idf_, "word_idf": word_vectorizer.idf_,
              "char_postings": char_postings, "word_frequency": word_frequency,
              "partition_of": partition_of.astype(np.int32)}
    meta = {"id_column": id_column, "fields": [asdict(f) for f in fields], "records": len(register),
            "partitions": entries}
    write_artefact(staging, ARTEFACT_KIND,
                   {"register": register, "char_vocabulary": _vocabulary_table(char_vectorizer),
                    "word_vocabulary": _vocabulary_table(word_vectorizer), "routing": routing},
                   arrays=arrays, meta=meta, mapped=("register",))


def _take_text(values, rows: np.ndarray) -> np.ndarray:
    rows = np.asarray(rows, dtype=np.int64)
    if isinstance(values, pd.Series):
        return values.take(rows).to_numpy(dtype=object)
    return np.asarray(values, dtype=object)[rows]


class RegisterIndex:
    """A business register prepared for linking, whole in memory or in partitions on disk.

    Parameters
    ----------
    fields : mapping or list of Field, optional
        Compared fields (see ``resolve_fields``); default name, address, city, postcode, naics.
    id_column : str
        The register's identifier column; ids must be present and unique.
    workers : int
        Processes preparing and vectorizing the register (-1 = every core); the index is the same
        for any number.

    Attributes (after ``fit`` or ``load``)
    ----------
    fields_ : list of Field actually used
    ids_ : ndarray of register ids (strings)
    display_ : DataFrame with ``register_name`` and ``register_address`` shown in link output
    char_vectorizer_, word_vectorizer_ : fitted TF-IDF models
    char_postings_, word_frequency_ : register names holding each character n-gram / each word
    partition_of_ : partition of each register record (all 0 for an index built in memory)
    prepared_, char_matrix_, word_matrix_ : the whole register's prepared values and TF-IDF rows
        (CSR, L2-normalized); on a partitioned index these assemble every partition, so linking
        reads ``partition(k)`` instead.
    """

    def __init__(self, fields=None, id_column: str = "register_id", workers: int = -1) -> None:
        self.fields = fields
        self.id_column = id_column
        self.workers = workers

    def fit(self, register: pd.DataFrame, *, source: str = "<register>") -> "RegisterIndex":
        """Validate and prepare ``register``; returns self."""
        if not isinstance(register, pd.DataFrame):
            raise TypeError(f"register must be a pandas DataFrame, got {type(register).__name__}")
        require_columns(register, [self.id_column], source)
        ids, _ = register_ids(register, self.id_column, source)
        self.fields_ = check_fields(register, resolve_fields(self.fields), source, "register")
        self.ids_ = ids.to_numpy(dtype=object)
        self.display_ = self._display(register)
        prepared = prepare_records(register, self.fields_, side="register", workers=self.workers)
        nonempty = (prepared["text"] != "").to_numpy()
        self.char_vectorizer_, chars = fit_tfidf(_char_vectorizer, prepared["text"], nonempty, self.workers)
        self.word_vectorizer_, words = fit_tfidf(_word_vectorizer, prepared["text"], nonempty, self.workers)
        self.char_postings_ = np.bincount(chars.indices, minlength=chars.shape[1])
        self.word_frequency_ = np.bincount(words.indices, minlength=words.shape[1])
        self.partition_of_ = np.zeros(len(ids), dtype=np.int32)
        self._parts, self._store = [RegisterPartition(np.arange(len(ids)), prepared, chars, words)], None
        log.info("%s: register index of %d records, %d character n-grams, %d words", source, len(ids),
                 len(self.char_vectorizer_.vocabulary_), len(self.word_vectorizer_.vocabulary_))
        return self

    def _display(self, register: pd.DataFrame) -> pd.DataFrame:
        def raw(kind_names: Iterable[str]) -> pd.Series:
            cols = [f.register_column for f in self.fields_ if f.kind in kind_names]
            if not cols:
                return pd.Series("", index=register.index, dtype=object)
            joined = register[cols[0]].fillna("").astype(str)
            if not any(f.kind == "name" for f in self.fields_):
                for c in cols[1:]:
                    joined = joined + " " + register[c].fillna("").astype(str)
            return joined.str.strip()
        names = raw(["name"]) if any(f.kind == "name" for f in self.fields_) else raw(["person_name"])
        return pd.DataFrame({"register_name": names.to_numpy(dtype=object),
                             "register_address": raw(["address"]).to_numpy(dtype=object)})

    def _set_register(self, register: pd.DataFrame) -> None:
        text = pd.ArrowDtype(pa.string())
        self.ids_ = register["register_id"].astype(text).reset_index(drop=True)
        self.display_ = register[["register_name", "register_address"]].astype(text).reset_index(drop=True)

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        if state.get("_mapped") is not None:  # sent to another process: it maps the file itself
            state.pop("ids_", None)
            state.pop("display_", None)
        return state

    def __setstate__(self, state: dict) -> None:
        self.__dict__.update(state)
        if state.get("_mapped") is not None and "ids_" not in state:
            # the file the index was opened with, checked against the checksum read then: an index
            # rebuilt in place since is refused, not mixed with the partitions already checked
            path, expected = Path(self._mapped[0]) / "register.arrow", self._mapped[1]
            if not path.is_file() or file_sha256(path) != expected:
                raise ArtefactError(f"{path}: missing or changed since the index was opened (checksum mismatch)")
            self._set_register(read_mapped_table(path))

    def __len__(self) -> int:
        return len(self.ids_)

    def ids_at(self, rows: np.ndarray) -> np.ndarray:
        """The register ids of positions ``rows`` (object array of str)."""
        return _take_text(self.ids_, rows)

    def display_at(self, column: str, rows: np.ndarray) -> np.ndarray:
        """``register_name`` or ``register_address`` of positions ``rows`` (object array of str)."""
        return _take_text(self.display_[column], rows)

    # ---------------------------------------------------------------- partitions
    @property
    def n_partitions(self) -> int:
        return len(self._store) if self._store is not None else len(self._parts)

    def partition(self, k: int) -> RegisterPartition:
        """Partition ``k`` (read from disk and checked on first use when the index was loaded)."""
        return self._store.get(k) if self._store is not None else self._parts[k]

    def preload(self, partitions) -> bool:
        """Read these partitions now if they fit the cache together; True if they are all in memory."""
        return self._store.preload(partitions) if self._store is not None else True

    def release(self) -> int:
        """Let go of the partitions read from disk (a saved index reads them again when next needed;
        an index built in memory keeps its one partition); the register rows let go. The link
        command calls it before its chunks go to Dask workers, which read partitions themselves."""
        return self._store.release() if self._store is not None else 0

    def partition_groups(self, partitions) -> list[list[int]]:
        """``partitions`` in groups that fit the partition cache together (one group for an index
        in memory)."""
        ks = [int(k) for k in partitions]
        return self._store.groups(ks) if self._store is not None else [ks]

    def partitions_holding(self, column: str, values) -> np.ndarray | None:
        """The partitions holding register records with these values of a routing column
        (``partitions.routing_columns``); None when the index cannot tell (saved without the table)."""
        if self.n_partitions == 1:
            return np.zeros(1, dtype=np.int64)
        table = getattr(self, "routing_", None)
        if table is None or not (table["column"] == column).any():
            return None
        rows = table[(table["column"] == column) & table["value"].isin(pd.unique(np.asarray(values, dtype=object)))]
        return np.unique(rows["partition"].to_numpy(dtype=np.int64))

    def partitions_of_regions(self, regions: pd.Series) -> np.ndarray:
        """The partitions holding the register's records of these region keys (see ``region_keys``)."""
        regions = regions[regions.fillna("") != ""]
        return np.unique(assign_partitions(regions, self.n_partitions)) if len(regions) else np.empty(0, int)

    def _whole(self) -> RegisterPartition:
        if self.n_partitions == 1:
            return self.partition(0)
        parts = [self.partition(k) for k in range(self.n_partitions)]
        positions = np.concatenate([p.positions_ for p in parts])
        order = np.argsort(positions, kind="stable")
        prepared = pd.concat([p.prepared_ for p in parts], ignore_index=True).iloc[order]
        chars = sp.vstack([p.char_matrix_ for p in parts], format="csr")[order]
        words = sp.vstack([p.word_matrix_ for p in parts], format="csr")[order]
        return RegisterPartition(positions[order], prepared, chars, words)

    @property
    def prepared_(self) -> pd.DataFrame:
        return self._whole().prepared_

    @property
    def char_matrix_(self) -> sp.csr_matrix:
        return self._whole().char_matrix_

    @property
    def word_matrix_(self) -> sp.csr_matrix:
        return self._whole().word_matrix_

    # ---------------------------------------------------------------- records
    def prepare(self, frame: pd.DataFrame, *, source: str = "<records>", workers: int = 1) -> pd.DataFrame:
        """Prepare incoming records with the register's fields (``Field.column`` names)."""
        check_fields(frame, [f for f in self.fields_ if not f.optional], source, "new")
        return prepare_records(frame, self.fields_, side="new", workers=workers)

    def vectorize(self, text: pd.Series, workers: int = 1) -> tuple[sp.csr_matrix, sp.csr_matrix]:
        """Character and word TF-IDF rows for ``text`` (L2-normalized CSR), by ``workers`` processes."""
        values = text.fillna("").astype(str).to_numpy(dtype=object)
        parts = slices(len(values), resolve_workers(workers), PARALLEL_ROWS)
        if len(parts) <= 1:
            return (self.char_vectorizer_.transform(values).tocsr(), self.word_vectorizer_.transform(values).tocsr())
        done = map_slices(lambda rows: (self.char_vectorizer_.transform(values[rows]).tocsr(),
                                        self.word_vectorizer_.transform(values[rows]).tocsr()), parts, workers)
        return (sp.vstack([c for c, _ in done], format="csr"), sp.vstack([w for _, w in done], format="csr"))

    # ---------------------------------------------------------------- saving
    def save(self, directory: str | os.PathLike, *, partition_rows: int | None = None) -> Path:
        """Save as a checksummed artefact (Parquet + .npy, no pickle) in partitions of about
        ``partition_rows`` records (default ``PARTITION_ROWS``), written beside ``directory`` and
        swapped into place whole: an interrupted save leaves the previous index (or none)."""
        rows = partition_rows or PARTITION_ROWS
        if rows < 1:
            raise ValueError(f"partition_rows must be at least 1, got {rows}")
        whole = self._whole()
        count = max(1, -(-len(self) // rows))
        owner = assign_partitions(region_keys(whole.prepared_, self.fields_), count)
        register = pd.DataFrame({"register_id": np.asarray(self.ids_, dtype=object),
                                 **{c: self.display_[c].to_numpy(dtype=object) for c in self.display_.columns}})
        with staged_directory(directory) as staging:
            entries = []
            for k in range(count):
                name = f"part-{k:05d}"
                members = np.flatnonzero(owner == k)
                entries.append({"name": name, "rows": int(len(members)),
                                "manifest_sha256": whole.take(members, name).write(staging / name)})
            write_index_root(staging, id_column=self.id_column, fields=self.fields_, register=register,
                             char_vectorizer=self.char_vectorizer_, word_vectorizer=self.word_vectorizer_,
                             char_postings=self.char_postings_, word_frequency=self.word_frequency_,
                             partition_of=owner, entries=entries,
                             routing=routing_table(whole.prepared_, owner, self.fields_))
        return Path(directory)

    @classmethod
    def load(cls, directory: str | os.PathLike, *, cache_rows: int = CACHE_ROWS) -> "RegisterIndex":
        """Open an index saved by ``save``; raises ``ArtefactError`` naming a file or partition that is
        missing or was altered. Partitions are read when linking first needs them, and kept while
        the ones in memory hold at most ``cache_rows`` records."""
        # The ids and display columns stay in Arrow's columns: at 10 million rows, Python strings
        # would take about 2 GB more (a string object and a pointer per value); linking takes the
        # few rows it shows (``ids_at``, ``display_at``).
        art = load_artefact(directory, ARTEFACT_KIND, arrow_tables=("register",))
        fields = [Field(**spec) for spec in art.meta["fields"]]
        index = cls(fields=fields, id_column=art.meta.get("id_column", "register_id"))
        index.fields_ = fields
        index._set_register(art.tables["register"])
        # a memory-mapped register table (indexes saved since it was one) is opened again, not copied,
        # where the index is unpickled (a Dask worker): every process shares the file's pages
        mapped = art.manifest["files"].get("register.arrow")
        index._mapped = (str(directory), mapped["sha256"]) if mapped else None
        index.char_vectorizer_ = _restore_vectorizer(_char_vectorizer, art.tables["char_vocabulary"],
                                                     art.arrays["char_idf"])
        index.word_vectorizer_ = _restore_vectorizer(_word_vectorizer, art.tables["word_vocabulary"],
                                                     art.arrays["word_idf"])
        if "partitions" in art.meta:
            index._parts, index._store = [], PartitionStore(Path(directory), art.meta["partitions"], cache_rows)
            index.char_postings_ = art.arrays["char_postings"]
            index.word_frequency_ = art.arrays["word_frequency"]
            index.partition_of_ = art.arrays["partition_of"]
            manifest_files = art.manifest.get("files", {})
            index.routing_ = art.tables["routing"].astype({"column": str, "value": str}) \
                if "routing.parquet" in manifest_files else None  # indexes saved before the table
            return index
        # An index saved before partitions existed: one partition, read whole.
        chars, words = csr_from(art.arrays, "char_matrix"), csr_from(art.arrays, "word_matrix")
        index._parts = [RegisterPartition(np.arange(len(index.ids_)), art.tables["prepared"].astype(str), chars, words)]
        index._store = None
        index.char_postings_ = np.bincount(chars.indices, minlength=chars.shape[1])
        index.word_frequency_ = np.bincount(words.indices, minlength=words.shape[1])
        index.partition_of_ = np.zeros(len(index.ids_), dtype=np.int32)
        return index
