"""Fellegi–Sunter: the one implementation, used by the linker and by the unsupervised confidence model.

m and u probabilities per field (EM-estimated with recordlinkage's ``ECMClassifier``, then refined),
per-field weights in bits — log2(m/u) when a field agrees, log2((1-m)/(1-u)) when it disagrees, 0
when it is missing (Fellegi and Sunter, 1969) — and the posterior log odds in nats. m and u are
kept inside (CLIP, 1 - CLIP) so that no single field has an infinite weight.
"""
from __future__ import annotations

import logging

import numpy as np
import pandas as pd
from recordlinkage import ECMClassifier

log = logging.getLogger(__name__)

CLIP = 1e-4
LN2 = np.log(2.0)


class FellegiSunterModel:
    """Fellegi–Sunter weights from EM-estimated m/u probabilities.

    ``fit`` runs recordlinkage's ``ECMClassifier`` on the 0/1 agreement patterns (a missing
    value counted as disagreement), then re-estimates m and u of each field over the pairs
    where that field is present, using the EM posteriors: a missing value is then neither
    agreement nor disagreement (weight 0), as in Fellegi and Sunter (1969).

    ``max_m`` caps m: EM's match class tends to be the flawless pairs, m near 1, and then a single
    typing error would outweigh everything else; at most 0.99 leaves room for one error in a
    hundred in any field (a cap of our choosing, in the spirit of common practice).

    Attributes: ``m_``, ``u_`` (Series per field), ``prior_`` (share of matches among candidates).
    """

    def __init__(self, max_iter: int = 100, refinements: int = 30, sample_size: int = 200_000,
                 min_pairs: int = 50, max_m: float = 0.99) -> None:
        self.max_iter = max_iter
        self.max_m = max_m
        self.min_pairs = min_pairs
        self.refinements = refinements
        self.sample_size = sample_size

    def fit(self, levels: pd.DataFrame, groups: np.ndarray | None = None) -> "FellegiSunterModel":
        """Estimate m, u and the prior from 0/1/NaN ``levels``; ``groups`` (the record of each pair)
        makes the refinements treat a record's candidates as rivals: at most one is its match."""
        ecm = ECMClassifier(init="jaro", binarize=None, max_iter=self.max_iter)
        levels = levels.loc[:, levels.notna().any()]  # a field never observed carries no weight
        complete = levels.fillna(0).astype(np.int8)
        # ECM's "jaro" start needs both values present in every column; a constant column gets a fixed weight.
        varying = [c for c in levels.columns if complete[c].nunique() == 2]
        self.m_ = pd.Series(0.9, index=levels.columns, dtype=float)
        self.u_ = pd.Series(0.1, index=levels.columns, dtype=float)
        self.prior_ = 0.1
        if len(levels) < self.min_pairs:
            # Too few pairs to estimate anything: the textbook start values stand (m 0.9, u 0.1).
            log.warning("only %d candidate pairs: Fellegi–Sunter weights not estimated (m=0.9, u=0.1)",
                        len(levels))
            self._clip()
            return self
        if varying:
            # ECM gives the starting m/u; a sample is enough for it, the refinements below use every pair.
            sample = complete[varying]
            if len(sample) > self.sample_size:
                sample = sample.sample(self.sample_size, random_state=0)
            ecm.fit(sample)
            m, u = ecm.m_probs, ecm.u_probs
            for c in varying:
                self.m_[c] = m[c].get(1, CLIP)
                self.u_[c] = u[c].get(1, CLIP)
            self.prior_ = float(np.exp(ecm.log_p))
        self._clip()
        observed = levels.notna()
        for _ in range(self.refinements):
            if groups is None:
                posterior = self.predict_proba(levels)
            else:
                posterior = exclusive_confidence(np.asarray(groups), self.log_odds(levels))
            previous = pd.concat([self.m_, self.u_])
            for c in levels.columns:
                seen = observed[c].to_numpy()
                agree = (levels[c].to_numpy() == 1) & seen
                g = posterior[seen]
                if g.sum() > 0 and (1 - g).sum() > 0:
                    self.m_[c] = posterior[agree].sum() / g.sum()
                    self.u_[c] = (1 - posterior[agree]).sum() / (1 - g).sum()
            self.prior_ = float(np.clip(posterior.mean(), CLIP, 1 - CLIP))
            self._clip()
            if np.allclose(previous, pd.concat([self.m_, self.u_]), atol=1e-4):
                break
        return self

    def _clip(self) -> None:
        self.m_ = self.m_.clip(CLIP, self.max_m)
        self.u_ = self.u_.clip(CLIP, 1 - CLIP)

    def weights(self, levels: pd.DataFrame) -> pd.DataFrame:
        """Per-field weight in bits: log2(m/u) if agreeing, log2((1-m)/(1-u)) if not, 0 if missing."""
        agree = np.log2(self.m_ / self.u_)
        disagree = np.log2((1 - self.m_) / (1 - self.u_))
        values = levels[self.m_.index].to_numpy(dtype=float)
        out = np.where(values == 1, agree.to_numpy(), disagree.to_numpy())
        out[np.isnan(values)] = 0.0
        return pd.DataFrame(out, columns=self.m_.index, index=levels.index)

    def log_odds(self, levels: pd.DataFrame) -> np.ndarray:
        """Natural-log posterior odds of a match for each pair."""
        prior = np.log(self.prior_ / (1 - self.prior_))
        return prior + self.weights(levels).to_numpy().sum(axis=1) * LN2

    def predict_proba(self, levels: pd.DataFrame) -> np.ndarray:
        return 1.0 / (1.0 + np.exp(-np.clip(self.log_odds(levels), -700, 700)))


def exclusive_confidence(new: np.ndarray, log_odds: np.ndarray) -> np.ndarray:
    """P(this candidate is the record's match) when at most one candidate is: odds / (1 + sum of odds)."""
    shift = np.maximum(np.zeros(len(log_odds)), log_odds)
    top = pd.Series(shift).groupby(new).transform("max").to_numpy()
    odds = np.exp(np.clip(log_odds - top, -700, 0))
    total = pd.Series(odds).groupby(new).transform("sum").to_numpy() + np.exp(-top)
    return odds / total
