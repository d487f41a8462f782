"""The title dictionary: past years' coded titles turned into code distributions.

Built from coded records (``title``, ``code``, optional ``context`` and ``year``) plus the
official classification titles. What it keeps is aggregated, never the records:

- ``counts``: records per (normalized key, code, year);
- ``context_counts``: records per (key, context token, code, year), so ``teacher`` with
  ``elementary`` and ``teacher`` with ``high`` can part;
- ``official``: the classification's own titles, normalized, as entries of their own;
- ``catalogue``: code -> official title.

Keeping the year on every count makes ``update`` (add a year) equal to a rebuild on the
union, and lets the recency weight (a half-life in years) be recomputed at any time.
"""
from __future__ import annotations

import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from unidecode import unidecode

from ..io.artefact import load_artefact, save_artefact
from .classification import COLUMNS as CLASSIFICATION_COLUMNS, Classification
from .codes import to_soc_2018
from .gate import scripts_of_titles
from ..io import ROW_COLUMN, InputError, Rejects, file_sha256, read_table, require_columns
from ..normalize.title import normalize_titles

ARTEFACT_KIND = "title-dictionary"
UNDATED = -1  # year of official titles and records without a year
_CONTEXT_STOP = frozenset("a an and the of for in at on to with by or co inc llc dept department unit".split())
_TOKEN = re.compile(r"naics:\d+|[a-z0-9]+")  # already-made NAICS tokens survive a second pass
_NAICS = re.compile(r"^\d{2,6}$")


def context_tokens(text: str) -> list[str]:
    """Tokens that describe a record's context: words of a free-text description, or the
    sector / subsector / industry-group prefixes of a NAICS code (``"611110"`` -> ``naics:61`` ...)."""
    text = unidecode(str(text or "")).lower().strip()
    if not text:
        return []
    if _NAICS.match(text):
        return [f"naics:{text[:n]}" for n in range(2, min(len(text), 4) + 1)]
    tokens = sorted({t for t in _TOKEN.findall(text) if t not in _CONTEXT_STOP and len(t) > 1})
    # the whole description as one more token: "fast food restaurant" says more than its words
    # (NAICS prefixes are a hierarchy already: the longest is the most specific)
    if len(tokens) > 1 and not tokens[0].startswith("naics:"):
        return tokens + ["=" + "_".join(tokens)]
    return tokens


@dataclass
class DictionaryDiff:
    new_titles: pd.DataFrame      # key, weight in the newer dictionary
    vanished_titles: pd.DataFrame  # key, weight in the older dictionary
    changed_codes: pd.DataFrame   # key, old_code, new_code, old_share, new_share

    def summary(self) -> dict:
        return {"new_titles": len(self.new_titles), "vanished_titles": len(self.vanished_titles),
                "changed_codes": len(self.changed_codes)}


