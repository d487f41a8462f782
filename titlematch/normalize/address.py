"""Street-address parser and postcode normalizer in the USPS Publication 28 standard form.

``parse_address("123 North Main Street Suite 200").key == "123 N MAIN ST STE 200"``.

Rules (USPS Publication 28, from memory, where not stated otherwise):

* street suffixes are standardized with Appendix C1 (``AVENUE``/``AV``/``AVN`` -> ``AVE``),
  secondary unit designators with Appendix C2 (``SUITE`` -> ``STE``), directionals to one or
  two letters (``NORTHEAST`` -> ``NE``; Spanish ``NOROESTE`` -> ``NO``);
* the suffix is the last token of the street part (after a postdirectional is taken off) and
  needs a name before it, so ``Avenue of the Americas`` has no suffix and ``Court St`` is
  name ``COURT``, suffix ``ST``; words inside the name are kept as written;
* a directional that would leave no street name *is* the name (``North St``), and is then
  kept spelled out;
* ordinal names are kept as written (``5TH`` stays ``5TH``, ``FIFTH`` stays ``FIFTH``):
  converting spelled ordinals is not part of the standard form;
* a secondary unit needs a street token before it; designators that take a number
  (``APT``, ``STE`` ...) need a value after them (``Pier Ave`` is a street), the ones that
  do not (``REAR``, ``FRNT`` ...) must follow a suffix or directional; ``#`` is a unit sign
  of unknown type and is written ``# 5``; ``2nd Floor`` becomes ``FL 2``;
* ``PO Box 12`` / ``P.O. Box 12`` / ``Post Office Box 12`` -> ``PO BOX 12`` (box in
  ``unit_type="PO BOX"``, ``unit``); ``Rural Route 2 Box 5`` / ``RFD 2 Box 5`` ->
  ``RR 2 BOX 5``; ``Highway Contract 3 Box 9`` / ``Star Route 3 Box 9`` -> ``HC 3 BOX 9``;
* text after a comma is kept only when it is a unit (``123 Main St, Suite 200``); city,
  state and ZIP after a comma are not part of the street line. A leading unit
  (``Suite 200, 123 Main St``) is moved behind the street.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, fields
from functools import lru_cache
from typing import Iterable

import pandas as pd
from unidecode import unidecode

from titlematch.io.lexicon import load_lexicon
from ._missing import is_missing
from ._series import as_series

__all__ = [
    "ParsedAddress",
    "parse_address",
    "normalize_addresses",
    "normalize_postcode",
    "normalize_postcodes",
]

_HOUSE_NUMBER = re.compile(r"^\d[0-9A-Z-]*$")
_ORDINAL = re.compile(r"^(\d+)(ST|ND|RD|TH)$")
_FRACTION = re.compile(r"^\d+/\d+$")
_UNIT_VALUE = re.compile(r"^[A-Z0-9][A-Z0-9/-]*$")
_GLUED_UNIT = re.compile(r"^(APT|STE|SUITE|RM|ROOM|BLDG|FL|FLR|UNIT|DEPT|SPC|LOT)(\d[0-9A-Z-]*)$")
_FLOOR_WORDS = {"FLOOR", "FL", "FLR"}
_SPELLED_FLOORS = {"FIRST": "1", "SECOND": "2", "THIRD": "3", "FOURTH": "4", "FIFTH": "5",
                   "SIXTH": "6", "SEVENTH": "7", "EIGHTH": "8", "NINTH": "9", "TENTH": "10"}
_COMPOUND_DIRECTIONS = {("NORTH", "EAST"): "NE", ("NORTH", "WEST"): "NW",
                        ("SOUTH", "EAST"): "SE", ("SOUTH", "WEST"): "SW"}
_CANADIAN_POSTCODE = re.compile(r"^([ABCEGHJ-NPRSTVXY]\d[ABCEGHJ-NPRSTV-Z])(\d[ABCEGHJ-NPRSTV-Z]\d)$")


@dataclass(frozen=True)
class ParsedAddress:
    """Fields of one street line; ``key`` is the whole line in USPS standard form."""

    house_number: str = ""
    predirectional: str = ""
    street_name: str = ""
    suffix: str = ""
    postdirectional: str = ""
    unit_type: str = ""
    unit: str = ""
    key: str = ""
    empty: bool = True


_COLUMNS = [f.name for f in fields(ParsedAddress)]


# --------------------------------------------------------------------------- lexicons
@lru_cache(maxsize=1)
def _suffixes() -> dict[str, str]:
    table = load_lexicon("usps_street_suffixes")
    return dict(zip(table["variant"], table["standard"]))


@lru_cache(maxsize=1)
def _units() -> dict[str, tuple[str, bool]]:
    table = load_lexicon("usps_unit_designators")
    return {v: (s, r == "yes") for v, s, r in zip(table["variant"], table["standard"], table["requires_number"])}


@lru_cache(maxsize=1)
def _directionals() -> dict[str, str]:
    table = load_lexicon("usps_directionals")
    return dict(zip(table["word"], table["standard"]))


# --------------------------------------------------------------------------- tokens

_NOT_ADDRESS_CHARACTER = re.compile(r"[^A-Z0-9/#-]+")
_PART_SEPARATOR = re.compile(r"[,;\n\r]")


def _part_tokens(part: str) -> list[str]:
    cleaned = _NOT_ADDRESS_CHARACTER.sub(" ", part).replace("#", " # ")
    tokens: list[str] = []
    for raw in cleaned.split():
        token = raw.strip("-/")
        if not token:
            continue
        glued = _GLUED_UNIT.match(token)
        tokens.extend(glued.groups() if glued else [token])
    # a '#' without a number after it carries nothing
    return [t for i, t in enumerate(tokens) if t != "#" or (i + 1 < len(tokens) and _is_unit_value(tokens[i + 1]))]


def _fold_parts(text: str) -> list[list[str]]:
    folded = unidecode(text).upper().replace(".", "").replace("'", "").replace("`", "")
    parts = [_part_tokens(p) for p in _PART_SEPARATOR.split(folded)]
    return [p for p in parts if p]


def _is_unit_start(tokens: list[str], i: int = 0) -> bool:
    return i < len(tokens) and (tokens[i] in _units() or bool(_ordinal_floor(tokens, i)))


def _ordinal_floor(tokens: list[str], i: int) -> str:
    """The floor number when ``tokens[i:i+2]`` reads ``2ND FLOOR`` / ``SECOND FL``, else ""."""
    if i + 1 >= len(tokens) or tokens[i + 1] not in _FLOOR_WORDS:
        return ""
    if i + 2 < len(tokens) and _is_unit_value(tokens[i + 2]):
        return ""  # "2ND FL 3": the floor has its own number
    ordinal = _ORDINAL.match(tokens[i])
    return ordinal.group(1) if ordinal else _SPELLED_FLOORS.get(tokens[i], "")


def _street_line(parts: list[list[str]]) -> list[str]:
    """First non-unit part, followed by every part that is a unit."""
    street = next((p for p in parts if not _is_unit_start(p)), [])
    units = [t for p in parts if _is_unit_start(p) for t in p]
    return street + units


# --------------------------------------------------------------------------- parsing
_BOX_FORMS = (["PO", "BOX"], ["P", "O", "BOX"], ["POST", "OFFICE", "BOX"], ["POB"], ["POBOX"], ["BOX"], ["PO", "BX"])
_ROUTE_FORMS = ((["RURAL", "ROUTE"], "RR"), (["RURAL", "RTE"], "RR"), (["RR"], "RR"), (["RFD"], "RR"),
                (["RURAL", "FREE", "DELIVERY"], "RR"), (["ROUTE"], "RR"), (["RTE"], "RR"),
                (["HIGHWAY", "CONTRACT"], "HC"), (["HC"], "HC"), (["STAR", "ROUTE"], "HC"))
# A line whose first word starts none of the forms is neither (most lines: no form is tried).
_BOX_STARTS = frozenset([form[0] for form in _BOX_FORMS] + [form[0] for form, _ in _ROUTE_FORMS])


def _po_box(tokens: list[str]) -> ParsedAddress | None:
    words = [t for t in tokens if t != "#"]
    if not words or words[0] not in _BOX_STARTS:
        return None
    for prefix in _BOX_FORMS:
        n = len(prefix)
        if words[:n] == prefix and len(words) > n:
            box = " ".join(words[n:])
            return ParsedAddress(unit_type="PO BOX", unit=box, key=f"PO BOX {box}", empty=False)
    for prefix, route in _ROUTE_FORMS:
        n = len(prefix)
        if words[:n] != prefix or len(words) <= n:
            continue
        rest = words[n + 1:]
        has_box = bool(rest) and rest[0] in ("BOX", "BX")
        if prefix in (["ROUTE"], ["RTE"]) and not has_box:
            continue  # "Route 66" is a street; "Route 2 Box 5" is a rural route
        street = f"{route} {words[n]}"
        if not has_box:
            return ParsedAddress(street_name=street, key=street, empty=False)
        box = " ".join(rest[1:])
        key = f"{street} BOX {box}".rstrip()
        return ParsedAddress(street_name=street, unit_type="BOX", unit=box, key=key, empty=False)
    return None


def _leading_unit(tokens: list[str]) -> list[str]:
    """``STE 200 123 MAIN ST`` -> ``123 MAIN ST STE 200``."""
    units = _units()
    if len(tokens) >= 2 and tokens[0] in units and units[tokens[0]][1] and _is_unit_value(tokens[1]) \
            and tokens[1] not in _directionals():
        if len(tokens) == 2 or _HOUSE_NUMBER.match(tokens[2]):
            return tokens[2:] + tokens[:2]
    return tokens


def _house_number(tokens: list[str]) -> tuple[str, int]:
    if not tokens or not _HOUSE_NUMBER.match(tokens[0]) or _ORDINAL.match(tokens[0]):
        return "", 0
    if len(tokens) > 1 and _FRACTION.match(tokens[1]):
        return f"{tokens[0]} {tokens[1]}", 2
    return tokens[0], 1


def _unit_at(tokens: list[str], i: int, after_street_word: bool) -> tuple[str, str, int]:
    """Return (designator, value, width) when a unit starts at ``tokens[i]``, else width 0."""
    units = _units()
    floor = _ordinal_floor(tokens, i)
    if floor:  # "2nd Floor" is written "FL 2"
        return units["FLOOR"][0], floor, 2
    found = units.get(tokens[i])
    if found is None:
        return "", "", 0
    standard, needs_number = found
    j = i + 1
    if j < len(tokens) and tokens[j] == "#" and standard != "#":
        j += 1
    value = tokens[j] if j < len(tokens) and _is_unit_value(tokens[j]) else ""
    if needs_number:
        return (standard, value, j + 1 - i) if value else ("", "", 0)
    if not after_street_word:
        return "", "", 0
    if any(c.isdigit() for c in value):  # "PH 2"; a bare letter after REAR/FRONT is not its number
        return standard, value, j + 1 - i
    if i + 1 == len(tokens) or _is_unit_start(tokens, i + 1):
        return standard, "", 1
    return "", "", 0


def _is_unit_value(token: str) -> bool:
    """A unit number: has a digit, or is one letter (``APT B``), or a directional word
    (``APT NORTH``, kept as written so a second pass reads it the same way)."""
    if token in _units() or not _UNIT_VALUE.match(token):
        return False
    return len(token) == 1 or any(c.isdigit() for c in token) or token in _directionals()


def _split_units(tokens: list[str], start: int) -> tuple[list[str], list[tuple[str, str]]]:
    """Split ``tokens[start:]`` into street tokens and a list of (designator, value)."""
    suffixes, directionals = _suffixes(), _directionals()
    for i in range(start + 1, len(tokens)):
        previous = tokens[i - 1]
        after_word = previous in suffixes or previous in directionals
        designator, value, width = _unit_at(tokens, i, after_word)
        if width:
            return tokens[start:i], _more_units(tokens[i + width:], [(designator, value)])
    return tokens[start:], []


def _more_units(rest: list[str], units: list[tuple[str, str]]) -> list[tuple[str, str]]:
    i = 0
    while i < len(rest):
        designator, value, width = _unit_at(rest, i, True)
        if width:
            units.append((designator, value))
            i += width
            continue
        last_type, last_value = units[-1]  # stray words stay with the unit they follow
        units[-1] = (last_type, f"{last_value} {rest[i]}".strip())
        i += 1
    return units


def _street_fields(street: list[str]) -> tuple[str, str, str, str]:
    """(predirectional, name, suffix, postdirectional) of the street tokens."""
    merged = _compound_directions(street)
    if merged != street:
        pre, name, suffix, post = _directional_split(merged)
        if merged[0] in _COMPOUND_DIRECTIONS.values() and not pre:
            merged = street  # "North East Blvd": the directional is the name, kept as written
        elif merged[-1] in _COMPOUND_DIRECTIONS.values() and not post:
            merged = street
        else:
            return pre, name, suffix, post
    return _directional_split(merged)


def _directional_split(street: list[str]) -> tuple[str, str, str, str]:
    suffixes, directionals = _suffixes(), _directionals()
    post = suffix = pre = ""
    end, begin = len(street), 0
    if end >= 2 and street[-1] in directionals:
        post, end = directionals[street[-1]], end - 1
    if end >= 2 and street[end - 1] in suffixes:
        suffix, end = suffixes[street[end - 1]], end - 1
    if end - begin >= 2 and street[0] in directionals:
        pre, begin = directionals[street[0]], 1
    return pre, " ".join(street[begin:end]), suffix, post


def _compound_directions(street: list[str]) -> list[str]:
    out = list(street)
    if len(out) >= 3 and tuple(out[:2]) in _COMPOUND_DIRECTIONS:
        out[:2] = [_COMPOUND_DIRECTIONS[tuple(out[:2])]]
    if len(out) >= 3 and tuple(out[-2:]) in _COMPOUND_DIRECTIONS:
        out[-2:] = [_COMPOUND_DIRECTIONS[tuple(out[-2:])]]
    return out


def _parse_tokens(tokens: list[str]) -> ParsedAddress:
    if not tokens:
        return ParsedAddress()
    box = _po_box(tokens)
    if box is not None:
        return box
    tokens = _leading_unit(tokens)
    house, start = _house_number(tokens)
    designator, value, width = _unit_at(tokens, 0, False)
    if start == 0 and width and width == len(tokens) and value not in _directionals():
        # the line is only a unit ("Suite 200"); "Suite N" stays a street with a directional
        street, units = [], [(designator, value)]
    else:
        street, units = _split_units(tokens, start)
    pre, name, suffix, post = _street_fields(street)
    unit_type, unit = units[0] if units else ("", "")
    words = [house, pre, name, suffix, post] + [f"{d} {v}".strip() for d, v in units]
    key = " ".join(w for w in words if w)
    return ParsedAddress(house, pre, name, suffix, post, unit_type, unit, key, empty=not key)


# --------------------------------------------------------------------------- public API
def parse_address(text: str | None) -> ParsedAddress:
    """Parse one street line into USPS Publication 28 fields.

    Parameters
    ----------
    text : str or None
        The street line as written; ``None`` or NaN gives an empty result.

    Returns
    -------
    ParsedAddress
        ``house_number, predirectional, street_name, suffix, postdirectional, unit_type,
        unit, key, empty``.

    Raises
    ------
    TypeError
        When ``text`` is neither a string nor missing.

    Example
    -------
    >>> parse_address("123 North Main Street, Suite 200").key
    '123 N MAIN ST STE 200'
    """
    if is_missing(text):
        return ParsedAddress()
    if not isinstance(text, str):
        raise TypeError(f"parse_address: text must be a string, got {type(text).__name__}: {text!r}")
    return _parse_tokens(_street_line(_fold_parts(text)))


def _map_distinct(values: Iterable[object], argument: str, func, missing):
    """Apply ``func`` once per distinct text; missing values get ``missing``."""
    series = as_series(values, argument, "parse_address")
    cache: dict[str, object] = {}
    out = []
    for value in series.to_numpy(dtype=object):
        if is_missing(value):
            out.append(missing)
            continue
        text = value if isinstance(value, str) else str(value)
        if text not in cache:
            cache[text] = func(text)
        out.append(cache[text])
    return series.index, out


def normalize_addresses(values: Iterable[object]) -> pd.DataFrame:
    """Parse many street lines; each distinct value is parsed once. Never raises on a value.

    Returns a DataFrame with the index of ``values`` and the :class:`ParsedAddress` fields
    as columns.

    Example
    -------
    >>> normalize_addresses(["12 Elm Avenue Apt 3", None])["key"].tolist()
    ['12 ELM AVE APT 3', '']
    """
    index, parsed = _map_distinct(values, "normalize_addresses",
                                  lambda t: _parse_tokens(_street_line(_fold_parts(t))), ParsedAddress())
    frame = pd.DataFrame({c: [getattr(p, c) for p in parsed] for c in _COLUMNS}, index=index, columns=_COLUMNS)
    frame["empty"] = frame["empty"].astype(bool)
    return frame


# --------------------------------------------------------------------------- postcodes
def _postcode_text(value: object) -> str:
    if isinstance(value, bool):
        raise TypeError(f"normalize_postcode: expected text or a number, got bool: {value!r}")
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return "" if math.isnan(value) or math.isinf(value) or value != int(value) else str(int(value))
    if not isinstance(value, str):
        raise TypeError(f"normalize_postcode: expected text or a number, got {type(value).__name__}: {value!r}")
    return value


def _clean_postcode(text: str) -> str:
    code = unidecode(text).upper().strip()
    code = re.sub(r"^(\d+)\.0*$", r"\1", code)  # "2138.0" written by a spreadsheet
    compact = re.sub(r"[\s-]+", "", code)
    canadian = _CANADIAN_POSTCODE.match(compact)
    if canadian:
        return f"{canadian.group(1)} {canadian.group(2)}"
    if "-" in code or " " in code.strip():
        head, _, tail = re.sub(r"\s+", "-", code).partition("-")
        tail = tail.strip("-")
    else:
        head, tail = compact, ""
        if compact.isdigit() and len(compact) in (8, 9):  # ZIP+4 written without hyphen
            head, tail = compact[:-4], compact[-4:]
    if not head.isdigit() or not 3 <= len(head) <= 5:
        return ""
    zip5 = head.zfill(5)  # spreadsheets drop leading zeros (Holtsville NY is 00501)
    if zip5 == "00000":
        return ""
    if len(tail) == 4 and tail.isdigit() and tail != "0000":
        return f"{zip5}-{tail}"
    return zip5


def normalize_postcode(value: object) -> str:
    """Normalize a US ZIP / ZIP+4 or a Canadian postal code; "" when it is not one.

    ZIPs of 3 or 4 digits are left-padded with zeros (common practice: spreadsheets drop the
    leading zeros of New England and Puerto Rico ZIPs), ``2138.0`` from a spreadsheet reads as
    ``02138``, nine digits read as ZIP+4, a malformed ``+4`` part is dropped and the ZIP kept.
    Canadian codes are checked against the letters Canada Post uses (no D, F, I, O, Q, U;
    no W or Z first) and written ``A1A 1A1``.

    Parameters
    ----------
    value : str, int, float or None

    Returns
    -------
    str

    Example
    -------
    >>> normalize_postcode("k1a0b1"), normalize_postcode("123456789"), normalize_postcode(2138.0)
    ('K1A 0B1', '12345-6789', '02138')
    """
    if is_missing(value):
        return ""
    return _clean_postcode(_postcode_text(value))


def normalize_postcodes(values: Iterable[object]) -> pd.Series:
    """Vectorized :func:`normalize_postcode` (index kept; bad values give "", never raise)."""

    def safe(value: object) -> str:
        try:
            return _clean_postcode(_postcode_text(value))
        except TypeError:
            return ""

    series = as_series(values, "normalize_postcodes", "normalize_postcode")
    cache: dict[object, str] = {}
    out = []
    for value in series.to_numpy(dtype=object):
        if is_missing(value):
            out.append("")
            continue
        marker = (type(value).__name__, value if isinstance(value, (str, int, float)) else repr(value))
        if marker not in cache:
            cache[marker] = safe(value)
        out.append(cache[marker])
    return pd.Series(out, index=series.index, dtype=object, name=getattr(series, "name", None))
