"""Invented Lakeshore Region demo scenario: reproducibility, valid codes, documented noise rates.

Outside sources checked: SOC 2018 codes and titles against the O*NET reference table (O*NET database,
USDOL/ETA, CC BY 4.0); NAICS codes against the NAICS 2022 table (U.S. Census Bureau); register street
suffixes and unit designators against USPS Publication 28 standard abbreviations (the project's
lexicons, from memory); the misspelling operator against jellyfish's Damerau-Levenshtein distance.
"""
from __future__ import annotations

import re

import jellyfish
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

from titlematch.datasets import _vocabulary as vocab
from titlematch.coding.codes import onet_classification
from titlematch.io import read_table
from titlematch.io.lexicon import load_lexicon
from titlematch.datasets._sampling import misspell
from titlematch.datasets.scenario import classification, make_register_scenario, make_title_scenario, write_scenario

TITLE_SIZES = dict(records_per_year=2_000, new_records=3_000, gold_records=400)
REGISTER_SIZES = dict(register_rows=3_000, new_records=1_000)


@pytest.fixture(scope="module")
def titles():
    return make_title_scenario(seed=5, **TITLE_SIZES)


@pytest.fixture(scope="module")
def establishments():
    return make_register_scenario(seed=9, **REGISTER_SIZES)


def _plain(values: pd.Series) -> pd.Series:
    return values.str.lower().str.replace(r"[^a-z0-9ñáéíóú ]", " ", regex=True).str.split().str.join(" ")


# --------------------------------------------------------------------------- reproducibility
def test_same_seed_gives_identical_frames(titles, establishments):
    again = make_title_scenario(seed=5, **TITLE_SIZES)
    for name, frame in titles.items():
        pd.testing.assert_frame_equal(frame, again[name])
    register_again = make_register_scenario(seed=9, **REGISTER_SIZES)
    for name, frame in establishments.items():
        pd.testing.assert_frame_equal(frame, register_again[name])


def test_other_seed_gives_other_data(titles):
    other = make_title_scenario(seed=6, **TITLE_SIZES)
    assert not other["past"]["title"].equals(titles["past"]["title"])


def test_frames_have_the_documented_columns_and_sizes(titles, establishments):
    assert list(titles["past"].columns) == ["title", "context", "code", "year"]
    assert list(titles["gold"].columns) == ["record_id", "title", "context", "code", "manual_code"]
    assert list(titles["new"].columns) == ["record_id", "title", "context"]
    assert list(titles["new_truth"].columns) == ["record_id", "code", "manual_code"]
    assert titles["past"]["year"].value_counts().to_dict() == {2022: 2_000, 2023: 2_000, 2024: 2_000}
    assert len(titles["new"]) == len(titles["new_truth"]) == 3_000 and len(titles["gold"]) == 400
    assert list(establishments["register"].columns) == ["register_id", "name", "address", "city", "postcode",
                                                       "naics", "size_class"]
    assert list(establishments["new"].columns) == ["record_id", "name", "address", "city", "postcode", "naics"]
    assert list(establishments["truth"].columns) == ["record_id", "register_id"]


# --------------------------------------------------------------------------- codes
def test_classification_is_the_soc_2018_detailed_list():
    table = classification()
    titles = dict(zip(table["code"], table["title"]))
    # Source: SOC 2018 / O*NET-SOC 2019 titles (O*NET database, CC BY 4.0).
    assert titles["29-1141"] == "Registered Nurses"
    assert titles["53-7062"] == "Laborers and Freight, Stock, and Material Movers, Hand"
    assert titles["25-2021"] == "Elementary School Teachers, Except Special Education"
    assert table["code"].str.fullmatch(r"\d{2}-\d{4}").all() and table["code"].is_unique


