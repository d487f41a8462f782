"""The title coder: a scikit-learn style estimator that codes job titles with a dictionary.

``TitleCoder().fit(records, codes)`` builds a ``TitleDictionary`` and its search index;
``code(frame)`` returns the input with the chosen code, its official title, a score and
the next two candidates; ``features(frame)`` exposes the per-candidate features a
confidence model learns from. ``save``/``load`` keep dictionary and index together in
one checksummed directory.
"""
from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from ..io import ROW_COLUMN
from ..io.artefact import load_artefact
from ..io.columns import add_outputs
from .candidates import TitleIndex
from .dictionary import ARTEFACT_KIND, TitleDictionary
from .features import FEATURES, ContextTables, candidate_features, parent_groups
from .gate import FLAG_COLUMN, LATIN, residual_codes, title_flags
from ..normalize.title import normalize_titles


class TitleCoder(BaseEstimator):
    """Code free-text job titles to classification codes from past coded records.

    Parameters
    ----------
    half_life : float
        Years after which a past record counts half (recency weighting of the dictionary).
    n_neighbours : int
        Dictionary titles considered per new title from each similarity search.
    classifier_top : int
        Codes the text classifier adds per title.
    max_candidates : int
        Candidate codes kept per title.
    code_level : {"as-is", "soc"}
        ``"soc"`` maps O*NET-SOC codes to their SOC 2018 detailed occupation.
    title_col, context_col : str
        Input columns holding the job title and its optional context (industry, employer); the
        input's other columns are carried through untouched, whatever their names.
    output_prefix : str
        Written before the name of every column ``code`` adds. Input columns are never overwritten:
        an added column named like an input column is refused (``titlematch.io.columns``).

    Examples
    --------
    >>> import pandas as pd
    >>> past = pd.DataFrame({"title": ["registered nurse", "truck driver", "line cook"],
    ...                      "code": ["29-1141", "53-3032", "35-2014"]})
    >>> coder = TitleCoder().fit(past, past["code"])
    >>> coder.predict(["Registered Nurse"]).tolist()
    ['29-1141']
    """

    def __init__(self, half_life: float = 3.0, n_neighbours: int = 10, classifier_top: int = 3,
                 max_candidates: int = 10, code_level: str = "as-is", random_state: int = 0,
                 title_col: str = "title", context_col: str = "context", output_prefix: str = ""):
        self.half_life = half_life
        self.n_neighbours = n_neighbours
        self.classifier_top = classifier_top
        self.max_candidates = max_candidates
        self.code_level = code_level
        self.random_state = random_state
        self.title_col = title_col
        self.context_col = context_col
        self.output_prefix = output_prefix

    def _as_frame(self, X) -> pd.DataFrame:
        if isinstance(X, pd.DataFrame):
            if self.title_col not in X.columns:
                raise ValueError(f"X must have a {self.title_col!r} column (title_col); it has {list(X.columns)}")
            return X
        if isinstance(X, pd.Series):
            return pd.DataFrame({self.title_col: X.values}, index=X.index)
        return pd.DataFrame({self.title_col: list(X)})

    # ---------------------------------------------------------------- fitting
    def fit(self, X, y=None, classification: pd.DataFrame | None = None) -> "TitleCoder":
        """Build the dictionary from records ``X`` (``title_col`` [, ``context_col``, ``year``]) coded ``y``
        (default: X's ``code`` column)."""
        frame = self._as_frame(X)
        # the dictionary's own column names, on a frame of our own: the user's other columns stay out
        records = pd.DataFrame({"title": frame[self.title_col].to_numpy()}, index=frame.index)
        for name, column in (("context", self.context_col), ("year", "year"), ("code", "code"),
                             (ROW_COLUMN, ROW_COLUMN)):
            if column in frame.columns:
                records[name] = frame[column].to_numpy()
        if y is not None:
            records["code"] = np.asarray(y, dtype=object)
        records.attrs = dict(frame.attrs)
        dictionary = TitleDictionary(half_life=self.half_life, code_level=self.code_level).fit(records, classification)
        return self.fit_dictionary(dictionary)

    def fit_dictionary(self, dictionary: TitleDictionary) -> "TitleCoder":
        """Build the search index over an existing dictionary."""
        if not len(dictionary.entries):
            raise ValueError("the dictionary has no entries: every record was rejected or none was given")
        self.dictionary_ = dictionary
        self.index_ = TitleIndex(self.n_neighbours, self.classifier_top, random_state=self.random_state).fit(dictionary)
        self._prepare()
        return self

    @classmethod
    def from_dictionary(cls, dictionary: TitleDictionary, **params) -> "TitleCoder":
        return cls(half_life=dictionary.half_life, code_level=dictionary.code_level, **params).fit_dictionary(dictionary)

    def _prepare(self) -> None:
        self.classes_ = self.index_.codes_
        self.context_ = ContextTables(self.dictionary_.contexts, self.index_)
        self.official_ = set(zip(self.dictionary_.official["key"], self.dictionary_.official["code"]))
        self.code_titles_ = self.dictionary_.code_titles()
        corrector = self.index_.corrector_
        self.known_words_ = (frozenset(self.dictionary_.vocabulary.index) | frozenset(corrector.vocabulary_)
                             | corrector.protected_)
        self.known_scripts_ = sorted({LATIN}.union(*(p.get("scripts", ()) for p in self.dictionary_.provenance)))
        self.residual_codes_ = residual_codes(self.dictionary_.catalogue)

    # ---------------------------------------------------------------- persistence
    def save(self, directory: str | os.PathLike) -> Path:
        return self.dictionary_.save(directory, extra_tables=self.index_.tables(), arrays=self.index_.arrays(),
                                     extra_meta={"index": self.index_.params(), "coder": self.get_params(),
                                                 "spelling": self.index_.corrector_.get_params()})

    @classmethod
    def load(cls, directory: str | os.PathLike) -> "TitleCoder":
        art = load_artefact(directory, ARTEFACT_KIND)
        dictionary = TitleDictionary._from_artefact(art)
        self = cls(**art.meta.get("coder", {}))
        self.dictionary_ = dictionary
        if "index" in art.meta:
            self.index_ = TitleIndex._restore(dictionary, art.tables, art.arrays, art.meta["index"],
                                              spelling=art.meta.get("spelling"))
        else:  # a dictionary saved on its own: build the index now
            self.index_ = TitleIndex(self.n_neighbours, self.classifier_top, random_state=self.random_state).fit(dictionary)
        self._prepare()
        return self

    # ---------------------------------------------------------------- coding
    def _units(self, frame: pd.DataFrame) -> tuple[pd.DataFrame, np.ndarray, pd.DataFrame]:
        """Normalize titles and reduce them to distinct units: everything a title's code depends on
        (key as written, spelling-corrected key, primary role, number of roles and of normalizer
        changes, context), so that a record is coded the same whatever else is in its batch.

        Spelling is corrected inside normalization (``normalize_titles(corrector=)``, the one
        spelling path), so a qualifier hidden by a typo ("nigth shift") is found after correction;
        the key as written is kept too, for the exact search (a rare real word loses nothing).
        Returns the units, each row's unit, and the corrected normalization (``title_normalized``)."""
        titles = frame[self.title_col]
        written = normalize_titles(titles)
        normalized = normalize_titles(titles, corrector=self.index_.corrector_)
        written.index = normalized.index = range(len(frame))
        context = (frame[self.context_col].fillna("").astype(str).to_numpy() if self.context_col in frame.columns
                   else np.full(len(frame), ""))
        changes = normalized["changes"].map(lambda c: c.split("; ") if c else [])
        before = written["changes"].map(lambda c: c.split("; ") if c else [])
        # the corrector's changes: those the normalization made only with it
        spelled = [len(_multiset_difference(after, was)) for after, was in zip(changes, before)]
        rows = pd.DataFrame({"key": written["key"].to_numpy(), "corrected": normalized["key"].to_numpy(),
                             "primary": normalized["primary"].fillna("").to_numpy(),
                             "n_roles": (normalized["roles"].str.count(r"\|") + 1).to_numpy(dtype=float),
                             "n_changes": changes.map(len).to_numpy(dtype=float),
                             "spelling_changed": np.asarray(spelled, dtype=float), "context": context})
        uniq = rows.drop_duplicates().reset_index(drop=True)
        unit_of_row = pd.MultiIndex.from_frame(uniq).get_indexer(pd.MultiIndex.from_frame(rows))
        return uniq, unit_of_row, normalized

    def features(self, X) -> pd.DataFrame:
        """Candidate codes with their features, one row per (record, candidate), best first.

        Columns: ``record`` (position in ``X``), ``code``, ``key`` (the dictionary title behind the
        code) and the features listed in ``titlematch.coding.features.FEATURES``.
        """
        frame = self._as_frame(X)
        units, unit_of_row, _ = self._units(frame)
        return _per_record(self._unit_candidates(units), unit_of_row)

    def _unit_candidates(self, units: pd.DataFrame) -> pd.DataFrame:
        live = units[units["key"] != ""]
        if not len(live):
            empty = {"unit": pd.Series(dtype="int64"), "code": pd.Series(dtype=object), "key": pd.Series(dtype=object)}
            return pd.DataFrame(empty | {f: pd.Series(dtype=float) for f in FEATURES})
        cands = candidate_features(self.index_, self.context_, self.official_, live.reset_index(drop=True),
                                   self.max_candidates)
        cands["unit"] = live.index.to_numpy()[cands["unit"].to_numpy()]
        return cands

    def code(self, X, confidence=None) -> pd.DataFrame:
        """A new frame: every input column unchanged, plus ``title_normalized``, ``code``, ``code_title``,
        ``score`` and the next two candidates; with a fitted ``confidence`` model also ``confidence*`` and
        ``decision``. Added columns are named ``output_prefix + name``; one that would overwrite an input
        column raises ``titlematch.io.columns.ColumnClash``."""
        return self._code(X, confidence, with_features=False)[0]

    def code_and_features(self, X, confidence=None) -> tuple[pd.DataFrame, pd.DataFrame]:
        """``(code(X, confidence), features(X))`` from one search: for a stream that writes both."""
        return self._code(X, confidence, with_features=True)

    def _code(self, X, confidence, with_features: bool) -> tuple[pd.DataFrame, pd.DataFrame | None]:
        frame = self._as_frame(X)
        source = frame.attrs.get("source_file", "<input>")
        units, unit_of_row, normalized = self._units(frame)
        cands = self._unit_candidates(units)
        outputs = self._outputs(frame, units, unit_of_row, normalized, cands, confidence)
        coded = add_outputs(frame, outputs, prefix=self.output_prefix, source=source)
        return coded, (_per_record(cands, unit_of_row) if with_features else None)

    def _outputs(self, frame, units, unit_of_row, normalized, cands, confidence=None) -> pd.DataFrame:
        """The columns ``code`` adds, unprefixed, one row per input row (positional index)."""
        if confidence is not None:
            cands = confidence.score_candidates(cands)
        out = pd.DataFrame({"title_normalized": normalized["key"].to_numpy()})
        top = _top_three(cands, len(units), self.code_titles_, with_confidence=confidence is not None)
        top = top.join(parent_groups(cands, top["code"], self.index_, with_confidence=confidence is not None))
        for col in top.columns:
            out[col] = top[col].to_numpy()[unit_of_row]
        flags = self._flags(frame[self.title_col], units["key"].to_numpy(dtype=object)[unit_of_row],
                            units["corrected"].to_numpy(dtype=object)[unit_of_row])
        if self.residual_codes_:
            _offer_residual(out, flags, self.residual_codes_[0], self.code_titles_, confidence is not None)
        if confidence is not None:
            # the router refers flagged titles whatever their confidence
            out["decision"] = confidence.route(out["confidence"].to_numpy(), flags=flags)
        out[FLAG_COLUMN] = flags
        return out

    def _flags(self, titles: pd.Series, keys: np.ndarray, corrected: np.ndarray) -> np.ndarray:
        """The gate's flag per record (:mod:`titlematch.coding.gate`), computed once per distinct title."""
        text = titles.fillna("").astype(str).to_numpy(dtype=object)
        distinct = pd.DataFrame({"t": text, "k": keys, "c": corrected}).drop_duplicates()
        found = title_flags(distinct["t"], distinct["k"], distinct["c"], known_words=self.known_words_,
                            known_scripts=self.known_scripts_, near=self.index_.corrector_.near_known)
        lookup = pd.MultiIndex.from_frame(distinct)
        at = lookup.get_indexer(pd.MultiIndex.from_arrays([text, keys, corrected]))
        return found[at] if len(text) else np.array([], dtype=object)

    def flags(self, X) -> np.ndarray:
        """The gate's flag per record of ``X`` (:mod:`titlematch.coding.gate`; empty text: no flag)."""
        frame = self._as_frame(X)
        units, unit_of_row, _ = self._units(frame)
        return self._flags(frame[self.title_col], units["key"].to_numpy(dtype=object)[unit_of_row],
                           units["corrected"].to_numpy(dtype=object)[unit_of_row])

    def predict(self, X) -> np.ndarray:
        frame = self._as_frame(X)
        units, unit_of_row, normalized = self._units(frame)
        cands = self._unit_candidates(units)
        return self._outputs(frame, units, unit_of_row, normalized, cands)["code"].to_numpy(dtype=object)

    def predict_proba(self, X) -> np.ndarray:
        """Scores over ``classes_`` normalized per record (rows without candidates are all zero)."""
        feats = self.features(X)
        n = len(self._as_frame(X))
        proba = np.zeros((n, len(self.classes_)))
        col = pd.Index(self.classes_).get_indexer(feats["code"])
        proba[feats["record"].to_numpy(), col] = feats["score"].to_numpy()
        sums = proba.sum(axis=1, keepdims=True)
        return np.divide(proba, sums, out=np.zeros_like(proba), where=sums > 0)

    def score(self, X, y) -> float:
        return float(np.mean(self.predict(X) == np.asarray(y, dtype=object)))


