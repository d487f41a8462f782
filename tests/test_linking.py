"""Establishment linking: comparisons, blocking, decisions, the register index and the CLI.

Outside sources are named beside each check: USPS Publication 28 (street suffixes, C1;
secondary unit designators, C2; directionals), the NAICS 2022 structure (U.S. Census
Bureau, through lexicons/naics_2022_titles.csv), scikit-learn's TF-IDF and cosine as the
reference computation, the Census Bureau's definition of an establishment (from memory:
"a single physical location where business is conducted"), and Fellegi–Sunter weights.
"""
from __future__ import annotations

import json
import pickle

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.metrics.pairwise import cosine_similarity

from titlematch.io.artefact import ArtefactError
from titlematch.linking.blocking import blocking_quality, join_codes, top_k
from titlematch.cli import main
from titlematch.linking.comparison import agreement_levels, compare
from titlematch.io import InputError, read_table
from titlematch.io.lexicon import load_mapping
from titlematch.linking.linker import EstablishmentLinker, FellegiSunterModel, exclusive_confidence
from titlematch.linking.register import RegisterIndex
from titlematch.datasets.scenario import make_register_scenario


def _pair_features(new: pd.DataFrame, register: pd.DataFrame, fields=None) -> pd.DataFrame:
    """Features of every (new row i, register row i) pair."""
    index = RegisterIndex(fields).fit(register)
    prepared = index.prepare(new)
    pairs = pd.DataFrame({"new": np.arange(len(new)), "register": np.arange(len(new))})
    return compare(pairs, prepared, index)


def _establishments(rows):
    return pd.DataFrame(rows, columns=["register_id", "name", "address", "city", "postcode"])


# --------------------------------------------------------------------------- comparisons

def test_usps_publication_28_forms_compare_as_identical_addresses():
    # USPS Publication 28: NORTH -> N (directional), STREET -> ST (C1), SUITE -> STE (C2),
    # AVENUE -> AVE, APARTMENT -> APT, BOULEVARD -> BLVD, WEST -> W.
    register = _establishments([
        ["R1", "Harbor Light Bakery", "123 N MAIN ST STE 200", "Fairview", "12345"],
        ["R2", "Quill and Ink Printing", "45 W ELM AVE APT 3", "Fairview", "12345"],
        ["R3", "Copperfield Dental", "900 LAKESHORE BLVD", "Fairview", "12345"],
    ])
    new = register.drop(columns="register_id").copy()
    new["address"] = ["123 North Main Street Suite 200", "45 West Elm Avenue Apartment 3", "900 Lakeshore Boulevard"]
    features = _pair_features(new, register)
    assert features["address_exact"].tolist() == [1.0, 1.0, 1.0]
    assert features["house_number"].tolist() == [1.0, 1.0, 1.0]
    assert features["street"].tolist() == [1.0, 1.0, 1.0]
    assert features["unit"].iloc[:2].tolist() == [1.0, 1.0] and np.isnan(features["unit"].iloc[2])
    levels = agreement_levels(features, RegisterIndex().fit(register).fields_)
    assert levels["address"].tolist() == [1.0, 1.0, 1.0]


def test_house_number_near_and_unit_disagreement():
    # "Near" is our rule (|difference| <= 10, common practice for a mistyped or ranged number);
    # unit designators per USPS Publication 28 C2 (STE = suite).
    register = _establishments([["R1", "Atlas Gear", "100 Oak St Ste 5", "Fairview", "12345"],
                                ["R2", "Atlas Gear", "100 Oak St", "Fairview", "12345"]])
    new = register.drop(columns="register_id").copy()
    new["address"] = ["108 Oak St Suite 7", "250 Oak St"]
    features = _pair_features(new, register)
    assert features["house_number"].tolist() == [0.0, 0.0]
    assert features["house_number_near"].tolist() == [1.0, 0.0]
    assert features["unit"].iloc[0] == 0.0 and np.isnan(features["unit"].iloc[1])