def test_all_codes_exist_in_the_onet_reference_table(titles):
    valid = set(onet_classification("soc")["code"])
    used = pd.concat([titles["past"]["code"], titles["gold"]["code"], titles["gold"]["manual_code"],
                      titles["new_truth"]["code"], titles["new_truth"]["manual_code"]])
    assert set(used) <= valid
    assert {row[0] for row in vocab.OCCUPATIONS} <= valid
    assert 150 <= titles["new_truth"]["code"].nunique() <= 320
    # every SOC major group of the vocabulary appears (SOC 2018 has 22 major groups, 11-53 minus 55)
    assert titles["past"]["code"].str[:2].nunique() >= 20


def test_gold_is_a_sample_of_the_new_year_with_the_same_codes(titles):
    merged = titles["gold"].merge(titles["new"], on="record_id", suffixes=("", "_new")).merge(
        titles["new_truth"], on="record_id", suffixes=("", "_truth"))
    assert len(merged) == len(titles["gold"])
    assert (merged["title"] == merged["title_new"]).all()
    assert (merged["code"] == merged["code_truth"]).all()
    assert (merged["manual_code"] == merged["manual_code_truth"]).all()


# --------------------------------------------------------------------------- noise
@pytest.mark.parametrize("noise", [0.10, 0.15])
def test_production_noise_share_is_as_requested(noise):
    frames = make_title_scenario(seed=2, years=(2024,), records_per_year=6_000, new_records=6_000,
                                 gold_records=10, noise=noise)
    truth = frames["new_truth"]
    share = (truth["code"] != truth["manual_code"]).mean()
    # binomial standard error for 6,000 records is about 0.004; allow 5 of them
    assert abs(share - noise) < 0.02
    wrong = truth[truth["code"] != truth["manual_code"]]
    same_major = (wrong["code"].str[:2] == wrong["manual_code"].str[:2]).mean()
    assert same_major > 0.5  # most production errors go to a neighbouring occupation


def test_noise_outside_the_accepted_range_is_refused():
    with pytest.raises(ValueError, match="noise"):
        make_title_scenario(noise=0.7)
    with pytest.raises(ValueError, match="gold_records"):
        make_title_scenario(new_records=10, gold_records=20)


def test_surface_noise_rates(titles):
    kinds = titles["new_kinds"]["kind"]
    spanish = kinds.str.startswith("spanish").mean()
    misspelled = kinds.str.contains("misspelled").mean()
    assert 0.015 < spanish < 0.045  # documented: about 3%
    assert 0.03 < misspelled < 0.07  # documented: 5%
    assert kinds.str.contains("multi_role").mean() > 0.01
    past = titles["past"]["title"].str.lower()
    assert past.str.contains(r"\b(?:mgr|asst|whse|supv|tech)\b").any()
    assert past.str.contains(r"\b(?:nights|part time|pt|sr\.)\b").any()
    assert (titles["past"]["context"] == "").mean() < 0.05


def test_vague_titles_take_the_requested_share_and_none_without_it():
    frames = make_title_scenario(seed=4, years=(2024,), records_per_year=500, new_records=6_000,
                                 gold_records=10, vague_share=0.3)
    kinds = frames["new_kinds"]["kind"]
    english = ~kinds.str.startswith(("spanish", "new_title"))
    # every major group of the scenario has vague titles, so about 30% of English records get one
    assert abs((kinds[english] == "vague").mean() - 0.3) < 0.03
    vague_titles = sorted({t for titles in vocab.VAGUE_TITLES.values() for t in titles.split("|")})
    written = _plain(frames["new"].loc[kinds == "vague", "title"])
    # surface noise (abbreviations, qualifiers, misspellings) still applies to them
    assert written.map(lambda text: any(v in text for v in vague_titles)).mean() > 0.8
    none = make_title_scenario(seed=4, years=(2024,), records_per_year=500, new_records=2_000, gold_records=10,
                               vague_share=0.0)
    assert not none["new_kinds"]["kind"].eq("vague").any()


def test_new_year_only_titles_never_appear_in_the_past(titles):
    is_new = titles["new_kinds"]["kind"].str.startswith("new_title")
    assert 0.005 < is_new.mean() < 0.05
    new_titles = set(_plain(titles["new"].loc[is_new & titles["new_kinds"]["kind"].eq("new_title"), "title"]))
    past_titles = set(_plain(titles["past"]["title"]))
    known = {title for entry in vocab.NEW_YEAR_TITLES for title in entry[2].split("|")}
    assert new_titles and not any(title in past_titles for title in known)
    assert any(any(title in text for title in known) for text in new_titles)


