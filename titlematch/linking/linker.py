"""Linking new establishments (or any records) to a register, and finding duplicates in a batch.

Pipeline: prepare fields -> blocking -> comparisons -> classification -> decisions.

Classification is Fellegi–Sunter with m/u probabilities estimated by EM (recordlinkage's
``ECMClassifier``) when no labelled pairs are given, or a logistic regression on the
comparison features when they are. Either way a pair's evidence is a sum of per-field
weights in bits, shown in the ``explanation`` column. A record links to at most one
register entry, so its candidates compete: confidence = odds / (1 + sum of its
candidates' odds), and two good candidates leave neither confident (a referral).

Example
-------
>>> linker = EstablishmentLinker().fit(register_frame, records=new_records)   # doctest: +SKIP
>>> linked = linker.link(new_records)                                         # doctest: +SKIP
>>> linked[["record_id", "register_id", "confidence", "decision", "explanation"]]  # doctest: +SKIP
"""
from __future__ import annotations

import logging
import os
from dataclasses import asdict, replace
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from sklearn.base import BaseEstimator
from sklearn.linear_model import LogisticRegression

from ..io.artefact import ArtefactError, load_artefact, save_artefact
from .blocking import KeyRule, NeighbourRule, TokenRule, candidate_pairs, default_rules
from .comparison import agreement_levels, compare
from ..confidence.fellegi_sunter import LN2, FellegiSunterModel, exclusive_confidence
from ..confidence.routing import route
from ..io import ROW_COLUMN, InputError, Rejects
from ..io.columns import add_outputs, unused_name
from .register import Field, RegisterIndex, check_fields, resolve_fields
from .scoring import pairs_and_features

log = logging.getLogger(__name__)

ARTEFACT_KIND = "establishment-linker"
_RULE_TYPES = {"KeyRule": KeyRule, "TokenRule": TokenRule, "NeighbourRule": NeighbourRule}
OUTPUT_COLUMNS = ["register_id", "confidence", "decision", "register_name", "register_address",
                  "register_id_2", "confidence_2", "explanation"]
DEDUPE_COLUMNS = ["cluster_id", "cluster_size", "duplicate_confidence"]


# --------------------------------------------------------------------------- models

class SupervisedModel:
    """Logistic regression on the comparison features; a missing value counts 0 plus a
    missing-value indicator for each feature that was ever missing in training.

    Contributions (``weights``) are coefficient x (value - mean training value) in bits, the
    indicator folded into its feature. Attributes: ``columns_``, ``indicators_``, ``coef_``,
    ``intercept_``, ``baseline_`` (plain arrays, saved without pickle).
    """

    def __init__(self, C: float = 1.0) -> None:
        self.C = C

    def _design(self, features: pd.DataFrame) -> np.ndarray:
        values = features.reindex(columns=self.columns_).to_numpy(dtype=float)
        missing = features.reindex(columns=self.indicators_).isna().to_numpy(dtype=float)
        return np.hstack([np.nan_to_num(values, nan=0.0), missing])

    def fit(self, features: pd.DataFrame, y: np.ndarray) -> "SupervisedModel":
        if len(np.unique(y)) < 2:
            raise InputError("training pairs must include both matches and non-matches among the candidates")
        self.columns_ = [c for c in features.columns if features[c].notna().any()]
        self.indicators_ = [c for c in self.columns_ if features[c].isna().any()]
        design = self._design(features)
        model = LogisticRegression(C=self.C, max_iter=2000).fit(design, y)
        self.coef_ = model.coef_[0].astype(float)
        self.intercept_ = float(model.intercept_[0])
        # Contributions are measured from the average training pair, so a constant feature shows 0.
        self.baseline_ = design.mean(axis=0)
        return self

    def weights(self, features: pd.DataFrame) -> pd.DataFrame:
        contributions = (self._design(features) - self.baseline_) * self.coef_ / LN2
        n = len(self.columns_)
        out = pd.DataFrame(contributions[:, :n], columns=self.columns_, index=features.index)
        for k, column in enumerate(self.indicators_):
            out[column] += contributions[:, n + k]
        return out

    def log_odds(self, features: pd.DataFrame) -> np.ndarray:
        return self._design(features) @ self.coef_ + self.intercept_

    def predict_proba(self, features: pd.DataFrame) -> np.ndarray:
        return 1.0 / (1.0 + np.exp(-np.clip(self.log_odds(features), -700, 700)))


