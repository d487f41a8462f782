"""Job-title normalizer: one comparable key per title, with its qualifiers kept beside it.

``"SR. WHSE ASSOC II - NIGHTS"`` becomes the key ``"warehouse associate"`` with seniority
``senior``, level ``2`` and shift ``night``. The steps, in order:

1. fold to lowercase ASCII (unidecode) and tokenize; punctuation becomes separators;
2. optionally correct spelling with a fitted :class:`~titlematch.normalize.spelling.SpellingCorrector`;
3. take qualifiers out (seniority, level, shift, employment type, branch numbers);
4. replace abbreviations, gendered forms and Spanish titles from the lexicons, choosing the
   noun form at the end of a phrase ("mech" -> "mechanic") and the modifier form before
   another word ("mech engineer" -> "mechanical engineer"); ambiguous abbreviations ("pt")
   are read from their neighbours by the rules in ``title_ambiguous.csv``;
5. repeat 3-4 until nothing changes (an expansion can complete a phrase: "male enfermero"
   -> "male nurse" -> "nurse"), then split multi-role titles ("cook / dishwasher") where
   both sides name a job.

The key never holds a qualifier word, conjunction or punctuation, so normalizing a key again
gives the same key. The lexicons live in ``lexicons/title_*.csv``.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from itertools import accumulate

import numpy as np
import pandas as pd

from ._series import as_series
from .title_lexicon import COMMA, HYPHEN, SPACE, TitleLexicon, title_lexicon, tokenize

QUALIFIER_FIELDS = ("seniority", "level", "shift", "employment", "branch")
OUTPUT_COLUMNS = ["key", *QUALIFIER_FIELDS, "roles", "primary", "changes", "empty"]
_CACHED_LENGTH = 300  # longer texts are rare and would bloat the cache
_MAX_ROUNDS = 6
_ARTICLES = frozenset({"la", "las", "los", "el"})
_DE = frozenset({"de", "del"})


@dataclass(frozen=True)
class NormalizedTitle:
    """A normalized job title.

    ``key`` is what the coder compares; ``roles`` holds each role's key (first = primary);
    ``changes`` lists every rewrite as ``"from->to"``; ``empty`` is true when no codable
    words remain (missing input, punctuation only, or qualifiers only such as ``"nights"``).
    """
    key: str = ""
    tokens: tuple[str, ...] = ()
    seniority: str = ""
    level: str = ""
    shift: str = ""
    employment: str = ""
    branch: str = ""
    roles: tuple[str, ...] = ()
    changes: tuple[str, ...] = ()
    empty: bool = True

    @property
    def qualifiers(self) -> dict[str, str]:
        """The qualifier fields that are set, e.g. ``{"seniority": "senior", "shift": "night"}``."""
        return {name: getattr(self, name) for name in QUALIFIER_FIELDS if getattr(self, name)}

    @property
    def primary(self) -> str:
        return self.roles[0] if self.roles else ""


EMPTY = NormalizedTitle()


class _Unit:
    """A content token or a lexicon phrase, with the separator before it."""
    __slots__ = ("words", "sep", "kind", "entry", "out")

    def __init__(self, words, sep, kind, entry=None):
        self.words, self.sep, self.kind, self.entry = words, sep, kind, entry
        self.out = words

    def context_words(self) -> set[str]:
        """Words a neighbour may be recognised by: as written and as any expansion would read."""
        found = {self.words[0], self.words[-1], self.out[0], self.out[-1]}
        if self.entry is not None:
            for form in (self.entry.noun, self.entry.modifier):
                if form:
                    found.update((form[0], form[-1]))
        return found


# ---------------------------------------------------------------------------- public API
def normalize_title(text: str, *, corrector=None) -> NormalizedTitle:
    """Normalize one job title.

    Parameters
    ----------
    text : str
        The title as written.
    corrector : SpellingCorrector, optional
        A fitted corrector; words it changes are listed in ``changes``.

    Returns
    -------
    NormalizedTitle

    Examples
    --------
    >>> t = normalize_title("SR. WHSE ASSOC II - NIGHTS")
    >>> t.key, t.seniority, t.level, t.shift
    ('warehouse associate', 'senior', '2', 'night')
    """
    if not isinstance(text, str):
        raise TypeError(f"normalize_title: text must be a str, got {type(text).__name__} ({_short_repr(text)})")
    _check_corrector(corrector)
    if corrector is None and len(text) <= _CACHED_LENGTH:
        return _normalize_cached(text)
    return _normalize(text, corrector)


def normalize_titles(values, *, corrector=None) -> pd.DataFrame:
    """Normalize many titles; each distinct value is normalized once.

    Parameters
    ----------
    values : pandas.Series or sequence
        Titles; missing values (None, NaN) give an empty key and ``empty=True``, other
        non-text values are read as their text.
    corrector : SpellingCorrector, optional

    Returns
    -------
    pandas.DataFrame
        Index of ``values``; columns ``key, seniority, level, shift, employment, branch,
        roles`` ("|"-joined), ``primary``, ``changes`` ("; "-joined), ``empty``.

    Examples
    --------
    >>> normalize_titles(["cook / dishwasher", None])[["key", "primary", "empty"]]
                   key primary  empty
    0  cook dishwasher    cook  False
    1                            True
    """
    series = as_series(values, "normalize_titles", "normalize_title")
    _check_corrector(corrector)
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    found = [_normalize_any(value, corrector) for value in uniques] + [EMPTY]  # last slot: missing values
    columns = {}
    for name in OUTPUT_COLUMNS:
        if name == "roles":
            column = ["|".join(t.roles) for t in found]
        elif name == "changes":
            column = ["; ".join(t.changes) for t in found]
        else:
            column = [getattr(t, name) for t in found]
        array = np.array(column, dtype=bool if name == "empty" else object)
        columns[name] = array[codes]  # code -1 (missing) picks the last slot
    return pd.DataFrame(columns, index=series.index)


# ---------------------------------------------------------------------------- validation
def _short_repr(value) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _check_corrector(corrector) -> None:
    if corrector is None:
        return
    if not callable(getattr(corrector, "correct_token", None)):
        raise TypeError(f"corrector must be a SpellingCorrector, got {type(corrector).__name__}")
    if not hasattr(corrector, "vocabulary_"):
        raise ValueError("corrector is not fitted; call corrector.fit(vocabulary) first")


def _normalize_any(value, corrector) -> NormalizedTitle:
    if isinstance(value, bytes):
        value = value.decode("utf-8", errors="replace")
    elif not isinstance(value, str):
        value = str(value)
    if corrector is None and len(value) <= _CACHED_LENGTH:
        return _normalize_cached(value)
    return _normalize(value, corrector)


# ---------------------------------------------------------------------------- pipeline
@lru_cache(maxsize=65_536)
def _normalize_cached(text: str) -> NormalizedTitle:
    return _normalize(text, None)


def _normalize(text: str, corrector) -> NormalizedTitle:
    lex = title_lexicon()
    words, seps = tokenize(text)
    if not words:
        return EMPTY
    changes: list[str] = []
    if corrector is not None:
        _correct_spelling(words, corrector, lex, changes)
        if not changes and len(text) <= _CACHED_LENGTH:  # nothing corrected: the title as written
            return _normalize_cached(text)
    fields: dict[str, list[str]] = {name: [] for name in QUALIFIER_FIELDS}
    # Rewrite until nothing changes: an expansion can complete a phrase with its neighbour
    # ("male enfermero" -> "male nurse" -> "nurse"), and a key must normalize to itself.
    triggers = lex.trigger_words
    rounds = _MAX_ROUNDS if any(w in triggers or w[0] == "#" for w in words) else 0
    for _ in range(rounds):
        rewritten, seps = _rewrite(words, seps, lex, fields, changes)
        finished = rewritten == words or not any(w in triggers for w in rewritten)
        words = rewritten
        if finished:
            break
    roles = _split_roles(words, seps, lex)
    key = " ".join(roles)
    return NormalizedTitle(key=key, tokens=tuple(key.split()), roles=roles, changes=tuple(changes),
                           empty=not key, **{name: ", ".join(values) for name, values in fields.items()})


def _rewrite(words, seps, lex: TitleLexicon, fields, changes) -> tuple[list[str], list[int]]:
    """One round: take qualifiers out, then replace lexicon phrases and ambiguous abbreviations."""
    kept = _take_qualifiers(words, lex, fields)
    units = _make_units([words[i] for i in kept], _merged_seps(seps, kept), lex)
    units = _reorder_spanish(units)
    units = _resolve_ambiguous(units, lex, fields, changes)
    _expand(units, changes)
    return _flatten(units)


def _correct_spelling(words: list[str], corrector, lex: TitleLexicon, changes: list[str]) -> None:
    protected = lex.key_words
    for i, word in enumerate(words):
        if word.isalpha() and word not in protected:
            fixed = corrector.correct_token(word)
            if fixed != word:
                changes.append(f"{word}->{fixed}")
                words[i] = fixed


def _take_qualifiers(words, lex: TitleLexicon, fields) -> list[int]:
    """Record qualifiers in ``fields``; return the positions of the tokens left as content."""
    n = len(words)
    locked = [False] * n
    i = 0
    while i < n:  # protected phrases ("night auditor", "senior living") keep their words
        found = lex.protected.match(words, i)
        if found:
            locked[i:found[0]] = [True] * (found[0] - i)
            i = found[0]
        else:
            i += 1
    spans = []
    i = 0
    while i < n:
        span = None if locked[i] else _qualifier_at(words, i, locked, lex)
        if span:
            spans.append(span)
            i = span[1]
        else:
            i += 1
    plain = [True] * n
    for start, end, *_ in spans:
        plain[start:end] = [False] * (end - start)
    # "lead" and "head" are qualifiers only before the job ("lead cook", not "team lead");
    # level numbers only after it ("engineer 2", not "2 cooks"). Only words that are never
    # qualifiers count as the job, which keeps the decision stable when a key is re-normalized.
    plain_before = list(accumulate(plain, initial=0))
    removed = [False] * n
    for start, end, field, value, position in spans:
        if position == "before_content" and plain_before[n] - plain_before[end] == 0:
            continue
        if position == "after_content" and plain_before[start] == 0:
            continue
        if value not in fields[field]:
            fields[field].append(value)
        removed[start:end] = [True] * (end - start)
    return [i for i in range(n) if not removed[i]]


def _qualifier_at(words, i, locked, lex: TitleLexicon):
    """``(start, end, field, value, position)`` of a qualifier starting at ``i``, or ``None``."""
    word, n = words[i], len(words)
    if word[0] == "#":
        return i, i + 1, "branch", word, "any"
    nxt = i + 1
    if nxt < n and not locked[nxt]:
        if word in lex.level_prefixes:
            following = words[nxt]
            level = (following.lstrip("0") or "0") if following.isdigit() else lex.level_words.get(following)
            if level:
                return i, nxt + 1, "level", level, "any"
        if word in lex.branch_prefixes:
            if words[nxt] in lex.branch_connectors and nxt + 1 < n:
                nxt += 1
            number = words[nxt].lstrip("#")
            if number.isdigit() and not locked[nxt]:
                return i, nxt + 1, "branch", f"{word} {number}", "any"
    found = lex.qualifiers.match(words, i, locked)
    if found:
        end, qualifier = found
        return i, end, qualifier.field, qualifier.value, qualifier.position
    return None


def _merged_seps(seps: list[int], kept: list[int]) -> list[int]:
    """Separators of the kept tokens; a dropped token's separator passes to the next kept one."""
    merged, previous = [], -1
    for i in kept:
        merged.append(max(seps[previous + 1:i + 1]) if merged else SPACE)
        previous = i
    return merged


