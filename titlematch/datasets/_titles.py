"""Job-title records of the invented demo scenario: vocabulary compiled to arrays, surface noise and
production label noise (see ``titlematch.datasets.scenario`` for the documented rates)."""
from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from . import _vocabulary as vocab
from ._sampling import (GroupSampler, StringPool, draw_weighted, misspell, rank_weights, split_alternatives,
                                 stable_int)

# Kinds of title variant.
STANDARD, GENDERED, SPANISH, NEW_TITLE = 0, 1, 2, 3
_KIND_NAMES = ("standard", "gendered", "spanish", "new_title")
VAGUE_SHARE = 0.18              # default share of records answered with a vague title of the major group

SPANISH_SHARE = 0.03
GENDERED_RATE = 0.15
MULTI_ROLE_RATE = 0.03
ABBREVIATION_RATE = 0.15
QUALIFIER_RATE = 0.12
MISSPELLING_RATE = 0.05
BLANK_CONTEXT_RATE = 0.02
NEW_TITLE_SHARE = 0.0025        # per new-year-title entry, as a share of all new-year records
RANDOM_ERROR_SHARE = 0.25       # share of production errors not to a neighbouring occupation
CASE_STYLES = (0.45, 0.30, 0.15, 0.05, 0.05)  # as written, Title, UPPER, Sentence, stray punctuation
_MISSPELLING_VARIANTS = 6       # distinct recurring misspellings per title


@dataclass(frozen=True)
class TitleModel:
    codes: np.ndarray              # SOC code per occupation
    prevalence: np.ndarray         # base weight per occupation
    variant_text: list[str]        # every lay title variant
    variant_occupation: np.ndarray
    variant_kind: np.ndarray
    variant_shared: np.ndarray     # the same text belongs to several occupations (vague or ambiguous)
    variant_context_set: np.ndarray
    variants: GroupSampler         # group = occupation * 4 + kind
    has_kind: np.ndarray           # occupation x kind
    new_title_rate: np.ndarray     # per occupation, chance of a new-year-only title in the new year
    spanish_rate: np.ndarray       # per occupation
    context_text: list[str]
    contexts: GroupSampler         # group = context set
    companions: GroupSampler       # group = occupation -> occupation sharing a context
    neighbours: GroupSampler       # group = occupation -> confusable occupation
    top_title: list[str]           # most frequent title per occupation
    vague_text: list[str]          # vague titles ("operator", "associate", "nurse") shared by a major group
    vague: GroupSampler            # group = occupation -> vague title of its major group
    has_vague: np.ndarray          # per occupation