# --------------------------------------------------------------------------- helpers

def explain(weights: pd.DataFrame, limit: int = 8) -> np.ndarray:
    """Compact text per row: fields by absolute weight, e.g. ``"name +4.1, house_number +3.2, postcode -1.5"``."""
    values = weights.to_numpy(dtype=float)
    names = np.asarray(weights.columns, dtype=object)
    order = np.argsort(-np.abs(values), axis=1, kind="stable")[:, :limit]
    out = []
    for row, idx in zip(values, order):
        out.append(", ".join(f"{names[k]} {row[k]:+.1f}" for k in idx if abs(row[k]) >= 0.05))
    return np.asarray(out, dtype=object)


def fitting_pairs(pairs: pd.DataFrame, features: pd.DataFrame, per_record: int = 3,
                  column: str = "new") -> np.ndarray:
    """Mask of each record's ``per_record`` most similar candidates (mean of its features).

    EM separates matches from non-matches reliably only when matches are not too rare among
    the pairs it sees (Winkler's experience, from memory: a few per cent at least). Far-off
    candidates say little about m and make a second cluster (same street, same town) likelier
    to be taken for the matches, so m and u are estimated on the close candidates only.
    """
    crude = features.mean(axis=1, skipna=True).fillna(0.0).to_numpy()
    owner = pairs[column].to_numpy()
    order = np.lexsort((-crude, owner))
    rank = np.arange(len(order)) - np.searchsorted(owner[order], owner[order], side="left")
    mask = np.zeros(len(pairs), dtype=bool)
    mask[order[rank < per_record]] = True
    return mask


def _greedy_one_to_one(new: np.ndarray, register: np.ndarray, confidence: np.ndarray, floor: float) -> np.ndarray:
    """Boolean mask of pairs kept when each register entry takes at most one record (greedy by confidence)."""
    keep = np.zeros(len(new), dtype=bool)
    taken_new, taken_register = set(), set()
    for k in np.argsort(-confidence, kind="stable"):
        if confidence[k] < floor:
            break
        if new[k] in taken_new or register[k] in taken_register:
            continue
        keep[k] = True
        taken_new.add(new[k])
        taken_register.add(register[k])
    return keep


# --------------------------------------------------------------------------- the linker