def test_naics_prefix_depth_follows_the_hierarchy():
    # NAICS 2022 (U.S. Census Bureau): 722511 Full-Service and 722513 Limited-Service Restaurants
    # share industry group 7225; 722511 and 721110 share only sector 72; 722511 and 541110 nothing.
    titles = load_mapping("naics_2022_titles", "naics_code", "title")
    assert titles["7225"] == "Restaurants and Other Eating Places" and titles["72"].startswith("Accommodation")
    register = pd.DataFrame({"register_id": ["A", "B", "C", "D", "E"], "name": ["Cafe"] * 5,
                             "address": ["1 Main St"] * 5, "city": ["X"] * 5, "postcode": ["12345"] * 5,
                             "naics": ["722513", "721110", "541110", "722511", "72"]})
    new = register.drop(columns="register_id").assign(naics=["722511", "722511", "722511", "722511", ""])
    depth = _pair_features(new, register)["naics"]
    assert depth.iloc[:4].round(4).tolist() == [round(4 / 6, 4), round(2 / 6, 4), 0.0, 1.0]
    assert np.isnan(depth.iloc[4])


def test_trade_name_matches_legal_name_both_ways_and_legal_form_compared():
    # "Doing business as" (d/b/a) names a trade name beside the legal name (common practice in
    # U.S. business registration); a legal form present on one side only is unknown, not different.
    register = _establishments([["R1", "Blue Heron Cafe", "5 Pier Rd", "Fairview", "12345"],
                                ["R2", "Baxter and Lowe LLC dba Pinewood Grill", "9 Hill Rd", "Fairview", "12345"]])
    new = register.drop(columns="register_id").copy()
    new["name"] = ["Baxter & Lowe, LLC d/b/a Blue Heron Cafe", "Pinewood Grill"]
    features = _pair_features(new, register)
    assert features["trade_name"].tolist() == [1.0, 1.0]
    assert features["legal_form"].isna().all()  # a legal form on one side only is missing, not a disagreement


def test_word_similarity_is_scikit_learn_tfidf_cosine():
    # Reference: scikit-learn TfidfVectorizer + cosine_similarity on the same normalized names.
    names = ["acme services", "zenith services", "acme tools services", "harbor services", "quill services",
             "copper services", "atlas services"]
    register = pd.DataFrame({"register_id": [f"R{i}" for i in range(7)], "name": names, "address": "",
                             "city": "", "postcode": ""})
    new = register.drop(columns="register_id").copy()
    new["name"] = ["zenith services", "acme services", "acme services", "harbor services", "acme quill",
                   "copper", "atlas"]
    features = _pair_features(new, register)
    reference = TfidfVectorizer(token_pattern=r"(?u)\b\w+\b", sublinear_tf=True).fit(names)
    expected = [cosine_similarity(reference.transform([a]), reference.transform([b]))[0, 0]
                for a, b in zip(new["name"], names)]
    np.testing.assert_allclose(features["name_words"].to_numpy(), expected, atol=1e-5)
    # A word held by every name ("services") counts little: two different businesses stay apart.
    assert features["name_words"].iloc[0] < 0.35 < features["name_jaro_winkler"].iloc[0]


# --------------------------------------------------------------------------- blocking

@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(-1, 6), max_size=30), st.lists(st.integers(-1, 6), max_size=30),
       st.integers(1, 5))
def test_join_codes_equals_a_pandas_merge(new_codes, register_codes, max_block):
    # Reference: pandas.merge on the key, with oversized register blocks removed.
    new_codes, register_codes = np.asarray(new_codes, dtype=np.int64), np.asarray(register_codes, dtype=np.int64)
    i, j, _ = join_codes(np.arange(len(new_codes)), new_codes, np.arange(len(register_codes)), register_codes,
                         max_block)
    left = pd.DataFrame({"i": np.arange(len(new_codes)), "key": new_codes})
    right = pd.DataFrame({"j": np.arange(len(register_codes)), "key": register_codes})
    sizes = right[right.key >= 0].groupby("key").size()
    right = right[right.key.isin(sizes[sizes <= max_block].index)]
    merged = left[left.key >= 0].merge(right, on="key")
    assert sorted(zip(i.tolist(), j.tolist())) == sorted(zip(merged.i.tolist(), merged.j.tolist()))