def test_context_decides_ambiguous_teacher_and_driver_titles(titles):
    frame = titles["new"].merge(titles["new_truth"], on="record_id")
    plain = _plain(frame["title"])
    context = frame["context"].str.lower()
    # SOC 2018 definitions (O*NET reference table): 25-2021 elementary, 25-2031 secondary teachers.
    assert set(frame.loc[(plain == "teacher") & context.eq("elementary school"), "code"]) == {"25-2021"}
    assert set(frame.loc[(plain == "teacher") & context.eq("high school"), "code"]) == {"25-2031"}
    drivers = frame[plain == "driver"]
    assert {"53-3032", "53-3033"} <= set(drivers["code"])
    assert drivers.groupby("code")["context"].apply(lambda c: set(c.str.lower())).map(len).min() >= 1


@settings(max_examples=200, deadline=None)
@given(st.text(alphabet="abcdefghijklmnopqrstuvwxyz /-", min_size=4, max_size=40), st.integers(0, 5))
def test_misspelling_is_one_edit_operation(text, param):
    result = misspell(text, param)
    if sum(ch.isalpha() for ch in text) < 4:
        assert result == text
    else:
        # reference library: jellyfish (Damerau-Levenshtein counts a transposition as one edit)
        assert jellyfish.damerau_levenshtein_distance(text, result) == 1


# --------------------------------------------------------------------------- register
def test_register_ids_unique_and_truth_ids_exist(establishments):
    register, truth = establishments["register"], establishments["truth"]
    assert register["register_id"].is_unique
    assert not register.duplicated(["name", "address", "city"]).any()
    matched = truth["register_id"][truth["register_id"] != ""]
    assert matched.isin(register["register_id"]).all() and matched.is_unique
    assert abs((truth["register_id"] == "").mean() - 0.15) < 0.01


def test_register_codes_follow_published_standards(establishments):
    register = establishments["register"]
    naics = set(load_lexicon("naics_2022_titles")["naics_code"])
    assert register["naics"].str.len().eq(6).all() and set(register["naics"]) <= naics
    assert register["postcode"].str.fullmatch(r"\d{5}").all()
    # Street suffixes and unit designators use USPS Publication 28 standard abbreviations.
    suffixes = set(load_lexicon("usps_street_suffixes")["standard"].str.title())
    units = set(load_lexicon("usps_unit_designators")["standard"].str.title())
    parsed = register["address"].str.extract(r"^\d+ (?:[NSEW]{1,2} )?[\w ]+? (\w+)(?: (\w+) \d+)?$")
    assert parsed[0].dropna().isin(suffixes | {"9", "14", "31"}).all()
    assert parsed[1].dropna().isin(units).all()


def test_chains_share_a_name_at_several_addresses_and_new_branches_get_no_match(establishments):
    register, new = establishments["register"], establishments["new"]
    kinds = new.merge(establishments["truth"], on="record_id").merge(establishments["new_kinds"], on="record_id")
    addresses_per_name = register.groupby("name")["address"].nunique()
    assert (addresses_per_name >= 10).any()  # chains with many branches: hard negatives for each other

    legal = r"\b(?:inc|incorporated|llc|l l c|corp|corporation|co|company|ltd|limited)\b"

    def key(names: pd.Series) -> pd.Series:
        cleaned = _plain(names.str.replace(r"#\d+", "", regex=True))
        return cleaned.str.replace(legal, "", regex=True).str.split().str.join(" ")

    chain_keys = set(key(pd.Series(addresses_per_name[addresses_per_name >= 2].index)))
    branches = kinds[kinds["kind"] == "new_branch"]
    assert len(branches) > 10 and (branches["register_id"] == "").all()
    assert key(branches["name"]).isin(chain_keys).mean() > 0.7  # names vary (typos) on some forms


