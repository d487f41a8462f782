"""Business register and survey establishment records of the invented demo scenario
(see ``titlematch.datasets.scenario``)."""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import pandas as pd

from . import _vocabulary as vocab
from ._sampling import (GroupSampler, choose, draw_weighted, identifiers, misspell, objects,
                                 rank_weights, split_alternatives)
from ..io.lexicon import load_lexicon

CHAIN_HARD_NEGATIVE_SHARE = 0.3   # of the new employers, share that are new branches of register chains
_SIZE_BASE = np.array([0.34, 0.2, 0.15, 0.13, 0.08, 0.05, 0.03, 0.015, 0.005])
_NUMBERS = np.array([str(i) for i in range(30_400)], dtype=object)  # int -> str without astype(str)
_PROFESSIONAL_NAICS = ("541110", "541211", "541330", "621111", "621210", "541940")  # may be PC, PLLC, LLP
_UNIT_WEIGHTS = {"Suite": 60, "Unit": 20, "Building": 5, "Floor": 5, "Room": 5, "Apartment": 5}


# Places. Up to COUNTY_ROWS register rows the region is the 30 towns and 43 ZIP codes of
# ``data/towns.csv`` (the demo and the tests stay inside this). A larger register covers more
# country: one county per COUNTY_ROWS rows, each with 30 invented towns weighted as the first
# county's and 43 ZIP codes of its own, so a place or a postcode holds about as many
# establishments at 10 million rows as at 100,000 (a national register has tens of thousands of
# places and postcodes; a fixed 30 towns would put hundreds of thousands of names in each).
COUNTY_ROWS = 100_000
_PLACE_LEADS = ("", "", "", "", "", "", "North", "South", "East", "West", "Port", "Fort", "Mount", "Saint")
_PLACE_TRAILS = ("", "", "", "", "", "", "Falls", "Springs", "Landing", "Cove", "Point", "Junction", "Harbor",
                 "Bend", "Lake", "Hollow", "Crossing", "Heights", "City")


@dataclass(frozen=True)
class Places:
    """Towns of the register's region: ``names``, drawing ``weights`` and ZIP codes (``zips[t]``)."""

    names: np.ndarray
    weights: np.ndarray
    zips: tuple[tuple[str, ...], ...]

    def __len__(self) -> int:
        return len(self.names)