def test_top_k_matches_a_dense_sort():
    # Reference: numpy argsort of the dense similarity matrix.
    rng = np.random.default_rng(3)
    dense = np.round(rng.random((12, 9)), 3) * (rng.random((12, 9)) < 0.6)
    from scipy.sparse import csr_matrix
    rows, cols = top_k(csr_matrix(dense), 3, 0.2)
    for r in range(12):
        valid = [c for c in np.argsort(-dense[r], kind="stable") if dense[r, c] >= 0.2][:3]
        assert sorted(cols[rows == r].tolist()) == sorted(valid)


def test_top_k_breaks_ties_to_the_smaller_column_on_either_sort_path():
    # Reference: Python's sorted() on (-similarity, column) per row; similarities rounding above 1
    # count as 1. A matrix with 2^40 columns takes the lexsort path, a small one the integer key.
    from scipy.sparse import csr_matrix
    from titlematch.linking.blocking import _top_k
    rng = np.random.default_rng(4)
    dense = (np.round(rng.random((30, 40)), 1) * (rng.random((30, 40)) < 0.7)).astype(np.float32)
    dense[0, [3, 7]] = np.float32(1.0000001)
    dense[0, 5] = 1.0
    small = csr_matrix(dense)
    wide = csr_matrix((small.data, small.indices, small.indptr), shape=(30, 2 ** 40))
    for matrix in (small, wide):
        rows, cols, _ = _top_k(matrix, 4, 0.2)
        for r in range(30):
            expected = sorted((-min(float(v), 1.0), c) for c, v in enumerate(dense[r]) if v >= 0.2)[:4]
            assert cols[rows == r].tolist() == [c for _, c in expected]


def test_blocking_quality_uses_christen_measures():
    # Christen (2012), Data Matching, sec. 7.3: pairs completeness = true links among candidates /
    # all true links; reduction ratio = 1 - candidates / (|A| x |B|).
    pairs = pd.DataFrame({"new": [0, 1, 2], "register": [0, 1, 5]})
    truth = pd.DataFrame({"new": [0, 1, 2, 3], "register": [0, 1, 2, 3]})
    quality = blocking_quality(pairs, truth, 10, 20)
    assert quality["pairs_completeness"] == 0.5
    assert quality["reduction_ratio"] == pytest.approx(1 - 3 / 200)


# --------------------------------------------------------------------------- decisions

def test_exclusive_confidence_splits_between_equal_candidates():
    # Two candidates with equal odds o of being the single match: each gets o / (1 + 2o) < 1/2.
    confidence = exclusive_confidence(np.array([0, 0, 1]), np.log(np.array([99.0, 99.0, 99.0])))
    np.testing.assert_allclose(confidence, [99 / 199, 99 / 199, 0.99])


def test_fellegi_sunter_weights_are_log2_ratios():
    # Fellegi and Sunter (1969): agreement weight log2(m/u), disagreement log2((1-m)/(1-u)), missing 0.
    model = FellegiSunterModel()
    model.m_ = pd.Series({"name": 0.9, "postcode": 0.8})
    model.u_ = pd.Series({"name": 0.05, "postcode": 0.1})
    model.prior_ = 0.5
    levels = pd.DataFrame({"name": [1.0, 0.0, np.nan], "postcode": [1.0, 1.0, 0.0]})
    weights = model.weights(levels)
    np.testing.assert_allclose(weights["name"], [np.log2(0.9 / 0.05), np.log2(0.1 / 0.95), 0.0])
    np.testing.assert_allclose(weights["postcode"], [3.0, 3.0, np.log2(0.2 / 0.9)])
    np.testing.assert_allclose(model.predict_proba(levels)[0], 1 / (1 + 2 ** -(np.log2(18) + 3)))