@lru_cache(maxsize=1)
def title_model() -> TitleModel:
    occupations = vocab.OCCUPATIONS
    codes = np.array([row[0] for row in occupations])
    position = {code: i for i, code in enumerate(codes)}
    prevalence = np.array([row[1] for row in occupations], dtype=float)
    context_keys = list(vocab.CONTEXTS)
    context_text = [text for key in context_keys for text in split_alternatives(vocab.CONTEXTS[key])]
    context_start = np.cumsum([0] + [len(split_alternatives(vocab.CONTEXTS[key])) for key in context_keys])
    context_index = {key: i for i, key in enumerate(context_keys)}

    # context sets: one per occupation, then one per new-year title entry
    set_rows: list[tuple[int, int, float]] = []

    def add_context_set(set_id: int, keys: list[str]) -> None:
        for key_weight, key in zip(rank_weights(len(keys), 1.0), keys):
            start, stop = context_start[context_index[key]], context_start[context_index[key] + 1]
            for text_weight, text_id in zip(rank_weights(stop - start, 1.3), range(start, stop)):
                set_rows.append((set_id, text_id, key_weight * text_weight))

    occupation_contexts = [row[2].split() for row in occupations]
    for i, keys in enumerate(occupation_contexts):
        add_context_set(i, keys)

    texts: list[str] = []
    rows: list[tuple[int, int, float, int]] = []  # occupation, kind, weight, context set

    def add_variants(occupation: int, kind: int, titles: list[str], context_set: int, scale: float = 1.0) -> None:
        for weight, title in zip(rank_weights(len(titles)), titles):
            texts.append(title)
            rows.append((occupation, kind, weight * scale, context_set))

    standard_sets = [set(split_alternatives(row[3])) for row in occupations]
    for i, row in enumerate(occupations):
        add_variants(i, STANDARD, split_alternatives(row[3]), i)
    for code, titles in vocab.GENDERED_TITLES.items():
        i = position[code]
        add_variants(i, GENDERED, [t for t in split_alternatives(titles) if t not in standard_sets[i]], i)
    for code, titles in vocab.SPANISH_TITLES.items():
        add_variants(position[code], SPANISH, split_alternatives(titles), position[code])
    new_entries = np.zeros(len(codes))
    for entry, (code, key, titles) in enumerate(vocab.NEW_YEAR_TITLES):
        set_id = len(codes) + entry
        add_context_set(set_id, [key])
        add_variants(position[code], NEW_TITLE, split_alternatives(titles), set_id)
        new_entries[position[code]] += 1

    table = np.array(rows, dtype=float)
    occupation_of = table[:, 0].astype(np.int64)
    kind_of = table[:, 1].astype(np.int64)
    owners: dict[str, set[int]] = {}
    for text, occupation in zip(texts, occupation_of):
        owners.setdefault(text, set()).add(int(occupation))
    shared = np.array([len(owners[text]) > 1 for text in texts])
    has_kind = np.zeros((len(codes), 4), dtype=bool)
    has_kind[occupation_of, kind_of] = True

    share = prevalence / prevalence.sum()
    spanish_share = share[has_kind[:, SPANISH]].sum()
    spanish_rate = np.where(has_kind[:, SPANISH], min(0.6, SPANISH_SHARE / spanish_share), 0.0)
    new_title_rate = np.minimum(0.5, NEW_TITLE_SHARE * new_entries / share)

    context_sets = np.array(set_rows, dtype=float)
    vague_text, vague_rows = [], []
    for i, code in enumerate(codes):
        titles = split_alternatives(vocab.VAGUE_TITLES.get(code[:2], ""))
        for weight, title in zip(rank_weights(len(titles)), titles):
            if title not in vague_text:
                vague_text.append(title)
            vague_rows.append((i, vague_text.index(title), weight))
    vague_table = np.array(vague_rows, dtype=float).reshape(-1, 3)
    has_vague = np.zeros(len(codes), dtype=bool)
    has_vague[vague_table[:, 0].astype(np.int64)] = True
    return TitleModel(
        codes=codes, prevalence=prevalence, variant_text=texts, variant_occupation=occupation_of,
        variant_kind=kind_of, variant_shared=shared, variant_context_set=table[:, 3].astype(np.int64),
        variants=GroupSampler(occupation_of * 4 + kind_of, np.arange(len(texts)), table[:, 2]),
        has_kind=has_kind, new_title_rate=new_title_rate, spanish_rate=spanish_rate,
        context_text=context_text,
        contexts=GroupSampler(context_sets[:, 0].astype(np.int64), context_sets[:, 1].astype(np.int64),
                               context_sets[:, 2]),
        companions=_companion_sampler(occupation_contexts, codes, prevalence),
        neighbours=_neighbour_sampler(codes, position),
        top_title=[split_alternatives(row[3])[0] for row in occupations],
        vague_text=vague_text,
        vague=GroupSampler(vague_table[:, 0].astype(np.int64), vague_table[:, 1].astype(np.int64), vague_table[:, 2]),
        has_vague=has_vague,
    )


def _companion_sampler(occupation_contexts: list[list[str]], codes: np.ndarray,
                       prevalence: np.ndarray) -> GroupSampler:
    """Second roles of multi-role titles ("cook / dishwasher", "cashier / stocker"): common occupations
    of the same major group, or listed confusable ones, that work in the same kind of place."""
    related: dict[int, set[int]] = {}
    position = {code: i for i, code in enumerate(codes)}
    for a, b in vocab.CONFUSABLE:
        related.setdefault(position[a], set()).add(position[b])
        related.setdefault(position[b], set()).add(position[a])
    by_context: dict[str, list[int]] = {}
    for i, keys in enumerate(occupation_contexts):
        for key in keys:
            by_context.setdefault(key, []).append(i)
    groups, items, weights = [], [], []
    for i, keys in enumerate(occupation_contexts):
        mates = sorted({j for key in keys for j in by_context[key]
                        if j != i and (codes[j][:2] == codes[i][:2] or j in related.get(i, ()))}) or [i]
        groups += [i] * len(mates)
        items += mates
        weights += [prevalence[j] for j in mates]
    return GroupSampler(np.array(groups), np.array(items), np.array(weights))