def _make_units(words: list[str], seps: list[int], lex: TitleLexicon) -> list[_Unit]:
    units, i, n = [], 0, len(words)
    while i < n:
        word = words[i]
        found = None if word in lex.keep else lex.replacements.match(words, i)
        if found:
            end, entry = found
            units.append(_Unit(tuple(words[i:end]), seps[i], "entry", entry))
            i = end
            continue
        kind = "ambiguous" if word in lex.ambiguous else "plain"
        units.append(_Unit((word,), seps[i], kind))
        i += 1
    return units


def _segments(units: list[_Unit]) -> list[list[_Unit]]:
    """Units grouped between commas and slashes."""
    segments: list[list[_Unit]] = []
    for unit in units:
        if not segments or unit.sep >= COMMA:
            segments.append([])
        segments[-1].append(unit)
    return segments


def _reorder_spanish(units: list[_Unit]) -> list[_Unit]:
    """Spanish "A de B" reads "B A" in English: "supervisor de limpieza" -> "cleaning supervisor"."""
    if not any(u.entry is not None and u.entry.source == "spanish" for u in units):
        return units
    result = []
    for segment in _segments(units):
        at = next((k for k, u in enumerate(segment) if u.kind == "plain" and u.words[0] in _DE), None)
        if at is not None:
            before, after = segment[:at], segment[at + 1:]
            while after and after[0].kind == "plain" and after[0].words[0] in _ARTICLES:
                after = after[1:]
            if before and after and any(u.entry is not None and u.entry.source == "spanish" for u in before + after):
                after[0].sep, before[0].sep = before[0].sep, SPACE
                segment = after + before
        result.extend(segment)
    return result