def _per_record(cands: pd.DataFrame, unit_of_row: np.ndarray) -> pd.DataFrame:
    """Unit candidates fanned out to the records of each unit: ``record`` (position), best first."""
    rows = pd.DataFrame({"record": np.arange(len(unit_of_row)), "unit": unit_of_row})
    return rows.merge(cands, on="unit").drop(columns="unit").sort_values(["record", "rank"]).reset_index(drop=True)


def _multiset_difference(a: list, b: list) -> list:
    """Items of ``a`` not matched one for one in ``b``."""
    rest = list(b)
    out = []
    for item in a:
        if item in rest:
            rest.remove(item)
        else:
            out.append(item)
    return out


def best_first(cands: pd.DataFrame, group: str, by: str) -> pd.DataFrame:
    """The one "top candidate" rule: each ``group``'s candidates by ``by`` (confidence, or score without
    a model), then score, highest first, ties to the lower code; ``pos`` numbers them from 0 (the top)."""
    ranked = cands.sort_values([group, by, "score", "code"], ascending=[True, False, False, True])
    return ranked.assign(pos=ranked.groupby(group).cumcount())


def _offer_residual(out: pd.DataFrame, flags: np.ndarray, code: str, titles: dict, with_confidence: bool) -> None:
    """Put the classification's code for insufficient information first among the candidates of
    non-answers (the others move down one place); it carries no score, so the record is referred."""
    answers = np.fromiter((f.split(":", 1)[0] in ("non-answer", "vague", "not-working") for f in flags),
                          dtype=bool, count=len(flags)) & (out["code"].astype(str).to_numpy() != code)
    if not answers.any():
        return
    names = ["score"] + (["confidence"] if with_confidence else [])
    for name in ["code"] + names:
        out.loc[answers, f"{name}_3"] = out.loc[answers, f"{name}_2"].to_numpy()
        out.loc[answers, f"{name}_2"] = out.loc[answers, name].to_numpy()
    out.loc[answers, "code"] = code
    out.loc[answers, "code_title"] = titles.get(code, "")
    out.loc[answers, names] = np.nan


def _top_three(cands: pd.DataFrame, n_units: int, titles: dict, with_confidence: bool) -> pd.DataFrame:
    ranked = best_first(cands, "unit", "confidence" if with_confidence else "score")
    out = pd.DataFrame(index=range(n_units))
    for pos, suffix in ((0, ""), (1, "_2"), (2, "_3")):
        layer = ranked[ranked["pos"] == pos].set_index("unit")
        out["code" + suffix] = layer["code"].reindex(out.index).fillna("")
        if pos == 0:
            out["code_title"] = out["code"].map(titles).fillna("")
        out["score" + suffix] = layer["score"].reindex(out.index).round(6)
        if with_confidence:
            out["confidence" + suffix] = layer["confidence"].reindex(out.index).round(6)
    cols = ["code", "code_title", "score", "code_2", "score_2", "code_3", "score_3"]
    if with_confidence:
        cols += ["confidence", "confidence_2", "confidence_3"]
    return out[cols]