class TitleDictionary:
    """Code distributions per normalized title and per title + context token.

    Parameters
    ----------
    half_life : float
        Years after which a record counts half as much as one from the newest year.
    code_pattern : str or None
        Regular expression every code must match; ``None`` (default) takes codes as opaque strings,
        checked only against the classification when there is one.
    code_level : {"as-is", "soc"}
        ``"soc"`` maps O*NET-SOC codes to their SOC 2018 detailed occupation on the way in.

    Examples
    --------
    >>> import pandas as pd
    >>> past = pd.DataFrame({"title": ["RN", "Registered Nurse"], "code": ["29-1141"] * 2, "year": [2023, 2024]})
    >>> d = TitleDictionary().fit(past)
    >>> d.lookup("registered nurse").iloc[0]["code"]
    '29-1141'
    """

    def __init__(self, half_life: float = 3.0, code_pattern: str | None = None, code_level: str = "as-is"):
        self.half_life = half_life
        self.code_pattern = code_pattern
        self.code_level = code_level
        self.counts = pd.DataFrame({"key": pd.Series(dtype=str), "code": pd.Series(dtype=str),
                                    "year": pd.Series(dtype="int64"), "count": pd.Series(dtype="int64")})
        self.context_counts = pd.DataFrame({"key": pd.Series(dtype=str), "token": pd.Series(dtype=str),
                                            "code": pd.Series(dtype=str), "year": pd.Series(dtype="int64"),
                                            "count": pd.Series(dtype="int64")})
        self.units = pd.DataFrame({"key": pd.Series(dtype=str), "context": pd.Series(dtype=str),
                                   "code": pd.Series(dtype=str), "year": pd.Series(dtype="int64"),
                                   "count": pd.Series(dtype="int64")})
        self.official = pd.DataFrame({"key": pd.Series(dtype=str), "code": pd.Series(dtype=str)})
        self.catalogue = pd.DataFrame({"code": pd.Series(dtype=str), "title": pd.Series(dtype=str)})
        # the whole classification (groups too): code, title, parent, level, leaf
        self.classification = pd.DataFrame({c: pd.Series(dtype=str) for c in CLASSIFICATION_COLUMNS})
        self.provenance: list[dict] = []
        self.rejects = Rejects()
        self._derived: dict = {}

    # ------------------------------------------------------------------ building
    def fit(self, records: pd.DataFrame | list, classification: pd.DataFrame | None = None, *,
            source: str = "past records", official_weight: int = 1) -> "TitleDictionary":
        """Build from coded records (a DataFrame or a list of DataFrames); returns self.

        Records need ``title`` and ``code``; ``context`` and ``year`` are optional. ``classification``
        is a ``Classification`` or a table ``code, title`` [, ``parent`` | ``level``]. Rows with an
        empty title, an invalid code, a code outside ``classification`` or an unparseable year go
        to ``rejects`` with their reason; the provenance counts rows in = kept + rejected.
        """
        fresh = type(self)(half_life=self.half_life, code_pattern=self.code_pattern, code_level=self.code_level)
        self.__dict__.update(fresh.__dict__)  # refitting starts from nothing
        if classification is not None:
            self._set_classification(classification, official_weight)
        frames = records if isinstance(records, list) else [records]
        for i, frame in enumerate(frames):
            self._add(frame, source=source, file=frame.attrs.get("source_file", f"<records {i}>"))
        return self

    @classmethod
    def from_files(cls, paths, classification_path=None, *, title_col="title", code_col="code",
                   context_col="context", year_col="year", **options) -> "TitleDictionary":
        """Build from CSV / Parquet files; columns may be renamed with the ``*_col`` arguments."""
        frames = [_read_records(p, title_col, code_col, context_col, year_col) for p in paths]
        classification = None
        if classification_path is not None:
            classification = Classification.resolve(classification_path, options.get("code_pattern"))
        settings = {k: options.pop(k) for k in ("half_life", "code_pattern", "code_level") if k in options}
        return cls(**settings).fit(frames, classification, **options)

    def _set_classification(self, classification, official_weight: int) -> None:
        if not isinstance(classification, Classification):
            source = classification.attrs.get("source_file", "classification")
            require_columns(classification, ("code", "title"), source)
            table = classification.copy()
            if self.code_level == "soc":
                table = table[table["code"].astype(str).str.strip().str.endswith(".00")].copy()
                table["code"] = table["code"].astype(str).str.strip().map(to_soc_2018)
                table = table.drop_duplicates("code")[["code", "title"]]
            classification = Classification.from_frame(table, source=source, code_pattern=self.code_pattern)
        self.classification = classification.table.copy()
        table = classification.leaves()
        self.catalogue = table.reset_index(drop=True)
        keys = normalize_titles(table["title"])["key"]
        official = pd.DataFrame({"key": keys.values, "code": table["code"].values})
        self.official = official[official["key"] != ""].drop_duplicates().reset_index(drop=True)
        if official_weight:
            extra = self.official.assign(year=UNDATED, count=int(official_weight))
            self.counts = _sum_counts(self.counts, extra, ["key", "code", "year"])
        self._derived.clear()

    @property
    def hierarchy(self) -> Classification:
        """The classification's hierarchy; without one, the codes seen, grouped by their own shape."""
        if "hierarchy" not in self._derived:
            if len(self.classification):
                self._derived["hierarchy"] = Classification(self.classification)
            else:
                self._derived["hierarchy"] = Classification.implicit(self.counts["code"].unique())
        return self._derived["hierarchy"]

    def _add(self, frame: pd.DataFrame, *, source: str, file: str) -> None:
        require_columns(frame, ("title", "code"), file)
        frame = frame.copy()
        if ROW_COLUMN not in frame.columns:
            frame[ROW_COLUMN] = np.arange(1, len(frame) + 1)
        rejected_before = len(self.rejects.rows())
        unreadable = frame.attrs.get("rejects")  # rows the reader could not parse
        if unreadable is not None:
            self.rejects.extend(unreadable)
        rows_in = len(frame) + (len(unreadable.rows()) if unreadable is not None else 0)
        title = frame["title"].fillna("").astype(str)
        code = frame["code"].fillna("").astype(str).str.strip()
        if self.code_level == "soc":
            code = code.map(lambda c: to_soc_2018(c) if c.endswith(".00") or len(c) == 7 else c)
        normalized = normalize_titles(title)
        keep = pd.Series(True, index=frame.index)
        checks = [(normalized["key"].eq(""), "title", "empty title"), (code.eq(""), "code", "empty code")]
        well_formed = code.ne("")
        if self.code_pattern:
            bad = well_formed & ~code.str.match(self.code_pattern)
            checks.append((bad, "code", f"code does not match {self.code_pattern}"))
            well_formed &= ~bad
        if len(self.catalogue):
            groups = set(self.classification.loc[~self.classification["leaf"].astype(bool), "code"])
            is_group = well_formed & code.isin(groups)
            checks.append((is_group, "code", "code is a group of the classification, not one of its detailed codes"))
            checks.append((well_formed & ~is_group & ~code.isin(set(self.catalogue["code"])), "code",
                           "code not in the classification"))
        year = pd.Series(UNDATED, index=frame.index, dtype="int64")
        if "year" in frame.columns:
            raw_year = frame["year"].astype(object).where(frame["year"].notna(), "").astype(str).str.strip().str.replace(r"\.0$", "", regex=True)
            parsed = pd.to_numeric(raw_year, errors="coerce")
            bad_year = raw_year.ne("") & (parsed.isna() | (parsed < 1900) | (parsed > 2200) | (parsed % 1 != 0))
            checks.append((bad_year, "year", "year is not a calendar year"))
            year = parsed.fillna(UNDATED).where(~bad_year, UNDATED).astype("int64")
        for mask, column, reason in checks:  # every reason a row fails is reported, not just the first
            if mask.any():
                shown = {"title": title, "code": code, "year": frame.get("year", year)}[column]
                for row, value in zip(frame.loc[mask, ROW_COLUMN], shown[mask]):
                    self.rejects.add(file, int(row), column, reason, value)
            keep &= ~mask
        kept = pd.DataFrame({"key": normalized["key"][keep].values, "code": code[keep].values,
                             "year": year[keep].values, "count": 1})
        self.counts = _sum_counts(self.counts, kept, ["key", "code", "year"])
        ctx = (frame.loc[keep, "context"].fillna("").astype(str) if "context" in frame.columns
               else pd.Series("", index=kept.index))
        tokens = ctx.map(context_tokens)
        # distinct (title, context, code, year) units: what the confidence model trains on
        units = kept.assign(context=tokens.map(" ".join).to_numpy())
        self.units = _sum_counts(self.units, units, ["key", "context", "code", "year"])
        if "context" in frame.columns:
            exploded = pd.DataFrame({"key": kept["key"].values, "code": kept["code"].values,
                                     "year": kept["year"].values, "token": tokens.values}).explode("token")
            exploded = exploded.dropna(subset=["token"]).assign(count=1)
            self.context_counts = _sum_counts(self.context_counts, exploded, ["key", "token", "code", "year"])
        rejected = len(self.rejects.rows()) - rejected_before
        years = sorted(int(y) for y in kept["year"].unique() if y != UNDATED)
        self.provenance.append({"file": str(file), "source": source, "years": years, "rows_in": rows_in,
                                "kept": int(keep.sum()), "rejected": rejected,
                                "scripts": scripts_of_titles(title[keep]),
                                "checksum": frame.attrs.get("checksum", "")})
        self._derived.clear()

    def update(self, records: pd.DataFrame, *, source: str = "past records") -> "TitleDictionary":
        """Return a new dictionary with ``records`` (e.g. a new year, or coders' decisions) added."""
        new = self.copy()
        new._add(records, source=source, file=records.attrs.get("source_file", f"<update {len(new.provenance)}>"))
        return new

    def copy(self) -> "TitleDictionary":
        new = TitleDictionary(self.half_life, self.code_pattern, self.code_level)
        new.counts, new.context_counts = self.counts.copy(), self.context_counts.copy()
        new.classification = self.classification.copy()
        new.units = self.units.copy()
        new.official, new.catalogue = self.official.copy(), self.catalogue.copy()
        new.provenance = [dict(p) for p in self.provenance]
        new.rejects.extend(self.rejects)
        return new

    def restricted(self, keep_units: pd.Series) -> "TitleDictionary":
        """A dictionary holding only the record units where ``keep_units`` (aligned with ``units``)
        holds a positive count to keep, plus the official titles: the base for held-out scoring."""
        new = TitleDictionary(self.half_life, self.code_pattern, self.code_level)
        new.official, new.catalogue = self.official.copy(), self.catalogue.copy()
        new.classification = self.classification.copy()
        units = self.units.assign(count=np.asarray(keep_units, dtype="int64"))
        units = units[units["count"] > 0]
        new.units = units.reset_index(drop=True)
        official = self.counts[self.counts["year"] == UNDATED]
        official = official.merge(self.official, on=["key", "code"])
        new.counts = _sum_counts(official.reset_index(drop=True), units[["key", "code", "year", "count"]],
                                 ["key", "code", "year"])
        tokens = units["context"].str.split()
        exploded = units.assign(token=tokens).explode("token").dropna(subset=["token"])
        exploded = exploded[exploded["token"] != ""]
        new.context_counts = _sum_counts(new.context_counts, exploded, ["key", "token", "code", "year"])
        return new

    # ------------------------------------------------------------------ derived views
    @property
    def reference_year(self) -> int:
        years = self.counts["year"][self.counts["year"] != UNDATED]
        return int(years.max()) if len(years) else 0

    def _weights(self, table: pd.DataFrame) -> np.ndarray:
        ref = self.reference_year
        age = np.where(table["year"].to_numpy() == UNDATED, 0, ref - table["year"].to_numpy())
        return table["count"].to_numpy() * np.power(0.5, age / float(self.half_life))

    @property
    def entries(self) -> pd.DataFrame:
        """One row per (key, code): ``count`` (records) and ``weight`` (recency-weighted), sorted."""
        if "entries" not in self._derived:
            table = self.counts.assign(weight=self._weights(self.counts))
            grouped = table.groupby(["key", "code"], sort=True, observed=True)[["count", "weight"]].sum()
            self._derived["entries"] = grouped.reset_index()
        return self._derived["entries"]

    @property
    def contexts(self) -> pd.DataFrame:
        """One row per (key, context token, code) with recency-weighted ``weight``."""
        if "contexts" not in self._derived:
            table = self.context_counts.assign(weight=self._weights(self.context_counts))
            grouped = table.groupby(["key", "token", "code"], sort=True, observed=True)[["count", "weight"]].sum()
            self._derived["contexts"] = grouped.reset_index()
        return self._derived["contexts"]

    @property
    def vocabulary(self) -> pd.Series:
        """Token -> number of records whose key holds it (feeds the spelling corrector)."""
        if "vocabulary" not in self._derived:
            per_key = self.counts.groupby("key", sort=True)["count"].sum()
            tokens = per_key.index.to_series().str.split()
            exploded = pd.DataFrame({"token": tokens.values, "count": per_key.values}).explode("token")
            self._derived["vocabulary"] = exploded.groupby("token", sort=True)["count"].sum().astype("int64")
        return self._derived["vocabulary"]

    def code_titles(self) -> dict[str, str]:
        return dict(zip(self.catalogue["code"], self.catalogue["title"]))

    def lookup(self, key: str) -> pd.DataFrame:
        """Codes recorded for one normalized key, best first, with their weight share."""
        entries = self.entries[self.entries["key"] == key].copy()
        entries["share"] = entries["weight"] / entries["weight"].sum() if len(entries) else []
        return entries.sort_values(["weight", "code"], ascending=[False, True]).reset_index(drop=True)

    def majority(self) -> pd.DataFrame:
        """Per key: the code with the largest weight, its share and the key's total weight."""
        entries = self.entries
        total = entries.groupby("key", sort=True)["weight"].transform("sum")
        ranked = entries.assign(share=entries["weight"] / total, total=total)
        ranked = ranked.sort_values(["key", "weight", "code"], ascending=[True, False, True])
        return ranked.drop_duplicates("key").reset_index(drop=True)[["key", "code", "share", "total"]]

    def diff(self, other: "TitleDictionary") -> DictionaryDiff:
        """What changed from ``self`` (older) to ``other`` (newer): new, vanished, re-coded titles."""
        old, new = self.majority(), other.majority()
        merged = old.merge(new, on="key", how="outer", suffixes=("_old", "_new"), indicator=True)
        added = merged[merged["_merge"] == "right_only"]
        gone = merged[merged["_merge"] == "left_only"]
        both = merged[(merged["_merge"] == "both") & (merged["code_old"] != merged["code_new"])]
        return DictionaryDiff(
            new_titles=added[["key", "total_new"]].rename(columns={"total_new": "weight"})
            .sort_values(["weight", "key"], ascending=[False, True]).reset_index(drop=True),
            vanished_titles=gone[["key", "total_old"]].rename(columns={"total_old": "weight"})
            .sort_values(["weight", "key"], ascending=[False, True]).reset_index(drop=True),
            changed_codes=both.rename(columns={"code_old": "old_code", "code_new": "new_code",
                                               "share_old": "old_share", "share_new": "new_share"})
            [["key", "old_code", "new_code", "old_share", "new_share"]].reset_index(drop=True))

    # ------------------------------------------------------------------ persistence
    def tables(self) -> dict[str, pd.DataFrame]:
        return {"counts": self.counts, "context_counts": self.context_counts, "units": self.units,
                "official": self.official,
                "catalogue": self.catalogue, "classification": self.classification}

    def meta(self) -> dict:
        rows_in = sum(p["rows_in"] for p in self.provenance)
        kept = sum(p["kept"] for p in self.provenance)
        return {"options": {"half_life": self.half_life, "code_pattern": self.code_pattern,
                            "code_level": self.code_level},
                "provenance": self.provenance,
                "rows": {"in": rows_in, "kept": kept, "rejected": rows_in - kept},
                "reference_year": self.reference_year, "titles": int(self.counts["key"].nunique()),
                "codes": int(self.counts["code"].nunique())}

    def save(self, directory: str | os.PathLike, *, extra_tables: dict | None = None,
             arrays: dict | None = None, extra_meta: dict | None = None) -> Path:
        """Save as Parquet tables + checksummed manifest; ``rejects.csv`` beside them."""
        meta = self.meta() | (extra_meta or {})
        save_artefact(directory, ARTEFACT_KIND, self.tables() | (extra_tables or {}), arrays=arrays, meta=meta)
        self.rejects.write(Path(directory) / "rejects.csv")
        return Path(directory)

    @classmethod
    def load(cls, directory: str | os.PathLike) -> "TitleDictionary":
        return cls._from_artefact(load_artefact(directory, ARTEFACT_KIND))

    @classmethod
    def _from_artefact(cls, art) -> "TitleDictionary":
        options = art.meta.get("options", {})
        self = cls(**options)
        for name in ("counts", "context_counts", "units", "official", "catalogue"):
            table = art.tables[name]
            for col in table.columns:
                if col in ("year", "count"):
                    table[col] = table[col].astype("int64")
            setattr(self, name, table)
        if "classification" in art.tables:  # dictionaries saved before classifications had a hierarchy lack it
            table = art.tables["classification"]
            table["level"] = table["level"].astype("int64")
            table["leaf"] = table["leaf"].astype(bool)
            self.classification = table[CLASSIFICATION_COLUMNS]
        self.provenance = art.meta.get("provenance", [])
        return self


def _sum_counts(table: pd.DataFrame, extra: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    if not len(extra):
        return table
    both = pd.concat([table, extra[keys + ["count"]]], ignore_index=True) if len(table) else extra[keys + ["count"]]
    summed = both.groupby(keys, sort=True, observed=True)["count"].sum().reset_index()
    summed["count"] = summed["count"].astype("int64")
    summed["year"] = summed["year"].astype("int64")
    return summed


def _read_records(path, title_col, code_col, context_col, year_col) -> pd.DataFrame:
    rejects = Rejects()
    frame = read_table(path, required=(title_col, code_col), rejects=rejects)
    # only the columns the dictionary reads, under its own names: a file's other columns (an unrelated
    # "title", say, beside --title-col job) can never be taken for them
    picked = {"title": title_col, "code": code_col, "context": context_col, "year": year_col, ROW_COLUMN: ROW_COLUMN}
    frame = pd.DataFrame({name: frame[column] for name, column in picked.items() if column in frame.columns})
    frame.attrs["source_file"] = str(path)
    frame.attrs["checksum"] = file_sha256(path)
    frame.attrs["rejects"] = rejects
    return frame