# --------------------------------------------------------------------------- scenario-based behaviour
# These run on the invented register scenario (titlematch.datasets.scenario): they check our output
# contract end to end; the outside facts they rest on are named where they apply.

@pytest.fixture(scope="module")
def scenario():
    return make_register_scenario(seed=11, register_rows=3000, new_records=600)


@pytest.fixture(scope="module")
def linked(scenario):
    linker = EstablishmentLinker().fit(scenario["register"], records=scenario["new"])
    return linker, linker.link(scenario["new"])


def test_output_columns_and_decisions(scenario, linked):
    _, out = linked
    assert list(out.columns[: len(scenario["new"].columns)]) == list(scenario["new"].columns)
    for column in ("register_id", "confidence", "decision", "register_name", "register_address",
                   "register_id_2", "confidence_2", "explanation"):
        assert column in out.columns
    assert set(out["decision"]) <= {"accept", "refer", "no-match"}
    assert (out.loc[out["decision"] == "no-match", "register_id"] == "").all()
    assert (out.loc[out["decision"] == "accept", "confidence"] >= 0.9).all()


def test_accepted_links_are_precise_and_new_employers_unlinked(scenario, linked):
    _, out = linked
    truth = scenario["truth"].set_index("record_id")["register_id"]
    expected = out["record_id"].map(truth)
    accepted = out["decision"] == "accept"
    assert (out.loc[accepted, "register_id"] == expected[accepted]).mean() >= 0.99
    new_employers = expected == ""
    assert new_employers.any()
    assert (out.loc[new_employers, "decision"] != "accept").mean() >= 0.98


def test_branch_of_a_chain_at_another_address_is_not_linked():
    # An establishment is a single physical location (U.S. Census Bureau definition, from memory):
    # the same chain name at another address is another establishment.
    scenario = make_register_scenario(seed=5, register_rows=2000, new_records=400)
    register = scenario["register"]
    chain = register[register.duplicated("name", keep=False)].iloc[0]
    other = register[(register["name"] == chain["name"]) & (register["register_id"] != chain["register_id"])]
    new = pd.concat([scenario["new"], pd.DataFrame([{
        "record_id": "probe", "name": chain["name"], "address": chain["address"], "city": chain["city"],
        "postcode": chain["postcode"], "naics": chain["naics"]}])], ignore_index=True)
    linker = EstablishmentLinker().fit(register.drop(index=chain.name), records=new)
    out = linker.link(new).set_index("record_id")
    assert len(other)
    assert out.loc["probe", "decision"] != "accept"


def test_explanation_lists_agreeing_and_disagreeing_fields(linked):
    _, out = linked
    accepted = out[out["decision"] == "accept"]["explanation"]
    assert accepted.str.contains(r"name \+\d", regex=True).mean() > 0.9
    weights = accepted.iloc[0].split(", ")
    assert all(w.rsplit(" ", 1)[1][0] in "+-" for w in weights)


def test_one_to_one_gives_each_register_entry_at_most_one_record(scenario):
    new = pd.concat([scenario["new"], scenario["new"].assign(record_id=lambda f: f["record_id"] + "-copy")],
                    ignore_index=True)
    linker = EstablishmentLinker(one_to_one=True).fit(scenario["register"], records=new)
    out = linker.link(new)
    ids = out.loc[out["decision"] != "no-match", "register_id"]
    assert not ids.duplicated().any()
    free = EstablishmentLinker().fit(scenario["register"], records=new).link(new)
    assert free.loc[free["decision"] != "no-match", "register_id"].duplicated().any()