def test_survey_records_vary_from_the_register(establishments):
    new = establishments["new"]
    assert 0.06 < (new["postcode"] == "").mean() < 0.15   # documented: about 10% missing
    assert (new["naics"] == "").mean() > 0.1
    assert new["address"].str.contains(r"\b(?:Street|Avenue|Suite|North|South|East|West)\b").any()
    assert new["name"].str.contains(r"\b(?:Mfg|Svcs|Intl|Bros|Assoc|d/b/a|DBA)\b").any() or \
        new["name"].str.contains("&").any()


def test_a_larger_register_covers_more_places_each_as_large_as_before(monkeypatch):
    # Above COUNTY_ROWS rows each further county adds 30 invented towns (weighted as the first
    # county's) and its own ZIP codes, so places do not grow with the register; up to it the
    # region is the 30 towns and 43 ZIP codes of towns.csv (the demo's golden hashes pin that).
    from titlematch.datasets import _register
    base = _register.places_for(_register.COUNTY_ROWS)
    assert base.names.tolist() == [row[0] for row in vocab.TOWNS]
    assert sum(len(z) for z in base.zips) == 43
    monkeypatch.setattr(_register, "COUNTY_ROWS", 1_000)
    _register.places_for.cache_clear()
    try:
        data = make_register_scenario(seed=9, register_rows=4_000, new_records=600)
        places = _register.places_for(4_000)
    finally:
        _register.places_for.cache_clear()
    register = data["register"]
    assert len(places) == 4 * 30 and len(set(places.names)) == 120
    assert places.names[:30].tolist() == [row[0] for row in vocab.TOWNS]
    codes = [code for options in places.zips for code in options]
    assert len(codes) == 4 * 43 and len(set(codes)) == len(codes)  # a ZIP code belongs to one town
    assert register["city"].nunique() > 60 and register["postcode"].nunique() > 80
    assert register["postcode"].str.fullmatch(r"\d{5}").all()
    town_of = {code: town for town, options in zip(places.names, places.zips) for code in options}
    assert (register["postcode"].map(town_of) == register["city"]).all()
    # the first county keeps its share: about a quarter of the rows, as its weights are a quarter
    assert 0.2 < register["city"].isin(places.names[:30]).mean() < 0.3
    truth = data["truth"]
    matched = truth["register_id"][truth["register_id"] != ""]
    assert matched.isin(register["register_id"]).all() and matched.is_unique
    assert not register.duplicated(["name", "address", "city"]).any()


# --------------------------------------------------------------------------- files
def test_write_scenario_writes_readable_csv_files(tmp_path):
    paths = write_scenario(tmp_path / "demo", seed=3, small=True)
    expected = {"past_2022", "past_2023", "past_2024", "gold_2025", "new_2025", "new_2025_truth",
                "classification", "register", "establishments_2025", "establishments_2025_truth"}
    assert set(paths) == expected
    past = read_table(paths["past_2023"], required=["title", "context", "code", "year"])
    assert len(past) == 6_000 and set(past["year"]) == {"2023"}
    truth = read_table(paths["establishments_2025_truth"], required=["record_id", "register_id"])
    assert len(truth) == 800
    register = read_table(paths["register"])
    assert re.fullmatch(r"LR\d{7}", register["register_id"].iloc[0])
    assert np.isin(truth["register_id"][truth["register_id"] != ""], register["register_id"]).all()


def test_chain_brands_do_not_run_out_for_a_national_register():
    # A 10-million-row register has about 231,000 chains, more than the one-stem brands ("Ashbrook
    # Pharmacy", about 90,000 with the chain-friendly trades): the generator then draws two stems
    # ("Ashbrook Ridgefield Pharmacy") and every chain keeps a name of its own.
    from titlematch.datasets._register import _unique_chain_names
    names, industries = _unique_chain_names(np.random.default_rng(1), 120_000)
    assert len(names) == len(set(names)) == len(industries) == 120_000
    assert 0 < np.mean([name.count(" ") >= 2 and not name.split()[0].endswith("'s") for name in names]) < 1