def _resolve_ambiguous(units: list[_Unit], lex: TitleLexicon, fields, changes) -> list[_Unit]:
    if not any(u.kind == "ambiguous" for u in units):
        return units
    result = []
    alone = len({u.words for u in units}) == 1  # no other word beside the abbreviation
    for k, unit in enumerate(units):
        if unit.kind != "ambiguous":
            result.append(unit)
            continue
        rule = _reading(unit, units, k, alone, lex)
        word = unit.words[0]
        if rule.field == "title":
            unit.kind, unit.out = "resolved", tuple(rule.value.split())
            changes.append(f"{word}->{rule.value}")
            result.append(unit)
        elif rule.field == "keep":
            unit.kind = "plain"
            result.append(unit)
        else:  # a qualifier: drop the word, keep the stronger separator for the next unit
            if rule.value not in fields[rule.field]:
                fields[rule.field].append(rule.value)
            if k + 1 < len(units):
                units[k + 1].sep = max(units[k + 1].sep, unit.sep)
    if result:
        result[0].sep = SPACE
    return result


def _reading(unit: _Unit, units: list[_Unit], k: int, alone: bool, lex: TitleLexicon):
    word = unit.words[0]
    before = units[k - 1].context_words() if k > 0 else set()
    after = units[k + 1].context_words() if k + 1 < len(units) else set()
    for rule in lex.ambiguous[word]:
        if rule.when == "default":
            return rule
        if rule.when == "alone" and alone:
            return rule
        neighbour = after if rule.when == "next" else before if rule.when == "prev" else set()
        if neighbour & rule.context or ("@role" in rule.context and any(lex.is_role(w) for w in neighbour)):
            return rule
    return lex.ambiguous[word][-1]