def test_supervised_model_from_training_pairs(scenario):
    truth = scenario["truth"]
    train_ids = truth["record_id"].iloc[:300]
    training = truth[truth["record_id"].isin(train_ids)]
    records = scenario["new"]
    linker = EstablishmentLinker().fit(scenario["register"], training, records=records)
    out = linker.link(records[~records["record_id"].isin(train_ids)])
    expected = out["record_id"].map(truth.set_index("record_id")["register_id"])
    accepted = out["decision"] == "accept"
    assert accepted.mean() > 0.5
    assert (out.loc[accepted, "register_id"] == expected[accepted]).mean() >= 0.98


def test_register_index_round_trip_and_tamper_check(tmp_path, scenario):
    index = RegisterIndex().fit(scenario["register"])
    index.save(tmp_path / "index")
    files = sorted(p.name for p in (tmp_path / "index").rglob("*") if p.is_file())
    assert all(f.endswith((".parquet", ".npy", ".json", ".arrow")) for f in files)  # data only, no pickle
    assert "register.arrow" in files  # ids and display columns: an Arrow IPC file, memory-mapped when loaded
    loaded = RegisterIndex.load(tmp_path / "index")
    records = scenario["new"].head(200)
    a = EstablishmentLinker().fit(index, records=records).link(records)
    b = EstablishmentLinker().fit(loaded, records=records).link(records)
    pd.testing.assert_frame_equal(a, b)
    # Sent to another process (a Dask worker), a loaded index leaves its ids and display columns
    # behind and maps the file again there: the same links.
    shipped = pickle.dumps(loaded)
    assert loaded.ids_.iloc[-1].encode() not in shipped
    assert loaded.display_["register_address"].iloc[-1].encode() not in shipped
    pd.testing.assert_frame_equal(EstablishmentLinker().fit(pickle.loads(shipped), records=records).link(records), a)
    (tmp_path / "index" / "register.arrow").write_bytes((tmp_path / "index" / "register.arrow").read_bytes() + b"\0")
    with pytest.raises(ArtefactError, match="register.arrow: missing or changed since the index was opened"):
        pickle.loads(shipped)  # the worker's file is checked against what the command opened
    with pytest.raises(ArtefactError, match="register.arrow: checksum"):
        RegisterIndex.load(tmp_path / "index")
    index.save(tmp_path / "index")
    with open(tmp_path / "index" / "word_idf.npy", "r+b") as handle:
        handle.seek(-4, 2)
        handle.write(b"\x00\x00\x80\x7f")
    with pytest.raises(ArtefactError, match="checksum"):
        RegisterIndex.load(tmp_path / "index")


def test_fitted_linker_saves_and_loads_without_pickle(tmp_path, scenario, linked):
    linker, out = linked
    linker.save(tmp_path / "model", index_directory=tmp_path / "index")
    assert all(p.suffix in (".parquet", ".npy", ".json") for p in (tmp_path / "model").iterdir())
    again = EstablishmentLinker.load(tmp_path / "model")
    pd.testing.assert_frame_equal(again.link(scenario["new"]), out)
    truth = scenario["truth"]
    supervised = EstablishmentLinker().fit(linker.index_, truth.iloc[:200], records=scenario["new"])
    supervised.save(tmp_path / "supervised")
    loaded = EstablishmentLinker.load(tmp_path / "supervised", index=linker.index_)
    records = scenario["new"].iloc[200:400]
    pd.testing.assert_frame_equal(loaded.link(records), supervised.link(records))


# --------------------------------------------------------------------------- bad input

def test_duplicate_register_ids_name_the_rows(tmp_path):
    path = tmp_path / "register.csv"
    path.write_text("register_id,name,address,city,postcode\nR1,A Co,1 Main St,X,12345\n"
                    "R2,B Co,2 Main St,X,12345\nR1,C Co,3 Main St,X,12345\n", encoding="utf-8")
    frame = read_table(path)
    with pytest.raises(InputError, match=r"register\.csv.*duplicated id.*'R1' in rows 2, 4"):
        RegisterIndex().fit(frame, source=str(path))


