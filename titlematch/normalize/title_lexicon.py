"""The job-title lexicons (``lexicons/title_*.csv``) compiled once into lookup tables.

Shared by the title normalizer (:mod:`titlematch.normalize.title`) and the spelling corrector
(:mod:`titlematch.normalize.spelling`), which must never "correct" a word the lexicons know.
Every phrase is tokenized exactly like a title, so a lexicon row written with accents,
slashes or ampersands ("albañil", "a/c", "r&d") matches however the title spells it.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache

from unidecode import unidecode

from ..io.lexicon import load_lexicon

# Strength of the separator before a token; when tokens are dropped the stronger one survives.
SPACE, HYPHEN, COMMA, SLASH = 0, 1, 2, 3
# "and", "&" and Spanish "y" join roles ("cook and cashier"), so they become separators, not tokens.
CONJUNCTIONS = frozenset({"and", "y"})
_SEPARATOR = {"-": HYPHEN, "/": SLASH, "&": SLASH, "+": SLASH}  # every other mark is COMMA-strong

_APOSTROPHE = re.compile(r"(?<=[a-z0-9])['`](?=[a-z0-9])")  # sheriff's -> sheriffs
_INITIALS = re.compile(r"\b(?:[a-z]\.){2,}")  # r.n. -> rn, p.t. -> pt
_SPACED_DASH = re.compile(r"\s+-+\s*|\s*-+\s+|^-+|-+$")  # "clerk - nights" is a comma, "x-ray" is not
_TOKEN = re.compile(r"#\s*\d[a-z0-9]*|[a-z0-9]+|[-/&+,;:()\[\]{}|]")
_BRANCH_CONNECTORS = frozenset({"no", "nbr", "num", "number"})


def tokenize(text: str) -> tuple[list[str], list[int]]:
    """Fold ``text`` to lowercase ASCII and split it into word tokens and the separator before each.

    Branch numbers stay one token (``"#12"``); conjunctions and punctuation become separators.
    """
    folded = unidecode(text).lower()
    folded = _APOSTROPHE.sub("", folded)
    folded = _INITIALS.sub(lambda m: m.group().replace(".", ""), folded)
    folded = _SPACED_DASH.sub(" , ", folded)
    words: list[str] = []
    seps: list[int] = []
    pending = SPACE
    for match in _TOKEN.finditer(folded):
        token = match.group()
        first = token[0]
        if first == "#":
            token = "#" + token[1:].strip()
        elif not first.isalnum():
            pending = max(pending, _SEPARATOR.get(first, COMMA))
            continue
        elif token in CONJUNCTIONS:
            pending = SLASH
            continue
        seps.append(pending if words else SPACE)
        words.append(token)
        pending = SPACE
    return words, seps


def phrase_tokens(text: str) -> tuple[str, ...]:
    """The word tokens of a lexicon phrase, tokenized like a title."""
    return tuple(tokenize(text)[0])


class PhraseTable:
    """Phrases (token tuples) indexed by first token, longest first, for greedy matching."""

    def __init__(self, items: dict[tuple[str, ...], object]):
        self._by_first: dict[str, list[tuple[tuple[str, ...], object]]] = {}
        for phrase, payload in sorted(items.items(), key=lambda kv: -len(kv[0])):
            self._by_first.setdefault(phrase[0], []).append((phrase, payload))

    def __contains__(self, token: str) -> bool:
        return token in self._by_first

    def match(self, words: list[str], start: int, blocked: list[bool] | None = None):
        """Return ``(end, payload)`` of the longest phrase starting at ``start``, or ``None``."""
        options = self._by_first.get(words[start])
        if options is None or (blocked is not None and blocked[start]):
            return None
        for phrase, payload in options:
            end = start + len(phrase)
            # Separators do not stop a phrase ("part-time", "r&d", "in - training"): the key has
            # none, and a key must normalize to itself.
            if end <= len(words) and all(
                    words[k] == phrase[k - start] and not (blocked is not None and blocked[k])
                    for k in range(start + 1, end)):
                return end, payload
        return None

    def phrases(self):
        for options in self._by_first.values():
            for phrase, payload in options:
                yield phrase, payload


@dataclass(frozen=True)
class Entry:
    """One replacement: an abbreviation, a gendered form or a Spanish title."""
    source: str
    phrase: tuple[str, ...]
    noun: tuple[str, ...]
    modifier: tuple[str, ...]  # used when another word of the same phrase follows; empty = noun


@dataclass(frozen=True)
class Qualifier:
    field: str
    value: str
    position: str  # any | before_content | after_content


@dataclass(frozen=True)
class Rule:
    """One reading of an ambiguous abbreviation, tried in lexicon order."""
    when: str  # alone | next | prev | default
    context: frozenset
    field: str  # title | keep | seniority | level | shift | employment
    value: str


def _singulars(word: str) -> tuple[str, ...]:
    """Candidate singular forms, used only to recognise role nouns (keys are never singularized)."""
    if not word.endswith("s") or word.endswith("ss"):
        return ()
    forms = [word[:-1]]
    if word.endswith("es"):
        forms.append(word[:-2])
    if word.endswith("ies"):
        forms.append(word[:-3] + "y")
    if word.endswith("ves"):
        forms += [word[:-3] + "f", word[:-3] + "fe"]
    return tuple(forms)


class TitleLexicon:
    """All title lexicons, compiled. Build through :func:`title_lexicon` (cached)."""

    def __init__(self):
        self.replacements = PhraseTable(self._entries())
        self.keep = frozenset(phrase_tokens(t)[0] for t in load_lexicon("title_keep")["term"])
        self.ambiguous = self._ambiguous()
        self._load_qualifiers()
        self.protected = PhraseTable({phrase_tokens(p): p for p in load_lexicon("title_protected")["phrase"]})
        roles = load_lexicon("title_role_nouns")
        self.roles = frozenset(roles["role"])
        self.collective_roles = frozenset(roles.loc[roles["collective"] == "yes", "role"])
        self.key_words = self._key_words()
        self.trigger_words = self.key_words - self.keep  # a title holding none of these needs no rewrite

    @staticmethod
    def _entries() -> dict:
        tables = [("abbreviation", "title_abbreviations", "abbreviation", "expansion", "modifier_expansion"),
                  ("gendered", "title_gendered", "gendered", "neutral", None),
                  ("spanish", "title_spanish", "spanish", "english", "modifier_english")]
        entries = {}
        for source, name, key, noun, modifier in tables:
            table = load_lexicon(name)
            for row in table.itertuples(index=False):
                row = row._asdict()
                phrase = phrase_tokens(row[key])
                entries[phrase] = Entry(source, phrase, phrase_tokens(row[noun]),
                                        phrase_tokens(row[modifier]) if modifier else ())
        return entries

    @staticmethod
    def _ambiguous() -> dict[str, tuple[Rule, ...]]:
        rules: dict[str, list[Rule]] = {}
        for row in load_lexicon("title_ambiguous").itertuples(index=False):
            context = frozenset(w for w in row.context.split("|") if w)
            rules.setdefault(row.abbreviation, []).append(Rule(row.when, context, row.field, row.value))
        return {key: tuple(found) for key, found in rules.items()}

    def _load_qualifiers(self) -> None:
        table = load_lexicon("title_qualifiers")
        self.level_prefixes = frozenset(table.loc[table["field"] == "level_prefix", "phrase"])
        self.branch_prefixes = frozenset(table.loc[table["field"] == "branch_prefix", "phrase"])
        plain = table[~table["field"].isin(["level_prefix", "branch_prefix"])]
        self.qualifiers = PhraseTable({phrase_tokens(r.phrase): Qualifier(r.field, r.value, r.position)
                                       for r in plain.itertuples(index=False)})
        levels = plain[plain["field"] == "level"]
        self.level_words = dict(zip(levels["phrase"], levels["value"]))  # roman numerals and digits
        self.branch_connectors = _BRANCH_CONNECTORS

    # ------------------------------------------------------------------ role nouns
    def is_role(self, word: str) -> bool:
        """Whether ``word`` names a person's job ("cashier", "cooks", "nannies")."""
        return word in self.roles or any(form in self.roles for form in _singulars(word))

    def is_group_role(self, word: str) -> bool:
        """A plural ("cooks") or collective ("police", "crew") role noun: it names a group of workers."""
        if word in self.roles:
            return word in self.collective_roles
        return any(form in self.roles for form in _singulars(word))

    # ------------------------------------------------------------------ vocabularies
    def _key_words(self) -> frozenset:
        """Every token of every lexicon key: the spelling corrector leaves these alone."""
        words = set(self.keep) | set(self.ambiguous) | set(self.level_prefixes) | set(self.branch_prefixes)
        for table in (self.replacements, self.qualifiers, self.protected):
            for phrase, _ in table.phrases():
                words.update(phrase)
        return frozenset(words)

    def output_words(self) -> frozenset:
        """Every word the lexicons write into a key: known words for the spelling corrector."""
        words = set(self.roles)
        for _, entry in self.replacements.phrases():
            words.update(entry.noun)
            words.update(entry.modifier)
        for rules in self.ambiguous.values():
            for rule in rules:
                if rule.field == "title":
                    words.update(phrase_tokens(rule.value))
        for _, qualifier in self.qualifiers.phrases():
            words.update(phrase_tokens(qualifier.value))
        return frozenset(w for w in words if w.isalpha())


@lru_cache(maxsize=1)
def title_lexicon() -> TitleLexicon:
    """The compiled title lexicons (built once per process)."""
    return TitleLexicon()