def _neighbour_sampler(codes: np.ndarray, position: dict[str, int]) -> GroupSampler:
    """Occupations production coders confuse: listed pairs (weight 4), same broad group (2),
    same minor group (1); occupations with none of those fall back to their major group."""
    confusable: dict[int, set[int]] = {}
    for a, b in vocab.CONFUSABLE:
        confusable.setdefault(position[a], set()).add(position[b])
        confusable.setdefault(position[b], set()).add(position[a])
    groups, items, weights = [], [], []
    for i, code in enumerate(codes):
        candidates: dict[int, float] = {}
        for j, other in enumerate(codes):
            if j == i:
                continue
            if other[:6] == code[:6]:
                candidates[j] = 2.0
            elif other[:4] == code[:4]:
                candidates[j] = 1.0
        for j in confusable.get(i, ()):
            candidates[j] = 4.0
        if not candidates:
            candidates = {j: 1.0 for j, other in enumerate(codes) if j != i and other[:2] == code[:2]}
        if not candidates:
            candidates = {(i + 1) % len(codes): 1.0}
        for j in sorted(candidates):
            groups.append(i)
            items.append(j)
            weights.append(candidates[j])
    return GroupSampler(np.array(groups), np.array(items), np.array(weights))


# ---------------------------------------------------------------------------------------------------
# Title surface noise, each applied once per distinct (text, parameter) pair.
# ---------------------------------------------------------------------------------------------------
@lru_cache(maxsize=1)
def _abbreviation_pattern() -> re.Pattern:
    phrases = sorted(vocab.ABBREVIATIONS, key=len, reverse=True)
    return re.compile(r"\b(" + "|".join(re.escape(p) for p in phrases) + r")\b")


def _has_abbreviation(text: str) -> bool:
    return _abbreviation_pattern().search(text) is not None


def _abbreviate(text: str, param: int) -> str:
    """Shorten the first (param even) or every (param odd) abbreviable word or phrase."""
    choice = param >> 1

    def short(match) -> str:
        forms = split_alternatives(vocab.ABBREVIATIONS[match.group(1)])
        return forms[choice % len(forms)]

    return _abbreviation_pattern().sub(short, text, count=0 if param & 1 else 1)


