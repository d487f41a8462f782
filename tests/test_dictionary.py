"""The title dictionary: building, rejects, recency weights, update, diff, safe persistence."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from titlematch.io.artefact import ArtefactError
from titlematch.coding.coder import TitleCoder
from titlematch.coding.codes import SOC_PATTERN, onet_classification, to_soc_2018
from titlematch.coding.dictionary import TitleDictionary, context_tokens

PAST = pd.DataFrame({
    "title": ["Registered Nurse", "RN", "registered nurse", "Truck Driver", "truck driver", "", "Cook"],
    "code": ["29-1141", "29-1141", "29-1141", "53-3032", "53-3033", "35-2014", "35-2014x"],
    "context": ["hospital", "hospital", "clinic", "trucking", "delivery", "restaurant", "restaurant"],
    "year": [2022, 2023, 2024, 2023, 2024, 2024, "twenty"],
})


def test_rejects_name_row_and_reason_and_counts_add_up():
    d = TitleDictionary(code_pattern=SOC_PATTERN).fit(PAST)  # codes are opaque unless a pattern is asked for
    rejects = d.rejects.frame()
    assert set(zip(rejects["row"], rejects["column"])) == {(6, "title"), (7, "code"), (7, "year")}
    assert "empty title" in rejects.loc[rejects["row"] == 6, "reason"].iloc[0]
    meta = d.meta()["rows"]
    assert meta == {"in": 7, "kept": 5, "rejected": 2}
    assert meta["in"] == meta["kept"] + meta["rejected"]


def test_recency_weight_halves_after_half_life():
    past = pd.DataFrame({"title": ["clerk", "clerk"], "code": ["43-9061", "43-4171"], "year": [2021, 2024]})
    d = TitleDictionary(half_life=3.0).fit(past)
    w = d.entries.set_index("code")["weight"]
    assert w["43-4171"] == pytest.approx(1.0)
    assert w["43-9061"] == pytest.approx(0.5)  # three years older, one half-life


def test_context_counts_part_a_title_by_context():
    past = pd.DataFrame({"title": ["teacher"] * 4, "code": ["25-2021", "25-2021", "25-2031", "25-2031"],
                         "context": ["elementary school"] * 2 + ["high school"] * 2})
    d = TitleDictionary().fit(past)
    ctx = d.contexts.set_index(["token", "code"])["count"]
    assert ctx[("elementary", "25-2021")] == 2 and ("elementary", "25-2031") not in ctx.index
    assert ctx[("high", "25-2031")] == 2


def test_context_tokens_for_naics_codes_are_hierarchy_prefixes():
    # NAICS structure (U.S. Census Bureau): 2-digit sector, 3-digit subsector, 4-digit industry group
    assert context_tokens("611110") == ["naics:61", "naics:611", "naics:6111"]
    # a free-text context gives its words plus the whole description as one more token
    assert context_tokens("The Elementary School") == ["elementary", "school", "=elementary_school"]
    assert context_tokens(" ".join(context_tokens("611110"))) == context_tokens("611110")


def test_update_equals_rebuild_on_the_union():
    a = pd.DataFrame({"title": ["rn", "cook", "line cook"], "code": ["29-1141", "35-2014", "35-2014"],
                      "context": ["hospital", "diner", "diner"], "year": [2022, 2022, 2023]})
    b = pd.DataFrame({"title": ["cook", "charge nurse"], "code": ["35-2012", "29-1141"],
                      "context": ["school cafeteria", "hospital"], "year": [2024, 2024]})
    updated = TitleDictionary().fit(a).update(b)
    rebuilt = TitleDictionary().fit(pd.concat([a, b], ignore_index=True))
    for name in ("counts", "context_counts", "units"):
        pd.testing.assert_frame_equal(getattr(updated, name), getattr(rebuilt, name))
    pd.testing.assert_frame_equal(updated.entries, rebuilt.entries)


def test_diff_lists_new_vanished_and_recoded_titles():
    old = TitleDictionary().fit(pd.DataFrame({"title": ["cook", "cook", "typist"],
                                              "code": ["35-2014", "35-2014", "43-9022"]}))
    new = TitleDictionary().fit(pd.DataFrame({"title": ["cook", "cook", "data scientist"],
                                              "code": ["35-2012", "35-2012", "15-2051"]}))
    diff = old.diff(new)
    assert diff.new_titles["key"].tolist() == ["data scientist"]
    assert diff.vanished_titles["key"].tolist() == ["typist"]
    assert diff.changed_codes[["key", "old_code", "new_code"]].values.tolist() == [["cook", "35-2014", "35-2012"]]


def test_classification_rejects_codes_not_on_it():
    classification = pd.DataFrame({"code": ["29-1141"], "title": ["Registered Nurses"]})
    d = TitleDictionary().fit(pd.DataFrame({"title": ["rn", "cook"], "code": ["29-1141", "35-2014"]}),
                              classification)
    assert d.rejects.frame()["reason"].tolist() == ["code not in the classification"]
    assert ("registered nurses", "29-1141") in set(zip(d.official["key"], d.official["code"]))


def test_save_load_round_trip_codes_identically(tmp_path):
    coder = TitleCoder().fit(PAST.iloc[:5], PAST["code"].iloc[:5])
    coder.save(tmp_path / "dict")
    again = TitleCoder.load(tmp_path / "dict")
    titles = pd.DataFrame({"title": ["registered nurse", "truk driver", "nurse"], "context": ["", "trucking", ""]})
    pd.testing.assert_frame_equal(coder.code(titles), again.code(titles))
    manifest = json.loads((tmp_path / "dict" / "manifest.json").read_text())
    assert manifest["kind"] == "title-dictionary" and manifest["meta"]["rows"]["in"] == 5
    assert all(len(f["sha256"]) == 64 for f in manifest["files"].values())
    # the dictionary keys' similarity matrices are stored, not transformed again on loading: same matrices
    assert {"index_char_matrix_data.npy", "index_word_matrix_data.npy"} <= set(manifest["files"])
    for name in ("char_matrix_", "word_matrix_"):
        assert (getattr(coder.index_, name) != getattr(again.index_, name)).nnz == 0


def test_tampered_table_is_refused_naming_the_file(tmp_path):
    coder = TitleCoder().fit(PAST.iloc[:5], PAST["code"].iloc[:5])
    coder.save(tmp_path / "dict")
    target = tmp_path / "dict" / "counts.parquet"
    data = bytearray(target.read_bytes())
    data[len(data) // 2] ^= 0xFF
    target.write_bytes(bytes(data))
    with pytest.raises(ArtefactError, match="counts.parquet: checksum mismatch"):
        TitleCoder.load(tmp_path / "dict")


def test_artefact_without_manifest_or_of_other_kind_is_refused(tmp_path):
    with pytest.raises(ArtefactError, match="no manifest"):
        TitleDictionary.load(tmp_path)
    coder = TitleCoder().fit(PAST.iloc[:5], PAST["code"].iloc[:5])
    coder.save(tmp_path / "d")
    manifest = json.loads((tmp_path / "d" / "manifest.json").read_text())
    manifest["kind"] = "register-index"
    (tmp_path / "d" / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(ArtefactError, match="expected a 'title-dictionary'"):
        TitleDictionary.load(tmp_path / "d")


def test_onet_table_alone_codes_every_official_title_to_its_own_code():
    # Source: O*NET-SOC 2019 occupation titles, O*NET database (USDOL/ETA), CC BY 4.0.
    onet = onet_classification("onet")
    coder = TitleCoder().fit(onet[["title"]], onet["code"], classification=onet)
    out = coder.code(onet[["title"]])
    assert (out["code"] == onet["code"]).all()
    assert (out["code_title"] == onet["title"]).all()


def test_onet_detailed_codes_map_to_their_soc_2018_occupation():
    # Source: O*NET-SOC 2019 taxonomy; ".00" codes are SOC 2018 detailed occupations, and O*NET splits
    # SOC 53-1047 into 53-1042/43/44/49 (reference README; SOC 2018 structure, from memory).
    onet = onet_classification("onet")
    detailed = onet[onet["code"].str.endswith(".00")].reset_index(drop=True)
    coder = TitleCoder(code_level="soc").fit(detailed[["title"]], detailed["code"],
                                             classification=onet)
    out = coder.code(detailed[["title"]])
    expected = detailed["code"].map(to_soc_2018)
    assert (out["code"] == expected).mean() >= 0.995  # the 53-1047 split shares one SOC code
    assert to_soc_2018("53-1043.00") == "53-1047" and to_soc_2018("29-1141.01") == "29-1141"
    assert set(out["code"]) <= set(onet_classification("soc")["code"])
