"""Tables of the invented Lakeshore Region demo scenario, read from the CSV files in ``data/``
(shipped inside the package, like ``sklearn.datasets``; ``data/README.md`` describes each file).

Everything in them is invented for the demo: the lay job titles are written the way survey
respondents write them (common practice in occupation coding), attached to real SOC 2018 detailed
codes; employer names, streets and towns are made up; the NAICS codes are real NAICS 2022 codes.
Alternatives inside a cell are separated by ``|`` and listed from the most to the least frequent
(the generator gives them Zipf-like weights by rank). The names below keep the shapes the
generators use (dicts, lists of tuples), so only this module knows the files.
"""
from __future__ import annotations

import csv
from importlib import resources


def _rows(name: str) -> list[list[str]]:
    with resources.files("titlematch.datasets").joinpath("data", f"{name}.csv").open(
            "r", encoding="utf-8", newline="") as handle:
        rows = list(csv.reader(handle))
    return rows[1:]  # below the header


def _pairs(name: str) -> dict[str, str]:
    return {row[0]: row[1] for row in _rows(name)}


def _column(name: str) -> tuple[str, ...]:
    return tuple(row[0] for row in _rows(name))


# Job titles.
CONTEXTS: dict[str, str] = _pairs("contexts")
OCCUPATIONS: list[tuple[str, int, str, str]] = [(c, int(p), ctx, t) for c, p, ctx, t in _rows("occupations")]
SPANISH_TITLES: dict[str, str] = _pairs("spanish_titles")
GENDERED_TITLES: dict[str, str] = _pairs("gendered_titles")
NEW_YEAR_TITLES: list[tuple[str, str, str]] = [tuple(row) for row in _rows("new_year_titles")]
CONFUSABLE: list[tuple[str, str]] = [tuple(row) for row in _rows("confusable")]
ABBREVIATIONS: dict[str, str] = _pairs("abbreviations")
VAGUE_TITLES: dict[str, str] = _pairs("vague_titles")
QUALIFIERS: tuple[str, ...] = _column("qualifiers")
MULTI_ROLE_JOINERS: tuple[str, ...] = _column("multi_role_joiners")

# Business register.
TOWNS: list[tuple[str, int, str]] = [(town, int(weight), zips) for town, weight, zips in _rows("towns")]
TOWN_ABBREVIATIONS: dict[str, str] = _pairs("town_abbreviations")
STREET_NAMES: tuple[str, ...] = _column("street_names")
STREET_SUFFIXES: dict[str, str] = _pairs("street_suffixes")
STREET_SUFFIX_WEIGHTS: tuple[int, ...] = tuple(int(row[2]) for row in _rows("street_suffixes"))
DIRECTIONALS: dict[str, str] = _pairs("directionals")
UNIT_DESIGNATORS: dict[str, str] = _pairs("unit_designators")
STEM_PREFIXES: tuple[str, ...] = _column("stem_prefixes")
STEM_SUFFIXES: tuple[str, ...] = _column("stem_suffixes")
SURNAMES: tuple[str, ...] = _column("surnames")
INDUSTRIES: list[tuple[str, str, int, int]] = [(n, d, int(c), int(s)) for n, d, c, s in _rows("industries")]
GENERIC_WORDS: tuple[str, ...] = _column("generic_words")
MANUFACTURING_WORDS: tuple[str, ...] = _column("manufacturing_words")
LEGAL_FORMS: dict[str, int] = {form: int(weight) for form, weight in _rows("legal_forms")}
LEGAL_FORM_VARIANTS: dict[str, str] = _pairs("legal_form_variants")
NAME_ABBREVIATIONS: dict[str, str] = _pairs("name_abbreviations")
SIZE_CLASSES: tuple[str, ...] = _column("size_classes")