def _qualify(text: str, param: int) -> str:
    return vocab.QUALIFIERS[param // 100].format(t=text, n=param % 100)


def _title_case(text: str) -> str:
    return " ".join(word[:1].upper() + word[1:] for word in text.split(" "))


def _case_style(text: str, style: int) -> str:
    """1 Title Case, 2 UPPER, 3 Sentence case, 4 stray punctuation or spacing."""
    if style == 1:
        return _title_case(text)
    if style == 2:
        return text.upper()
    if style == 3:
        return text[:1].upper() + text[1:]
    variant = stable_int(text) % 4
    if variant == 0:
        return text + "."
    if variant == 1:
        return " " + text + "  "
    if variant == 2:
        return text.replace(" ", "  ", 1) if " " in text else text + ","
    return _title_case(text).replace(" ", "-", 1) if " " in text else "-" + text


# ---------------------------------------------------------------------------------------------------
# Title records.
# ---------------------------------------------------------------------------------------------------
def title_records(model: TitleModel, rng: np.random.Generator, n: int, weights: np.ndarray,
                   new_titles: bool, vague_share: float = 0.0) -> dict[str, np.ndarray]:
    """Occupation, title, context and miscoding propensity for ``n`` survey records.

    ``vague_share`` of the English records (of occupations whose major group has vague titles) are
    answered with a title the whole major group shares ("operator", "associate", "nurse"), so only
    the workplace, if anything, tells the occupation: the bulk of what real offices refer to coders.
    With ``vague_share=0`` no random number is drawn for it, so the records are those of before.
    """
    occupation = draw_weighted(rng, weights, n)
    kind = np.full(n, STANDARD, dtype=np.int64)
    gendered = (rng.random(n) < GENDERED_RATE) & model.has_kind[occupation, GENDERED]
    spanish = rng.random(n) < model.spanish_rate[occupation]
    kind[gendered] = GENDERED
    kind[spanish] = SPANISH
    new_draw = rng.random(n)
    if new_titles:
        kind[(new_draw < model.new_title_rate[occupation]) & model.has_kind[occupation, NEW_TITLE]] = NEW_TITLE
    variant = model.variants.draw(rng, occupation * 4 + kind)

    context = model.contexts.draw(rng, model.variant_context_set[variant])
    blank = rng.random(n) < BLANK_CONTEXT_RATE
    context_pool = StringPool(model.context_text + [""])
    context_ids = np.where(blank, len(model.context_text), context).astype(np.int64)
    context_style = np.searchsorted(np.cumsum([0.65, 0.25, 0.10]), rng.random(n), side="right")
    context_pool.apply(context_ids, (context_style > 0) & ~blank, np.minimum(context_style, 2),
                       _case_style, 3)

    pool = StringPool(model.variant_text)
    ids = np.array([pool.index[text] for text in model.variant_text], dtype=np.int64)[variant]
    english = kind != SPANISH
    vague = np.zeros(n, dtype=bool)
    if vague_share > 0:
        vague = english & (kind != NEW_TITLE) & model.has_vague[occupation] & (rng.random(n) < vague_share)
        vague_ids = np.array([pool.intern(text) for text in model.vague_text], dtype=np.int64)
        ids[vague] = vague_ids[model.vague.draw(rng, occupation)[vague]]
    joiners = len(vocab.MULTI_ROLE_JOINERS)
    multi = english & ~vague & (rng.random(n) < MULTI_ROLE_RATE)
    mate = model.companions.draw(rng, occupation)
    multi &= mate != occupation  # occupations without a companion keep a single role
    companion = mate * joiners + rng.integers(joiners, size=n)
    pool.apply(ids, multi, companion, lambda text, p: vocab.MULTI_ROLE_JOINERS[p % joiners].format(
        a=text, b=model.top_title[p // joiners]), len(model.codes) * joiners)

    abbreviable = np.array([_has_abbreviation(text) for text in pool.strings])
    abbreviated = english & abbreviable[ids] & (rng.random(n) < ABBREVIATION_RATE)
    pool.apply(ids, abbreviated, rng.integers(8, size=n), _abbreviate, 8)

    pattern = rng.integers(len(vocab.QUALIFIERS), size=n)
    numbered = np.array(["{n}" in q for q in vocab.QUALIFIERS])[pattern]
    store = np.where(numbered, rng.integers(1, 100, size=n), 0)
    pool.apply(ids, rng.random(n) < QUALIFIER_RATE, pattern * 100 + store, _qualify,
               len(vocab.QUALIFIERS) * 100)

    misspelled = rng.random(n) < MISSPELLING_RATE
    spelled = ids.copy()
    pool.apply(ids, misspelled, rng.integers(_MISSPELLING_VARIANTS, size=n), misspell, _MISSPELLING_VARIANTS)
    misspelled &= ids != spelled  # titles of fewer than four letters stay as written

    style = np.searchsorted(np.cumsum(CASE_STYLES), rng.random(n), side="right")
    style = np.minimum(style, len(CASE_STYLES) - 1)
    pool.apply(ids, style > 0, style, _case_style, len(CASE_STYLES))

    propensity = (1.0 + model.variant_shared[variant] + 0.5 * (misspelled | multi | (kind == SPANISH))
                  + 1.0 * (kind == NEW_TITLE) + 0.5 * blank + 1.0 * vague)
    labels = np.array(_KIND_NAMES, dtype=object)[kind]
    labels = np.where(vague, "vague", labels)
    labels = np.where(misspelled, labels + "+misspelled", labels)
    labels = np.where(multi, labels + "+multi_role", labels)
    return {"occupation": occupation, "title": pool.lookup(ids), "context": context_pool.lookup(context_ids),
            "propensity": propensity, "kind": labels}


def miscode(model: TitleModel, rng: np.random.Generator, occupation: np.ndarray, propensity: np.ndarray,
             noise: float) -> np.ndarray:
    """Production codes: a ``noise`` share disagrees with the expert code (occupation index)."""
    n = len(occupation)
    chance = np.clip(noise * propensity / propensity.mean(), 0.0, 0.95) if n else propensity
    wrong = rng.random(n) < chance
    neighbour = model.neighbours.draw(rng, occupation)
    anywhere = rng.integers(len(model.codes) - 1, size=n)
    anywhere = anywhere + (anywhere >= occupation)
    at_random = rng.random(n) < RANDOM_ERROR_SHARE
    return np.where(wrong, np.where(at_random, anywhere, neighbour), occupation)


def year_weights(model: TitleModel, seed: int, year: int) -> np.ndarray:
    """Occupation weights drift a little from year to year."""
    drift = np.random.default_rng([seed, year, 1]).normal(0.0, 0.1, len(model.codes))
    return model.prevalence * np.exp(drift)