class EstablishmentLinker(BaseEstimator):
    """Link records to a register with blocking, comparisons and Fellegi–Sunter or a supervised model.

    Parameters
    ----------
    fields : mapping or list of Field, optional
        Compared fields (``register.resolve_fields``): default name, address, city, postcode, naics.
    id_column : str
        Register id column (default ``register_id``).
    record_id : str, optional
        Id column of incoming records (used for training pairs and rejects); default
        ``record_id`` when present.
    threshold, refer_threshold : float
        Accept a record's best candidate at confidence >= ``threshold``; refer it to a person
        between ``refer_threshold`` and ``threshold``; below, ``no-match``.
    one_to_one : bool
        A register entry takes at most one record of a batch (greedy by confidence).
    rules : list of blocking rules, optional (default from the field kinds)
    regional : bool
        With the default rules, keep every rule inside a postcode or place
        (``blocking.default_rules(regional=True)``): a batch then reads only the index partitions
        of its postcodes and places, at the cost of records whose postcode and place are both wrong.
    k : int
        Nearest names per record in the n-gram neighbour rule.
    max_block : int
        Key blocks with more register records are skipped.
    em_candidates : int
        Without training, m and u are estimated by EM on each record's this many closest candidates.
    exclusive_em : bool
        In EM, a record's candidates are rivals (at most one is its match), as in linking to a
        register without duplicates.
    workers : int
        Processes (and rapidfuzz threads) preparing, blocking and comparing a batch (-1 = every
        core); the output is the same for any number.
    output_prefix : str
        Written before the name of every column ``link`` / ``dedupe`` add. Input columns are never
        overwritten: an added column named like an input column is refused (``titlematch.io.columns``).

    Attributes
    ----------
    index_ : RegisterIndex; rules_ : blocking rules; model_ : FellegiSunterModel or
    SupervisedModel. Only ``fit`` sets them: ``link`` changes nothing on the linker (its candidate
    pairs and blocking counts come from ``candidate_pairs``; refused records go to ``rejects=``).
    """

    def __init__(self, fields=None, *, id_column: str = "register_id", record_id: str | None = None,
                 threshold: float = 0.9, refer_threshold: float = 0.5, one_to_one: bool = False,
                 rules: Sequence | None = None, regional: bool = False, k: int = 10, max_block: int = 100,
                 em_candidates: int = 3,
                 exclusive_em: bool = True, em_records: int = 20_000, workers: int = -1,
                 output_prefix: str = "") -> None:
        self.fields = fields
        self.id_column = id_column
        self.record_id = record_id
        self.threshold = threshold
        self.refer_threshold = refer_threshold
        self.one_to_one = one_to_one
        self.rules = rules
        self.regional = regional
        self.k = k
        self.max_block = max_block
        self.em_candidates = em_candidates
        self.exclusive_em = exclusive_em
        self.em_records = em_records
        self.workers = workers
        self.output_prefix = output_prefix

    # ---------------------------------------------------------------- fitting
    def _validate(self) -> None:
        if not 0.0 <= self.refer_threshold <= self.threshold <= 1.0:
            raise ValueError(f"need 0 <= refer_threshold ({self.refer_threshold}) <= threshold "
                             f"({self.threshold}) <= 1")

    def fit(self, register: pd.DataFrame | RegisterIndex, training: pd.DataFrame | None = None, *,
            records: pd.DataFrame | None = None, source: str = "<register>",
            records_source: str = "<records>") -> "EstablishmentLinker":
        """Index the register and learn the classifier.

        Parameters
        ----------
        register : DataFrame with ``id_column`` and the field columns, or a built RegisterIndex
        training : optional labelled records: the field columns plus the register id of each
            (blank = known not on the register). With only a record id and a register id, the
            fields are taken from ``records`` by record id. Gives a supervised model.
        records : without training, the records whose candidate pairs m and u are estimated on by EM
            (at most ``em_records`` of them are used); required then. With training holding only
            record ids, the records those ids refer to.
        """
        self._validate()
        if training is None and records is None:
            raise ValueError("without training pairs, give records= (records to link, or a sample of them): "
                             "m and u are estimated by EM on their candidate pairs")
        self._set_index(register, source)
        if training is not None:
            self.model_ = self._fit_supervised(training, records)
        else:
            self.model_ = self._fit_unsupervised(records, records_source)
        return self

    def _set_index(self, register: pd.DataFrame | RegisterIndex, source: str) -> None:
        """``index_`` (the given index, or one built from the register) and the blocking rules over it."""
        if isinstance(register, RegisterIndex):
            self.index_ = register
        else:
            self.index_ = RegisterIndex(self.fields, self.id_column, workers=self.workers).fit(register,
                                                                                           source=source)
        self.rules_ = list(self.rules) if self.rules is not None else self._default_rules()

    def _default_rules(self) -> list:
        return default_rules(self.index_.fields_, k=self.k, regional=self.regional)

    def fit_link(self, register: pd.DataFrame | RegisterIndex, records: pd.DataFrame, *,
                 rejects: Rejects | None = None, source: str = "<register>",
                 records_source: str = "<records>") -> pd.DataFrame:
        """``fit(register, records=records).link(records)`` with the records prepared, blocked and
        compared once instead of twice (as scikit-learn's ``fit_predict``): m and u are estimated by
        EM on the batch's own candidate pairs, then the same pairs are scored. Same output."""
        self._validate()
        self._set_index(register, source)
        result, _ = self._link(records, rejects, records_source, fit=True)
        return result

    def _record_ids(self, frame: pd.DataFrame) -> pd.Series:
        column = self.record_id or ("record_id" if "record_id" in frame.columns else None)
        if column is None:
            return pd.Series(np.arange(1, len(frame) + 1).astype(str), index=frame.index)
        if column not in frame.columns:
            raise InputError(f"records: no record id column {column!r}")
        return frame[column].fillna("").astype(str)

    def _score_input(self, frame: pd.DataFrame, source: str = "<records>"):
        prepared = self.index_.prepare(frame, source=source, workers=self.workers)
        chars, words = self.index_.vectorize(prepared["text"], workers=self.workers)
        pairs, features = pairs_and_features(prepared, self.index_, self.rules_, new_chars=chars, new_words=words,
                                             max_block=self.max_block, workers=self.workers)
        return prepared, chars, words, pairs, features

    def _fit_unsupervised(self, records: pd.DataFrame, source: str = "<records>") -> FellegiSunterModel:
        records = self._valid_records(records, Rejects(), source).reset_index(drop=True)
        _, _, _, pairs, features = self._score_input(records, source)
        return self._fit_em(pairs, features, self.index_.fields_)

    def _fit_em(self, pairs: pd.DataFrame, features: pd.DataFrame, fields, exclusive: bool = True):
        owner = pairs["new"].to_numpy()
        records = np.unique(owner)
        if len(records) > self.em_records:  # EM needs a sample of records, not all of a large batch
            chosen = np.random.default_rng(0).choice(records, self.em_records, replace=False)
            subset = np.isin(owner, chosen)
        else:
            subset = np.ones(len(pairs), dtype=bool)
        mask = subset.copy()
        if self.em_candidates:
            mask[subset] = fitting_pairs(pairs[subset], features[subset], self.em_candidates)
        groups = pairs["new"].to_numpy()[mask] if exclusive and self.exclusive_em else None
        return FellegiSunterModel().fit(agreement_levels(features[mask], fields), groups)

    def _fit_supervised(self, training: pd.DataFrame, records: pd.DataFrame | None) -> SupervisedModel:
        if self.id_column not in training.columns:
            raise InputError(f"training: missing column {self.id_column!r} (the register id of each record)")
        field_columns = [f.column for f in self.index_.fields_ if not f.optional]
        if not all(c in training.columns for c in field_columns):
            if records is None:
                raise InputError(f"training: the file has no field columns ({', '.join(field_columns)}); "
                                 "give the records it refers to")
            ids = self._record_ids(training)
            key = unused_name(records.columns, "_record_key")
            by_id = records.assign(**{key: self._record_ids(records).to_numpy()}).drop_duplicates(key).set_index(key)
            missing = ~ids.isin(by_id.index)
            if missing.any():
                raise InputError(f"training: {int(missing.sum())} record id(s) not among the records, "
                                 f"e.g. {', '.join(ids[missing].head(5))}")
            labels = training[self.id_column].fillna("").astype(str).to_numpy()
            training = by_id.loc[ids.to_numpy()].reset_index(drop=True)
            training[self.id_column] = labels
        training = training.reset_index(drop=True)
        labels = training[self.id_column].fillna("").astype(str).str.strip()
        position = pd.Series(np.arange(len(self.index_)), index=np.asarray(self.index_.ids_, dtype=object))
        unknown = (labels != "") & ~labels.isin(position.index)
        if unknown.any():
            raise InputError(f"training: {int(unknown.sum())} register id(s) not in the register, "
                             f"e.g. {', '.join(labels[unknown].head(5))}")
        prepared, chars, words, pairs, _ = self._score_input(training, "training")
        # Every true pair is a positive example even when blocking missed it.
        truth = pd.DataFrame({"new": np.flatnonzero(labels != ""),
                              "register": position.reindex(labels[labels != ""]).to_numpy(dtype=np.int64)})
        pairs = pd.concat([pairs, truth]).drop_duplicates().reset_index(drop=True)
        features = compare(pairs, prepared, self.index_, new_chars=chars, new_words=words, workers=self.workers)
        key = set(zip(truth["new"], truth["register"]))
        y = np.fromiter(((a, b) in key for a, b in zip(pairs["new"], pairs["register"])), dtype=bool,
                        count=len(pairs)).astype(int)
        log.info("training: %d pairs, %d matches", len(y), int(y.sum()))
        return SupervisedModel().fit(features, y)

    # ---------------------------------------------------------------- linking
    def _valid_records(self, records: pd.DataFrame, rejects: Rejects, source: str,
                       fields: Sequence[Field] | None = None) -> pd.DataFrame:
        """``records`` less those with an empty name (added to ``rejects``); missing columns raise."""
        if not isinstance(records, pd.DataFrame):
            raise TypeError(f"records must be a pandas DataFrame, got {type(records).__name__}")
        fields = self.index_.fields_ if fields is None else fields
        check_fields(records, [f for f in fields if not f.optional], source, "new")
        names = [f.column for f in fields if f.kind == "name"] or \
            [f.column for f in fields if f.kind == "person_name"]
        columns = [c for c in names if c in records.columns]
        if not columns:
            return records
        empty = np.ones(len(records), dtype=bool)
        for c in columns:
            empty &= records[c].fillna("").astype(str).str.strip().to_numpy() == ""
        if empty.any():
            bad = records[empty]
            rows = bad[ROW_COLUMN] if ROW_COLUMN in bad.columns else pd.Series(np.flatnonzero(empty) + 1)
            for row in rows:
                rejects.add(source, int(row), columns[0], "empty name: nothing to link on", "")
        return records[~empty]

    def link(self, records: pd.DataFrame, *, rejects: Rejects | None = None,
             source: str = "<records>") -> pd.DataFrame:
        """Link a batch: a new frame of every input column unchanged plus ``OUTPUT_COLUMNS`` (named
        ``output_prefix + name``; one that would overwrite an input column raises ``ColumnClash``).
        Records with an empty name are left out and noted in ``rejects`` (logged when not given).

        Changes nothing on the linker, so a runner can call it on any chunk, anywhere, in any order.
        """
        result, _ = self._link(records, rejects, source)
        return result

    def candidate_pairs(self, records: pd.DataFrame, *, source: str = "<records>") -> pd.DataFrame:
        """The batch's candidate pairs as ``link`` scores them: ``new`` (row position among the records
        ``link`` keeps), ``register`` (row position in the register) and ``confidence``; the pairs each
        blocking rule found are in ``.attrs["rules"]``."""
        _, pairs = self._link(records, Rejects(), source)
        return pairs

    def _link(self, records: pd.DataFrame, rejects: Rejects | None, source: str,
              fit: bool = False) -> tuple[pd.DataFrame, pd.DataFrame]:
        if fit:  # fit_link: EM on this batch's pairs (an empty batch fails as fit would)
            if not len(self._valid_records(records, Rejects(), source)):
                self.model_ = self._fit_unsupervised(records, source)
        elif not hasattr(self, "model_"):
            raise RuntimeError("fit the linker (fit(register, records=...) or fit(register, training)) "
                               "before link(records)")
        self._validate()
        collector = rejects if rejects is not None else Rejects()
        valid = self._valid_records(records, collector, source).reset_index(drop=True)
        if rejects is None and len(collector):
            log.warning("%s: %d record(s) with an empty name left out; pass rejects= to keep them",
                        source, len(collector))
        if not len(valid):
            empty = pd.DataFrame({c: pd.Series(dtype=float if c.startswith("confidence") else object)
                                  for c in OUTPUT_COLUMNS})
            pairs = pd.DataFrame({"new": pd.Series(dtype="int64"), "register": pd.Series(dtype="int64"),
                                  "confidence": pd.Series(dtype=float)})
            return add_outputs(valid, empty, prefix=self.output_prefix, source=source), pairs
        _, _, _, pairs, features = self._score_input(valid, source)
        if fit:
            self.model_ = self._fit_em(pairs, features, self.index_.fields_)
        outputs, confidence = self._decide(pd.DataFrame(index=valid.index), pairs, features)
        scored = pairs.assign(confidence=confidence)
        scored.attrs["rules"] = pairs.attrs.get("rules", {})
        return add_outputs(valid, outputs, prefix=self.output_prefix, source=source), scored

    def _pair_scores(self, features: pd.DataFrame) -> tuple[np.ndarray, pd.DataFrame]:
        if isinstance(self.model_, FellegiSunterModel):
            levels = agreement_levels(features, self.index_.fields_)
            return self.model_.log_odds(levels), self.model_.weights(levels)
        return self.model_.log_odds(features), self.model_.weights(features)

    def _decide(self, result: pd.DataFrame, pairs: pd.DataFrame, features: pd.DataFrame) -> pd.DataFrame:
        n = len(result)
        new = pairs["new"].to_numpy()
        register = pairs["register"].to_numpy()
        log_odds, weights = self._pair_scores(features)
        confidence = exclusive_confidence(new, log_odds)
        order = np.lexsort((-confidence, new))
        rank = np.arange(len(order)) - np.searchsorted(new[order], new[order], side="left")
        best = np.full(n, -1)
        second = np.full(n, -1)
        best[new[order][rank == 0]] = order[rank == 0]
        second[new[order][rank == 1]] = order[rank == 1]
        if self.one_to_one:
            kept = _greedy_one_to_one(new, register, confidence, self.refer_threshold)
            assigned = np.full(n, -1)
            assigned[new[kept]] = np.flatnonzero(kept)
            lost = (best >= 0) & (assigned < 0) & (confidence[np.maximum(best, 0)] >= self.refer_threshold)
            best = np.where(assigned >= 0, assigned, best)
        has = best >= 0
        conf = np.where(has, confidence[np.maximum(best, 0)], 0.0)
        decision = route(conf, self.threshold, refer_threshold=self.refer_threshold)
        if self.one_to_one:
            decision = np.where(lost, "no-match", decision)
        linked = decision != "no-match"
        at = register[np.maximum(best, 0)]
        ids = np.where(has & linked, self.index_.ids_at(at), "")
        result["register_id"] = ids
        result["confidence"] = np.round(conf, 4)
        result["decision"] = decision
        result["register_name"] = np.where(has & linked, self.index_.display_at("register_name", at), "")
        result["register_address"] = np.where(has & linked, self.index_.display_at("register_address", at), "")
        has2 = second >= 0
        result["register_id_2"] = np.where(has2, self.index_.ids_at(register[np.maximum(second, 0)]), "")
        result["confidence_2"] = np.where(has2, np.round(confidence[np.maximum(second, 0)], 4), np.nan)
        text = np.full(n, "", dtype=object)
        text[has] = explain(weights.iloc[best[has]])
        if self.one_to_one:
            text[lost] = "register entry taken by a more confident record in this batch"
        result["explanation"] = np.where(has, text, "no candidate found by blocking")
        return result, confidence

    # ---------------------------------------------------------------- saving
    _PARAMS = ("id_column", "record_id", "threshold", "refer_threshold", "one_to_one", "regional", "k", "max_block",
               "em_candidates", "exclusive_em", "em_records", "workers", "output_prefix")

    def save(self, directory: str | os.PathLike, *, index_directory: str | os.PathLike | None = None) -> Path:
        """Save the fitted model and settings as an artefact (no pickle); with ``index_directory``
        the register index is saved there too and found again by ``load``."""
        if not hasattr(self, "model_"):
            raise RuntimeError("fit the linker before saving it")
        meta = {"params": {p: getattr(self, p) for p in self._PARAMS},
                "rules": [{"type": type(r).__name__, **asdict(r)} for r in self.rules_]}
        if index_directory is not None:
            self.index_.save(index_directory)
            meta["index"] = os.path.relpath(Path(index_directory).resolve(), Path(directory).resolve().parent)
        if isinstance(self.model_, FellegiSunterModel):
            meta.update(model="fellegi-sunter", prior=self.model_.prior_)
            tables = {"weights": pd.DataFrame({"field": self.model_.m_.index, "m": self.model_.m_.to_numpy(),
                                               "u": self.model_.u_.to_numpy()})}
            arrays = {}
        else:
            model = self.model_
            meta.update(model="supervised", intercept=model.intercept_, C=model.C)
            terms = model.columns_ + [f"missing:{c}" for c in model.indicators_]
            tables = {"coefficients": pd.DataFrame({"term": terms, "coef": model.coef_, "baseline": model.baseline_})}
            arrays = {}
        return save_artefact(directory, ARTEFACT_KIND, tables, arrays=arrays, meta=meta)

    @classmethod
    def load(cls, directory: str | os.PathLike, index: RegisterIndex | str | os.PathLike | None = None
             ) -> "EstablishmentLinker":
        """Load a linker saved by ``save``; ``index`` is a RegisterIndex or its directory
        (default: the one saved beside the model)."""
        art = load_artefact(directory, ARTEFACT_KIND)
        rules = [_RULE_TYPES[spec.pop("type")](**{k: tuple(v) if isinstance(v, list) else v
                                                   for k, v in spec.items()}) for spec in art.meta["rules"]]
        linker = cls(rules=rules, **art.meta["params"])
        if index is None:
            if "index" not in art.meta:
                raise ArtefactError(f"{directory}: saved without its register index; pass index=")
            index = Path(directory).resolve().parent / art.meta["index"]
        linker.index_ = index if isinstance(index, RegisterIndex) else RegisterIndex.load(index)
        linker.rules_ = rules
        if art.meta["model"] == "fellegi-sunter":
            table = art.tables["weights"]
            model = FellegiSunterModel()
            model.m_ = pd.Series(table["m"].to_numpy(dtype=float), index=table["field"].astype(str))
            model.u_ = pd.Series(table["u"].to_numpy(dtype=float), index=table["field"].astype(str))
            model.prior_ = float(art.meta["prior"])
        else:
            table = art.tables["coefficients"]
            terms = table["term"].astype(str).tolist()
            model = SupervisedModel(C=float(art.meta.get("C", 1.0)))
            model.columns_ = [t for t in terms if not t.startswith("missing:")]
            model.indicators_ = [t.removeprefix("missing:") for t in terms if t.startswith("missing:")]
            model.coef_ = table["coef"].to_numpy(dtype=float)
            model.baseline_ = table["baseline"].to_numpy(dtype=float)
            model.intercept_ = float(art.meta["intercept"])
        linker.model_ = model
        return linker

    # ---------------------------------------------------------------- deduplication
    def dedupe(self, records: pd.DataFrame, *, rejects: Rejects | None = None, source: str = "<records>",
               return_pairs: bool = False):
        """Find duplicates within ``records``: a new frame of every input column plus ``cluster_id``,
        ``cluster_size`` and ``duplicate_confidence`` (the best link into its group).

        Pairs whose match probability reaches ``threshold`` are joined; groups are the
        connected components. Uses the same fields, with a Fellegi–Sunter model fitted on
        the batch's own candidate pairs (nothing is kept on the linker). With ``return_pairs``
        also the candidate pairs (``new``, ``register``: row positions) with their ``probability``.
        """
        self._validate()
        rejects = rejects if rejects is not None else Rejects()
        fields = [replace(f, register_column=f.column) for f in resolve_fields(self.fields)]
        valid = self._valid_records(records, rejects, source, fields).reset_index(drop=True)
        n = len(valid)
        add_outputs(valid.head(0), pd.DataFrame(columns=DEDUPE_COLUMNS), prefix=self.output_prefix,
                    source=source)  # refuse a clash before the work, not after
        dedupe_id = unused_name(valid.columns, "_dedupe_id")
        index = RegisterIndex(fields, dedupe_id, workers=self.workers).fit(
            valid.assign(**{dedupe_id: np.arange(n).astype(str)}), source=source)
        rules = list(self.rules) if self.rules is not None else default_rules(index.fields_, k=self.k)
        pairs = candidate_pairs(index.prepared_, index, rules, new_chars=index.char_matrix_,
                                new_words=index.word_matrix_, max_block=self.max_block, self_join=True)
        features = compare(pairs, index.prepared_, index, new_chars=index.char_matrix_,
                           new_words=index.word_matrix_, workers=self.workers)
        levels = agreement_levels(features, index.fields_)
        # A record may have several duplicates: no rivalry between its candidates here.
        probability = self._fit_em(pairs, features, index.fields_, exclusive=False).predict_proba(levels)
        linked = probability >= self.threshold
        a, b = pairs["new"].to_numpy()[linked], pairs["register"].to_numpy()[linked]
        _, labels = connected_components(coo_matrix((np.ones(len(a)), (a, b)), shape=(n, n)), directed=False)
        best = np.zeros(n)
        np.maximum.at(best, a, probability[linked])
        np.maximum.at(best, b, probability[linked])
        width = len(str(max(n, 1)))
        result = pd.DataFrame({"cluster_id": [f"g{label:0{width}d}" for label in labels],
                               "cluster_size": np.bincount(labels, minlength=1)[labels] if n else [],
                               "duplicate_confidence": np.round(best, 4)})
        result = add_outputs(valid, result, prefix=self.output_prefix, source=source)
        return (result, pairs.assign(probability=probability)) if return_pairs else result