def _expand(units: list[_Unit], changes: list[str]) -> None:
    for k, unit in enumerate(units):
        if unit.kind != "entry":
            continue
        followed = k + 1 < len(units) and units[k + 1].sep <= HYPHEN
        unit.out = unit.entry.modifier if followed and unit.entry.modifier else unit.entry.noun
        if unit.out != unit.words:
            changes.append(f"{' '.join(unit.words)}->{' '.join(unit.out)}")


def _flatten(units: list[_Unit]) -> tuple[list[str], list[int]]:
    tokens, seps = [], []
    for unit in units:
        for j, token in enumerate(unit.out):
            tokens.append(token)
            seps.append(unit.sep if j == 0 else SPACE)
    if seps:
        seps[0] = SPACE
    return tokens, seps


def _split_roles(tokens: list[str], seps: list[int], lex: TitleLexicon) -> tuple[str, ...]:
    """Split where both sides name a job; return the role keys, first = primary."""
    n = len(tokens)
    if n == 0:
        return ()
    if all(sep == SPACE for sep in seps):
        return (" ".join(tokens),)
    cuts = [0] + _role_boundaries(tokens, seps, lex)
    if len(cuts) > 1:
        inside = _inside_protected(tokens, lex)
        cuts = [i for i in cuts if not inside[i]]
    cuts.append(n)
    # Repeated roles stay: dropping one would change which words sit side by side in the key.
    return tuple(" ".join(tokens[start:end]) for start, end in zip(cuts, cuts[1:]))


def _role_boundaries(tokens: list[str], seps: list[int], lex: TitleLexicon) -> list[int]:
    """Positions i where the title splits into two roles before token i.

    A split needs a job noun just before the separator ("heating and air conditioning mechanic"
    does not split); after a hyphen the next word must be a job noun too ("cashier-stocker"
    splits, "x-ray" does not); after a comma the phrase up to the next comma must hold one
    ("cook, dishwasher" splits, "teacher, special education" does not). A plural or collective
    job noun on either side ("mechanics and installers", "police and detectives") names one
    occupation group, as the official classification titles do, so it does not split.
    Linear in the number of tokens, so a pathological 100,000-character title stays cheap.
    """
    n = len(tokens)
    role = [lex.is_role(t) for t in tokens]
    phrase_end = [n] * n  # phrase_end[i]: first j > i with a comma or slash before it
    for i in range(n - 2, -1, -1):
        phrase_end[i] = i + 1 if seps[i + 1] >= COMMA else phrase_end[i + 1]
    last_role = [-1] * (n + 1)  # last_role[p]: last job noun before position p
    for p in range(1, n + 1):
        last_role[p] = p - 1 if role[p - 1] else last_role[p - 1]
    next_role = [n] * (n + 1)  # next_role[p]: first job noun at or after p
    for p in range(n - 1, -1, -1):
        next_role[p] = p if role[p] else next_role[p + 1]
    found = []
    for i in range(1, n):
        sep = seps[i]
        if sep == SPACE or not role[i - 1] or (sep == HYPHEN and not role[i]):
            continue
        end = phrase_end[i]
        in_phrase = last_role[end] >= i
        if sep == COMMA and not in_phrase:
            continue
        head = last_role[end] if in_phrase else next_role[end]
        if lex.is_group_role(tokens[i - 1]) or (head < n and lex.is_group_role(tokens[head])):
            continue
        found.append(i)
    return found


def _inside_protected(tokens: list[str], lex: TitleLexicon) -> list[bool]:
    """For each boundary i (before token i): does it lie inside a protected phrase ("nurse-midwife")?"""
    inside = [False] * len(tokens)
    i = 0
    while i < len(tokens):
        found = lex.protected.match(tokens, i)
        if found:
            inside[i + 1:found[0]] = [True] * (found[0] - i - 1)
            i = found[0]
        else:
            i += 1
    return inside