def test_missing_id_or_field_column_is_a_clear_error(tmp_path):
    frame = pd.DataFrame({"id": ["1"], "name": ["A"], "address": [""], "city": [""], "postcode": [""]})
    with pytest.raises(InputError, match=r"reg\.csv: missing column\(s\) 'register_id'"):
        RegisterIndex().fit(frame, source="reg.csv")
    frame = frame.rename(columns={"id": "register_id"}).drop(columns="city")
    with pytest.raises(InputError, match=r"reg\.csv: missing column\(s\) 'city'.*--fields"):
        RegisterIndex().fit(frame, source="reg.csv")


def test_cli_register_link_rejects_and_summary(tmp_path, scenario, capsys):
    register_path, new_path = tmp_path / "register.csv", tmp_path / "new.csv"
    scenario["register"].to_csv(register_path, index=False)
    new = scenario["new"].head(300).copy()
    new.loc[new.index[:2], "name"] = ["", "   "]
    new.rename(columns={"name": "employer_name"}).to_csv(new_path, index=False)
    assert main(["register", str(register_path), "--out", str(tmp_path / "index"), "--quiet"]) == 0
    out_path = tmp_path / "linked.csv"
    assert main(["link", str(new_path), "--register", str(tmp_path / "index"), "--out", str(out_path),
                 "--fields", "name=employer_name", "--quiet"]) == 0
    summary = capsys.readouterr().out.strip().splitlines()[-1]
    assert summary.startswith("titlematch link: rows in 300,") and "rejected 2" in summary
    out = pd.read_csv(out_path, dtype=str, keep_default_na=False)
    assert len(out) == 298 and "employer_name" in out.columns
    rejects = pd.read_csv(tmp_path / "linked.rejects.csv", dtype=str, keep_default_na=False)
    assert rejects["row"].tolist() == ["2", "3"] and rejects["reason"].str.contains("empty name").all()
    manifest = json.loads((tmp_path / "index" / "manifest.json").read_text())
    assert manifest["kind"] == "register-index"


def test_cli_training_file_gives_a_supervised_link(tmp_path, scenario, capsys):
    register_path, new_path, training_path = tmp_path / "register.csv", tmp_path / "new.csv", tmp_path / "gold.csv"
    scenario["register"].to_csv(register_path, index=False)
    scenario["new"].to_csv(new_path, index=False)
    scenario["truth"].iloc[:250].to_csv(training_path, index=False)  # record_id, register_id
    out_path = tmp_path / "linked.parquet"
    assert main(["link", str(new_path), "--register", str(register_path), "--training", str(training_path),
                 "--out", str(out_path), "--one-to-one", "--quiet"]) == 0
    out = pd.read_parquet(out_path)
    expected = out["record_id"].map(scenario["truth"].set_index("record_id")["register_id"])
    accepted = out["decision"] == "accept"
    assert accepted.mean() > 0.5 and (out.loc[accepted, "register_id"] == expected[accepted]).mean() >= 0.98
    assert "accepted" in capsys.readouterr().out


def test_cli_dedupe_groups_duplicates(tmp_path, scenario):
    new = scenario["new"].head(200)
    doubled = pd.concat([new, new.assign(record_id=new["record_id"] + "-again")], ignore_index=True)
    path = tmp_path / "batch.csv"
    doubled.to_csv(path, index=False)
    assert main(["link", str(path), "--dedupe", "--out", str(tmp_path / "groups.csv"), "--quiet"]) == 0
    out = pd.read_csv(tmp_path / "groups.csv", dtype=str, keep_default_na=False)
    pairs = out.assign(base=out["record_id"].str.replace("-again", "", regex=False))
    assert (pairs.groupby("base")["cluster_id"].nunique() == 1).mean() >= 0.98
    assert (out["cluster_size"].astype(int) >= 2).mean() >= 0.98