@lru_cache(maxsize=8)
def places_for(register_rows: int) -> Places:
    """The towns of a register of ``register_rows`` rows (see ``COUNTY_ROWS``)."""
    base_names = [row[0] for row in vocab.TOWNS]
    weights = [float(row[1]) for row in vocab.TOWNS]
    zips = [tuple(split_alternatives(row[2])) for row in vocab.TOWNS]
    counties = max(1, -(-register_rows // COUNTY_ROWS))
    if counties == 1:
        return Places(objects(base_names), np.array(weights), tuple(zips))
    extra = (counties - 1) * len(base_names)
    names = _invented_place_names(extra, frozenset(base_names))
    taken = {code for options in zips for code in options}
    free = [f"{number:05d}" for number in range(10_000, 100_000) if f"{number:05d}" not in taken]
    per_county = sum(len(options) for options in zips)
    if (counties - 1) * per_county > len(free):
        raise ValueError(f"register_rows={register_rows}: more counties than five-digit ZIP codes")
    at = 0
    for _ in range(counties - 1):  # each county: the first county's weights, its own ZIP codes in sequence
        for options in zips[:len(base_names)]:
            zips.append(tuple(free[at: at + len(options)]))
            at += len(options)
    return Places(objects(base_names + names), np.tile(np.array(weights), counties), tuple(zips))


@lru_cache(maxsize=1)
def _place_name_pool() -> tuple[str, ...]:
    """Invented town names (lead word + name stem + trailing word, the words drawn as often as
    ``_PLACE_LEADS`` and ``_PLACE_TRAILS`` list them) in a fixed order, so a county's towns are the
    same whatever the register's size."""
    stems = objects([p + s for p in vocab.STEM_PREFIXES for s in vocab.STEM_SUFFIXES
                     if not p.lower().endswith(s) and p[-2:].lower() != s[0] * 2 and p[-1].lower() + s[:2] != s[0] * 3])
    rng = np.random.default_rng(58_101)
    draws = 400_000
    lead, trail = choose(rng, _PLACE_LEADS, draws), choose(rng, _PLACE_TRAILS, draws)
    names = _spaced(lead) + stems[rng.integers(len(stems), size=draws)] + _spaced(trail, after=False)
    return tuple(pd.unique(names).tolist())


def _invented_place_names(count: int, avoid: frozenset) -> list[str]:
    pool = [name for name in _place_name_pool() if name not in avoid]
    if count > len(pool):
        raise ValueError(f"{count} invented towns asked for, {len(pool)} available")
    return pool[:count]


def _spaced(values: np.ndarray, after: bool = True) -> np.ndarray:
    """``"x"`` -> ``"x "`` (or ``" x"``), ``""`` stays empty: joins optional parts without double spaces."""
    present = values != ""
    out = np.full(len(values), "", dtype=object)
    out[present] = (values[present] + " ") if after else (" " + values[present])
    return out


@lru_cache(maxsize=1)
def _industry_tables():
    industries = vocab.INDUSTRIES
    descriptors = [split_alternatives(row[1]) for row in industries]
    groups = np.repeat(np.arange(len(industries)), [len(d) for d in descriptors])
    weights = np.concatenate([rank_weights(len(d), 0.8) for d in descriptors])
    flat = objects([text for d in descriptors for text in d])
    sampler = GroupSampler(groups, np.arange(len(flat)), weights)
    naics = load_lexicon("naics_2022_titles")["naics_code"]
    six = sorted(code for code in naics if len(code) == 6)
    by_four: dict[str, list[str]] = {}
    for code in six:
        by_four.setdefault(code[:4], []).append(code)
    siblings = {row[0]: [c for c in by_four.get(row[0][:4], []) if c != row[0]] or
                [c for c in six if c[:3] == row[0][:3] and c != row[0]] for row in industries}
    return flat, sampler, siblings


def _stems(rng: np.random.Generator, n: int) -> np.ndarray:
    return choose(rng, vocab.STEM_PREFIXES, n) + choose(rng, vocab.STEM_SUFFIXES, n)


def _initials(rng: np.random.Generator, n: int) -> np.ndarray:
    letters = objects(list("ABCDEFGHJKLMNPRSTW"))
    first, second = letters[rng.integers(len(letters), size=n)], letters[rng.integers(len(letters), size=n)]
    return np.where(rng.random(n) < 0.5, first + " & " + second, first + second + letters[rng.integers(
        len(letters), size=n)])


_NAME_PATTERN_WEIGHTS = np.array([40, 18, 7, 4, 8, 5, 10, 8.0])


def _employer_names(rng: np.random.Generator, n: int, industry: np.ndarray, town: np.ndarray,
                    places: Places) -> np.ndarray:
    """Invented names without legal form: "Ashbrook Plumbing", "Okafor & Trask Dental" ...

    Patterns: stem + trade, surname + trade, two surnames, "Brothers", town + trade, initials + trade,
    stem + generic word, stem + trade + generic word; each is built only for its own rows."""
    flat, sampler, _ = _industry_tables()
    descriptor = flat[sampler.draw(rng, industry)]
    manufacturer = np.array([row[0][:2] in ("31", "32", "33") for row in vocab.INDUSTRIES])[industry]
    pattern = draw_weighted(rng, _NAME_PATTERN_WEIGHTS, n)
    names = np.empty(n, dtype=object)
    for kind in range(len(_NAME_PATTERN_WEIGHTS)):
        rows = np.flatnonzero(pattern == kind)
        m, trade, maker = len(rows), descriptor[rows], manufacturer[rows]
        if kind == 0:
            names[rows] = _stems(rng, m) + " " + trade
        elif kind == 1:
            names[rows] = choose(rng, vocab.SURNAMES, m) + " " + trade
        elif kind == 2:
            names[rows] = (choose(rng, vocab.SURNAMES, m) + " & " + choose(rng, vocab.SURNAMES, m) + " "
                           + trade)
        elif kind == 3:
            names[rows] = choose(rng, vocab.SURNAMES, m) + " Brothers " + trade
        elif kind == 4:
            names[rows] = places.names[town[rows]] + " " + trade
        elif kind == 5:
            names[rows] = _initials(rng, m) + " " + trade
        elif kind == 6:
            generic = np.where(maker, choose(rng, vocab.MANUFACTURING_WORDS, m),
                               choose(rng, vocab.GENERIC_WORDS, m))
            names[rows] = _stems(rng, m) + " " + generic
        else:
            generic = np.where(maker, choose(rng, vocab.MANUFACTURING_WORDS, m),
                               choose(rng, ("Services", "Company", "Group"), m))
            names[rows] = _stems(rng, m) + " " + trade + " " + generic
    return names


def _legal_forms(rng: np.random.Generator, n: int) -> np.ndarray:
    return choose(rng, list(vocab.LEGAL_FORMS), n, list(vocab.LEGAL_FORMS.values()))


def addresses(rng: np.random.Generator, n: int, places: Places) -> dict[str, np.ndarray]:
    """Address parts and the register's standard written form (USPS-style abbreviations)."""
    town = draw_weighted(rng, places.weights, n)
    zips = places.zips
    zip_count = np.array([len(options) for options in zips])
    zip_start = np.cumsum(zip_count) - zip_count
    postcode = objects([code for options in zips for code in options])[
        zip_start[town] + rng.integers(0, 60, size=n) % zip_count[town]]
    house = np.clip(np.round(rng.lognormal(5.8, 1.3, size=n)), 1, 29999).astype(np.int64)
    directional = choose(rng, list(vocab.DIRECTIONALS), n, [6, 6, 6, 6, 1, 1, 1, 1])
    directional[rng.random(n) >= 0.22] = ""
    street_index = draw_weighted(rng, rank_weights(len(vocab.STREET_NAMES), 0.5), n)
    street = objects(vocab.STREET_NAMES)[street_index]
    suffix = choose(rng, list(vocab.STREET_SUFFIXES), n, vocab.STREET_SUFFIX_WEIGHTS)
    route = np.array([name.startswith(("County Road", "State Route")) for name in vocab.STREET_NAMES])
    suffix[route[street_index]] = ""  # "County Road 14" takes no suffix
    unit_type = choose(rng, list(_UNIT_WEIGHTS), n, list(_UNIT_WEIGHTS.values()))
    unit_type[rng.random(n) >= 0.18] = ""
    unit = _NUMBERS[np.where(unit_type == "Suite", rng.integers(1, 10, size=n) * 100 + rng.integers(0, 30, size=n),
                             rng.integers(1, 41, size=n))]
    unit[unit_type == ""] = ""
    parts = {"house": _NUMBERS[house], "directional": directional, "street": street,
             "suffix": suffix, "unit_type": unit_type, "unit": unit, "town": town, "postcode": postcode}
    parts["address"] = _register_address(parts)
    return parts


def _map_small(values: np.ndarray, mapping: dict[str, str]) -> np.ndarray:
    """Map an array with few distinct values through ``mapping`` (missing -> "")."""
    codes, distinct = pd.factorize(values)
    return objects([mapping.get(value, "") for value in distinct] + [""])[codes]


def _register_address(parts: dict[str, np.ndarray]) -> np.ndarray:
    short_dir = _map_small(parts["directional"], vocab.DIRECTIONALS)
    short_suffix = _map_small(parts["suffix"], vocab.STREET_SUFFIXES)
    short_unit = _map_small(parts["unit_type"], vocab.UNIT_DESIGNATORS)
    unit = np.where(parts["unit_type"] != "", " " + short_unit + " " + parts["unit"], "")
    return (parts["house"] + " " + _spaced(short_dir) + parts["street"] + _spaced(short_suffix, after=False)
            + unit).astype(object)


def _size_classes(rng: np.random.Generator, industry: np.ndarray, extra: int = 0) -> np.ndarray:
    bias = np.array([row[3] for row in vocab.INDUSTRIES])[industry] + extra
    base = draw_weighted(rng, _SIZE_BASE, len(industry))
    index = np.minimum(base + rng.integers(0, bias + 1), len(vocab.SIZE_CLASSES) - 1)
    return index


def _chain_sizes(rng: np.random.Generator, rows: int) -> np.ndarray:
    """Branch counts of the chains: Zipf law (exponent 2) on 2..cap, so many small chains and a few
    with dozens or hundreds of branches; the counts add up to ``rows``."""
    if rows < 2:
        return np.zeros(0, dtype=np.int64)
    cap = max(2, min(400, rows // 8))
    support = np.arange(2, cap + 1)
    sizes = support[draw_weighted(rng, support.astype(float) ** -2.0, rows // 2 + 1)]
    total = np.cumsum(sizes)
    count = int(np.searchsorted(total, rows)) + 1
    sizes = sizes[:count].copy()
    sizes[-1] -= total[count - 1] - rows
    if sizes[-1] < 2:  # fold a one-branch remainder into the previous chain
        if len(sizes) > 1:
            sizes[-2] += sizes[-1]
        sizes = sizes[:-1] if len(sizes) > 1 else sizes
    return sizes


def _unique_chain_names(rng: np.random.Generator, count: int) -> tuple[np.ndarray, np.ndarray]:
    """``count`` distinct brand names and their industries (chain-friendly industries only)."""
    friendly = np.array([i for i, row in enumerate(vocab.INDUSTRIES) if row[2]])
    flat, sampler, _ = _industry_tables()
    names = pd.Series([], dtype=object)
    industries = np.zeros(0, dtype=np.int64)
    two_stems = False
    while len(names) < count:
        before = len(names)
        industry = friendly[rng.integers(len(friendly), size=2 * count + 10)]
        brand = np.where(rng.random(len(industry)) < 0.8, _stems(rng, len(industry)),
                         choose(rng, vocab.SURNAMES, len(industry)) + "'s")
        if two_stems:  # "Ashbrook Ridgefield": about 2 million brands more
            brand = brand + " " + _stems(rng, len(industry))
        candidates = pd.Series(np.concatenate([names.to_numpy(), brand + " " + flat[sampler.draw(rng, industry)]]))
        industries = np.concatenate([industries, industry])
        keep = ~candidates.duplicated().to_numpy()
        names, industries = candidates[keep].reset_index(drop=True), industries[keep]
        # The one-stem brands (about 90,000) run out above a few million register rows (200,000
        # chains at 10 million): then two stems. Smaller registers never get here (unchanged).
        two_stems = two_stems or len(names) - before < 0.01 * (count - before)
    return names.to_numpy(dtype=object)[:count], industries[:count]


def independent_employers(rng: np.random.Generator, n: int, town: np.ndarray, places: Places
                          ) -> dict[str, np.ndarray]:
    """Single-site employers; 8% are written as "legal name dba trade name"."""
    weights = np.array([1.0 + row[2] for row in vocab.INDUSTRIES])
    industry = draw_weighted(rng, weights, n)
    core = _employer_names(rng, n, industry, town, places)
    legal = _legal_forms(rng, n)
    professional = np.isin(np.array([row[0] for row in vocab.INDUSTRIES])[industry], _PROFESSIONAL_NAICS)
    legal[np.isin(legal, ("PC", "PLLC", "LLP")) & ~professional] = "LLC"
    dba = rng.random(n) < 0.08
    holding = np.where(rng.random(n) < 0.6, _stems(rng, n) + " " + choose(rng, ("Holdings", "Enterprises",
                       "Group", "Ventures", "Partners"), n), choose(rng, vocab.SURNAMES, n) + " Enterprises")
    legal[dba & (legal == "")] = "LLC"
    trade = np.where(dba, core, "").astype(object)
    core = np.where(dba, holding, core).astype(object)
    return {"core": core, "legal": legal, "trade": trade, "industry": industry, "chain": np.full(n, -1)}


def _name_of(parts: dict[str, np.ndarray]) -> np.ndarray:
    return (parts["core"] + _spaced(parts["legal"], after=False)
            + np.where(parts["trade"] != "", " dba " + parts["trade"], "")).astype(object)


def _clashes(parts: dict[str, np.ndarray], taken: dict[str, np.ndarray] | None = None,
             n_places: int = len(vocab.TOWNS)) -> np.ndarray:
    """Rows of ``parts`` repeating an earlier row's (name, address, town), or one of ``taken``."""
    columns = [parts[key] if taken is None else np.concatenate([taken[key], parts[key]])
               for key in ("core", "address", "town")]
    name_code = pd.factorize(columns[0])[0].astype(np.int64)
    address_code = pd.factorize(columns[1])[0].astype(np.int64)
    key = (name_code * (address_code.max() + 1) + address_code) * n_places + columns[2]
    repeated = pd.Series(key).duplicated().to_numpy()
    return repeated if taken is None else repeated[len(taken["core"]):]


def separate_branches(rng: np.random.Generator, parts: dict[str, np.ndarray],
                       taken: dict[str, np.ndarray] | None = None, n_places: int = len(vocab.TOWNS)) -> None:
    """Give a new house number to rows whose (name, address, town) repeats or is ``taken``: chain
    branches and namesakes must stay distinguishable by their address."""
    for _ in range(50):
        rows = np.flatnonzero(_clashes(parts, taken, n_places))
        if not len(rows):
            return
        bumped = np.array([int(house) for house in parts["house"][rows]]) + rng.integers(1, 400, size=len(rows))
        parts["house"][rows] = _NUMBERS[np.minimum(bumped, 29999)]
        parts["address"][rows] = _register_address(take(parts, rows))


def take(parts: dict[str, np.ndarray], index: np.ndarray) -> dict[str, np.ndarray]:
    return {key: value[index] for key, value in parts.items()}


def join(*blocks: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    return {key: np.concatenate([block[key] for block in blocks]) for key in blocks[0]}


def build_register(rng: np.random.Generator, rows: int, chain_share: float, places: Places):
    sizes = _chain_sizes(rng, int(round(chain_share * rows)))
    chain_names, chain_industry = _unique_chain_names(rng, len(sizes))
    chain_legal = choose(rng, ("Inc", "LLC", "Corp", "Co"), len(sizes), (5, 4, 2, 1))
    chain_of = np.repeat(np.arange(len(sizes)), sizes)
    address = addresses(rng, rows, places)
    chained = {"core": chain_names[chain_of], "legal": chain_legal[chain_of],
               "trade": np.full(len(chain_of), "", dtype=object), "industry": chain_industry[chain_of],
               "chain": chain_of}
    single = independent_employers(rng, rows - len(chain_of), address["town"][len(chain_of):], places)
    parts = {**join(chained, single), **address} if len(chain_of) else {**single, **address}
    separate_branches(rng, parts, n_places=len(places))
    parts["size"] = _size_classes(rng, parts["industry"], extra=0) + (parts["chain"] >= 0)
    parts["size"] = np.minimum(parts["size"], len(vocab.SIZE_CLASSES) - 1)
    # the register lists establishments in a shuffled order; parts keep the generation order
    order = rng.permutation(rows)
    position = np.empty(rows, dtype=np.int64)
    position[order] = np.arange(rows)
    parts["register_id"] = identifiers("LR", rows)[position]
    naics = objects([row[0] for row in vocab.INDUSTRIES])
    towns = places.names
    register = pd.DataFrame({
        "register_id": parts["register_id"][order], "name": _name_of(parts)[order],
        "address": parts["address"][order], "city": towns[parts["town"][order]],
        "postcode": parts["postcode"][order], "naics": naics[parts["industry"][order]],
        "size_class": objects(vocab.SIZE_CLASSES)[parts["size"][order]]})
    chains = {"names": chain_names, "legal": chain_legal, "industry": chain_industry, "sizes": sizes}
    return register, parts, chains


# Variation of the survey's establishment records against the register's written form.
def _typo(text: str, key: int) -> str:
    return misspell(text, key) if text else text


def _legal_variant(legal: str, u: float, key: int) -> str:
    if not legal or u < 0.30:
        return ""
    if u < 0.50:
        forms = split_alternatives(vocab.LEGAL_FORM_VARIANTS.get(legal, legal))
        return " " + forms[key % len(forms)]
    if u < 0.56:
        return ", " + legal
    return " " + legal


def _abbreviate_name(name: str, key: int) -> str:
    words = name.split(" ")
    eligible = [i for i, word in enumerate(words) if word in vocab.NAME_ABBREVIATIONS]
    if eligible:
        at = eligible[key % len(eligible)]
        words[at] = vocab.NAME_ABBREVIATIONS[words[at]]
    return " ".join(words)


def _vary_name(core: str, legal: str, trade: str, chain: bool, u: np.ndarray, k: np.ndarray) -> str:
    if trade and u[0] < 0.40:
        name = trade
    elif trade and u[0] < 0.65:
        name = core + _legal_variant(legal, u[1], k[0])
    elif trade:
        joiner = ("dba", "DBA", "d/b/a", "D/B/A", "doing business as")[k[1] % 5]
        name = core + _legal_variant(legal, u[1], k[0]) + " " + joiner + " " + trade
    else:
        name = core + _legal_variant(legal, u[1], k[0])
    if u[2] < 0.15:
        name = _abbreviate_name(name, k[1])
    if chain and u[3] < 0.10:
        name += " #" + str(100 + k[2] % 900)
    if u[4] < 0.06:
        name = _typo(name, k[3])
    return name.upper() if u[5] < 0.25 else name.lower() if u[5] < 0.32 else name


def _vary_address(house: str, directional: str, street: str, suffix: str, unit_type: str, unit: str,
                  u: np.ndarray, k: np.ndarray) -> str:
    if u[6] < 0.015 and house:
        at = k[0] % len(house)
        digit = str((int(house[at]) + 1 + k[1] % 8) % 10)
        house = (house[:at] + digit + house[at + 1:]).lstrip("0") or "1"
    words = [house]
    if directional and u[7] >= 0.35:
        words.append(directional if u[7] < 0.65 else vocab.DIRECTIONALS[directional])
    words.append(_typo(street, k[2]) if u[8] < 0.03 else street)
    if suffix:
        short = vocab.STREET_SUFFIXES[suffix]
        words.append(suffix if u[9] < 0.25 else short + "." if u[9] < 0.30 else short)
    if unit_type and u[10] >= 0.30:
        short = vocab.UNIT_DESIGNATORS[unit_type]
        words.append("#" + unit if u[10] < 0.45 else "# " + unit if u[10] < 0.50
                     else unit_type + " " + unit if u[10] < 0.65 else short + " " + unit)
        if u[10] > 0.9:
            words[-2] += ","
    address = " ".join(words)
    return address.upper() if u[11] < 0.25 else address


def _vary_city(city: str, u: np.ndarray, k: np.ndarray) -> str:
    first, _, rest = city.partition(" ")
    if rest and u[12] < 0.10 and first in vocab.TOWN_ABBREVIATIONS:
        city = vocab.TOWN_ABBREVIATIONS[first] + " " + rest
    if u[13] < 0.03:
        city = _typo(city, k[3])
    return city.upper() if u[14] < 0.20 else city


def _vary_postcode(postcode: str, u: np.ndarray, k: np.ndarray) -> str:
    if u[15] < 0.10:
        return ""
    if u[15] < 0.13:
        at = k[0] % 4
        if k[1] % 2:
            return postcode[:at] + postcode[at + 1] + postcode[at] + postcode[at + 2:] \
                if postcode[at] != postcode[at + 1] else postcode[:4] + str((int(postcode[4]) + 1) % 10)
        return postcode[:at] + str((int(postcode[at]) + 1 + k[2] % 8) % 10) + postcode[at + 1:]
    if u[15] < 0.18:
        return f"{postcode}-{1000 + k[3] % 9000}"
    return postcode


def _survey_naics(naics: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Respondents leave NAICS blank (20%) or pick a sibling industry of the same group (8%)."""
    _, _, siblings = _industry_tables()
    u, key = rng.random(len(naics)), rng.integers(0, 1 << 30, size=len(naics))
    out = naics.copy()
    for i in np.flatnonzero((u >= 0.20) & (u < 0.28)):
        options = siblings[naics[i]]
        out[i] = options[key[i] % len(options)] if options else naics[i]
    out[u < 0.20] = ""
    return out


def establishment_records(rng: np.random.Generator, parts: dict[str, np.ndarray], places: Places) -> pd.DataFrame:
    """Written survey records for the establishments in ``parts`` (vectorized draws, one pass per record)."""
    n = len(parts["core"])
    u, k = rng.random((n, 16)), rng.integers(0, 1 << 30, size=(n, 4))
    towns = places.names.tolist()
    columns = zip(parts["core"], parts["legal"], parts["trade"], parts["chain"], parts["house"],
                  parts["directional"], parts["street"], parts["suffix"], parts["unit_type"], parts["unit"],
                  parts["town"], parts["postcode"], u, k)
    names, streets, cities, postcodes = [], [], [], []
    for core, legal, trade, chain, house, directional, street, suffix, unit_type, unit, town, postcode, ur, kr \
            in columns:
        names.append(_vary_name(core, legal, trade, chain >= 0, ur, kr))
        streets.append(_vary_address(house, directional, street, suffix, unit_type, unit, ur, kr))
        cities.append(_vary_city(towns[town], ur, kr))
        postcodes.append(_vary_postcode(postcode, ur, kr))
    naics = objects([row[0] for row in vocab.INDUSTRIES])[parts["industry"]]
    return pd.DataFrame({"name": objects(names), "address": objects(streets), "city": objects(cities),
                         "postcode": objects(postcodes), "naics": _survey_naics(naics, rng)})


def register_scenario(rng: np.random.Generator, register_rows: int, matched: int, unmatched: int,
                      chain_share: float) -> dict[str, pd.DataFrame]:
    """The register and ``matched + unmatched`` survey establishments (see ``make_register_scenario``)."""
    new_records = matched + unmatched
    places = places_for(register_rows)
    register, parts, chains = build_register(rng, register_rows, chain_share, places)

    # establishments on the register, larger ones more often in the survey (weighted sampling)
    keys = rng.exponential(size=register_rows) / (1.0 + parts["size"])
    on_register = np.sort(np.argpartition(keys, matched - 1)[:matched]) if matched else np.zeros(0, np.int64)
    found = take(parts, on_register)

    # employers not on the register: new single sites, and new branches of register chains
    branches = int(round(CHAIN_HARD_NEGATIVE_SHARE * unmatched)) if len(chains["sizes"]) else 0
    address = addresses(rng, unmatched, places)
    single = independent_employers(rng, unmatched - branches, address["town"][branches:], places)
    chain = draw_weighted(rng, chains["sizes"].astype(float), branches) if branches else np.zeros(0, np.int64)
    branch = {"core": chains["names"][chain], "legal": chains["legal"][chain],
          "trade": np.full(branches, "", dtype=object), "industry": chains["industry"][chain], "chain": chain}
    fresh = {**join(branch, single), **address}
    separate_branches(rng, fresh, taken=parts, n_places=len(places))
    fresh["size"] = np.zeros(unmatched, dtype=np.int64)
    fresh["register_id"] = np.full(unmatched, "", dtype=object)

    everyone = join(found, fresh)
    kinds = np.concatenate([np.where(found["chain"] >= 0, "on_register_branch", "on_register"),
                        np.where(np.arange(unmatched) < branches, "new_branch", "new_employer")]).astype(object)
    records = establishment_records(rng, everyone, places)
    order = rng.permutation(new_records)
    record_id = identifiers("E", new_records)
    new = records.iloc[order].reset_index(drop=True)
    new.insert(0, "record_id", record_id)
    truth = pd.DataFrame({"record_id": record_id, "register_id": everyone["register_id"][order]})
    new_kinds = pd.DataFrame({"record_id": record_id, "kind": kinds[order]})
    return {"register": register, "new": new, "truth": truth, "new_kinds": new_kinds}
