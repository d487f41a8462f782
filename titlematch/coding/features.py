"""Comparison features per (title, candidate code): what the confidence model learns from.

One row per distinct (normalized title, context) unit and candidate code. The best
dictionary key behind each code is the one most similar to the title; its string
similarities, the code's share among its records, the context agreement and the text
classifier's probability describe how believable the code is.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.sparse as sp
from rapidfuzz import distance, fuzz, process

from .candidates import TitleIndex
from .dictionary import context_tokens
from .linear import head_phrase, head_word

FEATURES = [
    "exact", "exact_corrected", "via_role", "sim_char", "sim_word", "ratio", "token_set_ratio", "partial_ratio",
    "jaro_winkler", "share", "share_evidence", "log_exact_weight", "support", "log_key_weight", "log_code_weight", "code_prior", "ctx_share",
    "ctx_global", "has_context", "ctx_known", "clf_prob", "clf_rank", "clf_group_prob", "group_support",
    "official", "n_changes", "head_share", "phrase_share", "word_cover", "word_vote",
    "spelling_changed", "n_roles", "n_tokens", "n_codes", "score", "score_gap", "rank",
]
MAX_CANDIDATES = 10
NEAR_DISCOUNT = 0.95   # similarity factor for a dictionary title that is not the title itself
EXACT_EVIDENCE = 5.0   # records of the exact title at which its neighbours' codes count half


def _pairwise_cosine(a: sp.csr_matrix, b: sp.csr_matrix) -> np.ndarray:
    return np.asarray(a.multiply(b).sum(axis=1)).ravel()


class ContextTables:
    """Context evidence from a dictionary: per (key, token, code) and per (token, code) weights,
    and how telling each token is (the largest share any one code has under it)."""

    def __init__(self, contexts: pd.DataFrame, index: TitleIndex):
        key_pos = pd.Index(index.keys_).get_indexer(contexts["key"])
        code_pos = pd.Index(index.codes_).get_indexer(contexts["code"])
        table = pd.DataFrame({"key": key_pos, "token": contexts["token"].to_numpy(), "code": code_pos,
                              "weight": contexts["weight"].to_numpy()})
        table = table[(table["key"] >= 0) & (table["code"] >= 0)]
        self.key_token_code = table.set_index(["key", "token", "code"])["weight"]
        by_key_token = table.groupby(["key", "token"])["weight"]
        self.key_token = by_key_token.sum()
        self.key_token_purity = by_key_token.max() / self.key_token
        self.token_code = table.groupby(["token", "code"])["weight"].sum()
        by_token = self.token_code.groupby(level="token")
        self.token = by_token.sum()
        self.token_purity = by_token.max() / self.token


CONTEXT_PRIOR = 2.0     # pseudo-records pulling a context token's code share toward the title's overall share
CONTEXT_MIN_WEIGHT = 3.0  # a token must have been seen with the title this often to be the telling one


def _telling_token(frame: pd.DataFrame, weight: np.ndarray, purity: np.ndarray, by: list[str]) -> pd.DataFrame:
    """Per group, the token with the purest code distribution among those seen often enough (the
    whole context first when it qualifies, since it is the most specific): columns ``by + [token]``."""
    enough = np.nan_to_num(weight) >= CONTEXT_MIN_WEIGHT
    whole = np.fromiter((t[:1] == "=" for t in frame["token"]), dtype=bool, count=len(frame))
    rank = np.where(enough, np.nan_to_num(purity) + 0.5 * whole, -1.0)
    order = frame[by + ["token"]].assign(rank=rank, w=np.nan_to_num(weight))
    order = order.sort_values(by + ["rank", "w", "token"], ascending=[True] * len(by) + [False, False, True])
    best = order.drop_duplicates(by)
    return best[best["rank"] >= 0][by + ["token"]]


def _context_features(cands: pd.DataFrame, unit_tokens: pd.Series, ctx: ContextTables) -> pd.DataFrame:
    """The code's share among records sharing the unit's most telling context token: within the
    best key (``ctx_share``) and over all keys (``ctx_global``). One token decides for every code
    of a record, the purest one seen often enough, since words shared by every context
    (``school``) say nothing; shares are shrunk toward the code's overall share.

    The token is chosen once per (record, dictionary title) and once per record, not per
    candidate code: the choice does not depend on the code, and it keeps large batches quick.
    """
    tokens = unit_tokens.rename("token").explode().dropna().reset_index().rename(columns={"index": "unit"})
    out = pd.DataFrame({"ctx_share": np.nan, "ctx_global": np.nan}, index=cands["row"].to_numpy())
    if not len(tokens):
        return out
    pairs = cands[["unit", "key"]].drop_duplicates().merge(tokens, on="unit")
    kt = pd.MultiIndex.from_arrays([pairs["key"], pairs["token"]])
    local = _telling_token(pairs, ctx.key_token.reindex(kt).to_numpy(), ctx.key_token_purity.reindex(kt).to_numpy(),
                           ["unit", "key"])
    wide = _telling_token(tokens, ctx.token.reindex(tokens["token"]).to_numpy(),
                          ctx.token_purity.reindex(tokens["token"]).to_numpy(), ["unit"])
    rows = cands[["row", "unit", "key", "code", "share", "code_prior_share"]]
    with_local = rows.merge(local, on=["unit", "key"])
    if len(with_local):
        ktc = pd.MultiIndex.from_arrays([with_local["key"], with_local["token"], with_local["code"]])
        kt = pd.MultiIndex.from_arrays([with_local["key"], with_local["token"]])
        in_key = ctx.key_token_code.reindex(ktc).fillna(0).to_numpy()
        total = ctx.key_token.reindex(kt).to_numpy()
        out.loc[with_local["row"].to_numpy(), "ctx_share"] = (
            (in_key + CONTEXT_PRIOR * with_local["share"].to_numpy()) / (total + CONTEXT_PRIOR))
    with_wide = rows.merge(wide, on="unit")
    if len(with_wide):
        tc = pd.MultiIndex.from_arrays([with_wide["token"], with_wide["code"]])
        in_all = ctx.token_code.reindex(tc).fillna(0).to_numpy()
        total = ctx.token.reindex(with_wide["token"]).to_numpy()
        out.loc[with_wide["row"].to_numpy(), "ctx_global"] = (
            (in_all + CONTEXT_PRIOR * with_wide["code_prior_share"].to_numpy()) / (total + CONTEXT_PRIOR))
    return out


def candidate_features(index: TitleIndex, ctx: ContextTables, official: set, units: pd.DataFrame,
                       max_candidates: int = MAX_CANDIDATES) -> pd.DataFrame:
    """Candidates and features for ``units`` (columns ``key``, ``corrected``, ``primary``, ``context``,
    ``n_changes``, ``spelling_changed``, ``n_roles``). Returns one row per (unit, code), best first,
    with ``unit`` (position in ``units``), ``code`` (string), ``key`` (best dictionary key) and FEATURES.
    """
    # one query per distinct (key, primary role): what a title's candidates are never depends on the other
    # titles in the batch, so output does not depend on how a file is cut into chunks
    per_query = units.drop_duplicates(["key", "primary"]).reset_index(drop=True)
    queries = pd.MultiIndex.from_frame(per_query[["key", "primary"]])
    q_of_unit = queries.get_indexer(pd.MultiIndex.from_frame(units[["key", "primary"]]))
    originals = per_query["key"].to_numpy(dtype=object)
    primaries = per_query["primary"].to_numpy(dtype=object)
    qtext = per_query["corrected"].to_numpy(dtype=object)

    qc, qw = index.query_rows(qtext)
    pairs = [index.neighbours(qc, "char"), index.neighbours(qw, "word")]
    exact_orig = index.exact(originals).assign(exact=1.0)
    exact_corr = index.exact(qtext).assign(exact_corrected=1.0)
    role_mask = np.array([p != o and p != "" for p, o in zip(primaries, originals)])
    role_q = np.flatnonzero(role_mask)
    role_hits = index.exact(primaries[role_q]).assign(via_role=1.0)
    role_hits["query"] = role_q[role_hits["query"].to_numpy()] if len(role_hits) else role_hits["query"]
    pairs += [exact_orig, exact_corr, role_hits]
    pairs = pd.concat([p[["query", "key"]] for p in pairs], ignore_index=True).drop_duplicates()
    flags = pairs.merge(exact_orig, how="left").merge(exact_corr, how="left").merge(role_hits, how="left")
    flags = flags.fillna({"exact": 0.0, "exact_corrected": 0.0, "via_role": 0.0})

    # uniform similarity features for every (query, key) pair, whatever source found it
    q_idx, k_idx = flags["query"].to_numpy(np.int64), flags["key"].to_numpy(np.int64)
    kc, kw = index.char_matrix_.T.tocsr(), index.word_matrix_.T.tocsr()
    flags["sim_char"] = _pairwise_cosine(qc[q_idx], kc[k_idx])
    flags["sim_word"] = _pairwise_cosine(qw[q_idx], kw[k_idx])
    flags.loc[(flags["exact"] + flags["exact_corrected"]) > 0, ["sim_char", "sim_word"]] = 1.0
    flags["strength"] = np.maximum(flags["sim_char"], flags["sim_word"])
    is_exact = (flags["exact"] + flags["exact_corrected"]) > 0
    flags.loc[~is_exact, "strength"] *= NEAR_DISCOUNT  # a different title never ties with the same one
    # the first-listed role of a multi-role title is what gets coded (common practice)
    flags.loc[flags["via_role"] > 0, "strength"] = 1.0

    # expand each key to its codes
    kc_rows = index.key_codes_[k_idx].tocoo()
    key_total = np.asarray(index.key_codes_.sum(axis=1)).ravel()
    expanded = flags.iloc[kc_rows.row].reset_index(drop=True)
    expanded["code"] = kc_rows.col
    expanded["code_weight"] = kc_rows.data
    expanded["key_weight"] = key_total[expanded["key"].to_numpy()]
    expanded["share"] = expanded["code_weight"] / expanded["key_weight"]
    # a title seen once says little: its share counts as if one more record had another code
    expanded["share_evidence"] = expanded["code_weight"] / (expanded["key_weight"] + 1.0)
    exact_weight = (expanded[expanded["exact"] + expanded["exact_corrected"] > 0]
                    .drop_duplicates(["query", "key"]).groupby("query")["key_weight"].max())
    expanded["vote"] = expanded["strength"] ** 2 * expanded["code_weight"]
    expanded["key_vote"] = expanded["strength"] ** 2 * expanded["key_weight"]
    votes = expanded.groupby(["query", "code"])["vote"].sum()
    vote_total = expanded.drop_duplicates(["query", "key"]).groupby("query")["key_vote"].sum()
    # the dictionary title standing behind each code: the best match weighed by its evidence
    # (the title itself, corrected, or its first role before any neighbour)
    expanded["evidence"] = expanded["strength"] ** 2 * expanded["share_evidence"]
    expanded["own"] = (expanded["exact"] + expanded["exact_corrected"] + expanded["via_role"]) > 0
    best = (expanded.sort_values(["query", "code", "own", "evidence", "strength", "key"],
                                 ascending=[True, True, False, False, False, True])
            .drop_duplicates(["query", "code"]))
    best["support"] = (votes.reindex(pd.MultiIndex.from_arrays([best["query"], best["code"]])).to_numpy()
                       / vote_total.reindex(best["query"]).to_numpy())

    # to units: every unit of a query shares its candidates; context differs per unit
    best = best[[c for c in best.columns if c not in ("own", "evidence", "key_vote", "vote")]]
    best = best.sort_values(["query", "code"]).reset_index(drop=True)
    cands = _repeat_for_units(best, q_of_unit)
    # the classifier reads title and context, so it works per distinct (query, context)
    reads = pd.DataFrame({"query": q_of_unit, "context": units["context"].fillna("").to_numpy()})
    distinct = reads.drop_duplicates().reset_index(drop=True)
    read_of_unit = pd.MultiIndex.from_frame(distinct).get_indexer(pd.MultiIndex.from_frame(reads))
    # every read also needs the classifier's probability of each code its title's matches found
    needed = (pd.DataFrame({"read": np.arange(len(distinct)), "query": distinct["query"].to_numpy()})
              .merge(best[["query", "code"]], on="query"))
    clf, needed_prob, needed_group = index.classify(qtext[distinct["query"].to_numpy()], distinct["context"].to_numpy(),
                                                    pairs=(needed["read"].to_numpy(), needed["code"].to_numpy()))
    needed_at = pd.MultiIndex.from_arrays([needed["read"], needed["code"]])
    pair_prob = pd.Series(needed_prob, index=needed_at)
    pair_group = pd.Series(needed_group, index=needed_at)
    clf["clf_rank"] = clf.groupby("query")["prob"].rank(ascending=False, method="first")
    clf = _repeat_for_units(clf.rename(columns={"query": "read", "prob": "clf_prob", "group_prob": "clf_group_prob"})
                            .sort_values(["read", "code"]).reset_index(drop=True), read_of_unit, by="read")
    clf["query"] = q_of_unit[clf["unit"].to_numpy()]
    # codes found by the classifier alone join the others; the rest take its probability and rank
    found = pd.MultiIndex.from_arrays([cands["unit"], cands["code"]])
    offered = pd.MultiIndex.from_arrays([clf["unit"], clf["code"]])
    from_clf = clf.set_index(offered)
    read_found = pd.MultiIndex.from_arrays([read_of_unit[cands["unit"].to_numpy()], cands["code"].to_numpy()])
    cands["clf_prob"] = pair_prob.reindex(read_found).fillna(0.0).to_numpy()
    cands["clf_group_prob"] = pair_group.reindex(read_found).fillna(0.0).to_numpy()
    cands["clf_rank"] = from_clf["clf_rank"].reindex(found).fillna(99.0).to_numpy()
    fill = {"exact": 0.0, "exact_corrected": 0.0, "via_role": 0.0, "sim_char": 0.0, "sim_word": 0.0,
            "strength": 0.0, "share": 0.0, "share_evidence": 0.0, "support": 0.0, "code_weight": 0.0,
            "key_weight": 0.0, "clf_prob": 0.0, "clf_group_prob": 0.0, "clf_rank": 99.0, "key": -1}
    extra = clf[~offered.isin(found)].assign(**{k: v for k, v in fill.items() if k not in clf.columns})
    cands = pd.concat([cands, extra[cands.columns].astype(cands.dtypes.to_dict())], ignore_index=True)
    cands["key"] = cands["key"].astype(np.int64)
    cands = cands.sort_values(["unit", "code"]).reset_index(drop=True)
    cands["row"] = np.arange(len(cands))
    tokens = units["context"].fillna("").map(context_tokens)
    tokens.index = np.arange(len(units))
    code_total = np.asarray(index.key_codes_.sum(axis=0)).ravel()
    cands["code_prior_share"] = code_total[cands["code"].to_numpy()] / code_total.sum()
    _profile_features(cands, index, qtext, qw)
    ctx_feats = _context_features(cands, tokens, ctx).reindex(cands["row"])
    cands["ctx_share"] = ctx_feats["ctx_share"].to_numpy()
    cands["ctx_global"] = ctx_feats["ctx_global"].to_numpy()
    has_context = tokens.map(len).to_numpy() > 0
    cands["has_context"] = has_context[cands["unit"].to_numpy()].astype(float)
    cands["ctx_known"] = cands["ctx_share"].notna().astype(float)
    share_eff = np.where(cands["ctx_known"] > 0, cands["ctx_share"].fillna(0),
                         _with_global_context(cands))
    # a well-attested exact title leaves little room for its neighbours' codes
    own = exact_weight.reindex(cands["query"]).fillna(0).to_numpy()
    cands["log_exact_weight"] = np.log1p(own)
    from_exact = (cands["exact"] + cands["exact_corrected"] + cands["via_role"]).to_numpy() > 0
    room = np.where(from_exact, 1.0, EXACT_EVIDENCE / (EXACT_EVIDENCE + own))
    # similarity squared: a near neighbour must be very near to outrank an exact title's share
    cands["score"] = np.maximum(cands["strength"] ** 2 * share_eff * room, 0.5 * cands["clf_prob"])
    cands[["ctx_share", "ctx_global"]] = cands[["ctx_share", "ctx_global"]].fillna(-1.0)

    # the dictionary's evidence for the code's parent group: the classification's hierarchy at work,
    # since a group is often clear when the detailed code is not
    group = index.code_group_[cands["code"].to_numpy()]
    cands["group_support"] = pd.Series(cands["support"].to_numpy()).groupby(
        [cands["unit"].to_numpy(), group]).transform("sum").to_numpy()
    cands = cands.sort_values(["unit", "score", "support", "code"], ascending=[True, False, False, True])
    cands["rank"] = cands.groupby("unit").cumcount() + 1
    cands = cands[cands["rank"] <= max_candidates].reset_index(drop=True)
    cands["n_codes"] = cands.groupby("unit")["code"].transform("size").astype(float)
    nxt = cands.groupby("unit")["score"].shift(-1).fillna(0.0)
    first = cands.groupby("unit")["score"].transform("first")
    cands["score_gap"] = np.where(cands["rank"] == 1, cands["score"] - nxt, cands["score"] - first)

    # string similarities of the title as written (before spelling correction) and the best key
    # behind each code: a correction makes a title look exact, so these say how far it really was
    key_text = np.where(cands["key"].to_numpy() >= 0, index.keys_[np.maximum(cands["key"].to_numpy(), 0)], "")
    title_text = originals[cands["query"].to_numpy()]
    for name, scorer in (("ratio", fuzz.ratio), ("token_set_ratio", fuzz.token_set_ratio),
                         ("partial_ratio", fuzz.partial_ratio)):
        cands[name] = process.cpdist(title_text, key_text, scorer=scorer, workers=-1) / 100.0
    cands["jaro_winkler"] = process.cpdist(title_text, key_text, scorer=distance.JaroWinkler.normalized_similarity,
                                           workers=-1)
    cands.loc[cands["key"] < 0, ["ratio", "token_set_ratio", "partial_ratio", "jaro_winkler"]] = 0.0

    code_strings = index.codes_[cands["code"].to_numpy()]
    cands["code_prior"] = np.log(cands["code_prior_share"])
    cands["log_key_weight"] = np.log1p(cands["key_weight"])
    cands["log_code_weight"] = np.log1p(cands["code_weight"])
    cands["official"] = [float((k, c) in official) for k, c in zip(key_text, code_strings)]
    for col in ("n_changes", "spelling_changed", "n_roles"):
        cands[col] = units[col].to_numpy(dtype=float)[cands["unit"].to_numpy()]
    cands["n_tokens"] = [len(t.split()) for t in qtext[cands["query"].to_numpy()]]
    cands["code"] = code_strings
    cands["key"] = key_text
    return cands[["unit", "code", "key"] + FEATURES]


def _profile_features(cands: pd.DataFrame, index: TitleIndex, qtext: np.ndarray, qw: sp.csr_matrix) -> None:
    """Evidence from all of a code's dictionary titles, not only the best one behind it: the code's
    share among titles with the query's head word (``head_share``) and head phrase (``phrase_share``),
    one record of doubt added, -1 for one the dictionary never had; the part of the query's word
    TF-IDF mass that the code's titles use (``word_cover``); and the query words' code shares weighted
    by their squared TF-IDF weights (``word_vote``)."""
    q = cands["query"].to_numpy(np.int64)
    c = cands["code"].to_numpy(np.int64)
    for name, table, label in (("head_share", index.head_codes_, head_word),
                               ("phrase_share", index.phrase_codes_, head_phrase)):
        rows = table.rows(label(t) for t in qtext)[q]
        _, weight = table.weights_of(rows, c)
        cands[name] = np.where(rows >= 0, weight / (table.total[np.maximum(rows, 0)] + 1.0), -1.0)
    # each candidate's query words, looked up among its code's words (a code's own row of words may
    # hold thousands: taking it per candidate would cost memory in proportion)
    squared = qw.multiply(qw).tocsr()
    counts = np.diff(squared.indptr)[q]
    owner = np.repeat(np.arange(len(cands)), counts)
    nz = np.repeat(squared.indptr[q], counts) + (np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts))
    words = squared.indices[nz].astype(np.int64)
    hit, weight = index.word_codes_.weights_of(words, c[owner])
    cands["word_cover"] = np.bincount(owner, weights=np.where(hit, squared.data[nz], 0.0), minlength=len(cands))
    share = np.where(hit, weight / np.maximum(index.word_codes_.total[words], 1e-300), 0.0)
    cands["word_vote"] = np.bincount(owner, weights=squared.data[nz] * share, minlength=len(cands))


def _repeat_for_units(table: pd.DataFrame, owner_of_unit: np.ndarray, by: str = "query") -> pd.DataFrame:
    """Rows of ``table`` (sorted by ``by``) repeated for every unit whose owner is their ``by`` value,
    with a ``unit`` column: a positional take, much cheaper than a merge on wide frames."""
    owners = table[by].to_numpy()
    every = np.arange(owner_of_unit.max() + 1 if len(owner_of_unit) else 0)
    starts = np.searchsorted(owners, every, side="left")
    counts = (np.searchsorted(owners, every, side="right") - starts)[owner_of_unit]
    unit = np.repeat(np.arange(len(owner_of_unit)), counts)
    offset = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    take = np.repeat(starts[owner_of_unit], counts) + offset
    out = table.iloc[take].reset_index(drop=True)
    out.insert(0, "unit", unit)
    return out.drop(columns=[by]) if by != "query" else out


def _with_global_context(cands: pd.DataFrame) -> np.ndarray:
    """When the title was never seen in this context, weigh its codes by what the context says
    across all titles (naive Bayes: share x P(code | context) / P(code)), renormalized so the
    codes compared keep their total share: the title's own codes, or, for a title never seen,
    the codes of all its neighbours."""
    ratio = cands["ctx_global"].to_numpy() / cands["code_prior_share"].to_numpy()
    usable = ~np.isnan(ratio)
    weighted = cands["share_evidence"].to_numpy() * np.where(usable, ratio, 1.0)
    own = ((cands["exact"] + cands["exact_corrected"] + cands["via_role"]) > 0).to_numpy()
    units = cands["unit"].to_numpy()
    # the codes compared: the title's own, or all its neighbours' when it was never seen
    has_own = pd.Series(own).groupby(units).transform("any").to_numpy()
    group = own | ~has_own
    before = pd.Series(np.where(group, cands["share_evidence"], 0.0)).groupby(units).transform("sum").to_numpy()
    after = pd.Series(np.where(group, weighted, 0.0)).groupby(units).transform("sum").to_numpy()
    scaled = np.divide(weighted * before, after, out=cands["share_evidence"].to_numpy().copy(), where=after > 0)
    return np.where(group & usable, np.minimum(scaled, 1.0), cands["share_evidence"].to_numpy())


def parent_groups(cands: pd.DataFrame, top_codes: pd.Series, index: TitleIndex, with_confidence: bool) -> pd.DataFrame:
    """The parent group of each unit's chosen code (``parent_code``) and, with confidences, the
    probability that the group is right (``parent_confidence``): the confidences of every candidate
    in that group summed, since at most one candidate is right. The group is often certain when
    the detailed code is not, and a coarser tabulation or a specialised coder can use it."""
    code_pos = pd.Index(index.codes_).get_indexer(top_codes.to_numpy())
    parent = np.where(code_pos >= 0, index.groups_[index.code_group_[np.maximum(code_pos, 0)]], "")
    out = pd.DataFrame({"parent_code": parent.astype(object)}, index=top_codes.index)
    if with_confidence:
        cand_group = index.code_group_[pd.Index(index.codes_).get_indexer(cands["code"].to_numpy())]
        top_group = pd.Series(np.where(code_pos >= 0, index.code_group_[np.maximum(code_pos, 0)], -1),
                              index=top_codes.index)
        same = cand_group == top_group.reindex(cands["unit"]).to_numpy()
        summed = pd.Series(np.where(same, cands["confidence"].to_numpy(), 0.0)).groupby(cands["unit"].to_numpy()).sum()
        out["parent_confidence"] = summed.reindex(top_codes.index).fillna(0.0).clip(upper=1.0).round(6).to_numpy()
    return out
