"""The spelling corrector travels with the dictionary: saved as arrays (no pickle), not rebuilt at load."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from titlematch.coding.coder import TitleCoder
from titlematch.normalize.spelling import SpellingCorrector


@pytest.fixture(scope="module")
def coder():
    # common practice: a dictionary learns its words from past coded records
    past = pd.DataFrame({"title": ["registered nurse"] * 30 + ["licensed practical nurse"] * 20 + ["truck driver"] * 25
                         + ["night auditor"] * 5,
                         "code": ["29-1141"] * 30 + ["29-2061"] * 20 + ["53-3032"] * 25 + ["43-3031"] * 5})
    return TitleCoder().fit(past)


def test_loaded_corrector_is_the_saved_one_without_rebuilding(coder, tmp_path, monkeypatch):
    coder.save(tmp_path / "dict")
    assert {"spelling_vocabulary.parquet", "spelling_hashes.npy", "spelling_ids.npy"} <= \
        {p.name for p in (tmp_path / "dict").iterdir()}

    def rebuilt(*args, **kwargs):
        raise AssertionError("the corrector's index was rebuilt at load")

    monkeypatch.setattr(SpellingCorrector, "_build_index", rebuilt)
    monkeypatch.setattr(SpellingCorrector, "fit", rebuilt)
    loaded = TitleCoder.load(tmp_path / "dict")
    monkeypatch.undo()
    saved, again = coder.index_.corrector_, loaded.index_.corrector_
    assert again.vocabulary_ == saved.vocabulary_ and again.get_params() == saved.get_params()
    np.testing.assert_array_equal(again._hashes, saved._hashes)
    np.testing.assert_array_equal(again._ids, saved._ids)
    words = ["registred", "nurce", "drivr", "truk", "auditer", "xyzzy"]
    assert [again.correct_token(w) for w in words] == [saved.correct_token(w) for w in words]
    titles = pd.DataFrame({"title": ["Registred Nurse", "truk drivr", "nurse"]})
    pd.testing.assert_frame_equal(loaded.code(titles), coder.code(titles))


def test_corrector_save_load_round_trip_keeps_the_index(tmp_path):
    corrector = SpellingCorrector().fit({"nursing": 40, "assistants": 25, "cashiers": 9})
    assert corrector.save(tmp_path / "c") == tmp_path / "c"
    again = SpellingCorrector.load(tmp_path / "c")
    np.testing.assert_array_equal(again._hashes, corrector._hashes)
    assert again.correct(["nursnig", "asistants", "mgr"]) == corrector.correct(["nursnig", "asistants", "mgr"])


def test_qualifier_hidden_by_a_typo_is_found_after_correction(coder):
    # SOC 2018 (BLS): 29-1141 Registered Nurses. One spelling path: correction happens inside
    # normalization, so "nigth" is read as "night" before qualifiers are taken out.
    from titlematch.normalize.title import normalize_title
    found = normalize_title("Registred Nurse nigth shift", corrector=coder.index_.corrector_)
    assert (found.key, found.shift) == ("registered nurse", "night")
    assert "nigth->night" in found.changes and "registred->registered" in found.changes
    coded = coder.code(pd.DataFrame({"title": ["Registred Nurse nigth shift"]}))
    assert coded.loc[0, "title_normalized"] == "registered nurse" and coded.loc[0, "code"] == "29-1141"
    units, _, _ = coder._units(pd.DataFrame({"title": ["Registred Nurse nigth shift"]}))
    assert units.loc[0, "corrected"] == "registered nurse" and units.loc[0, "spelling_changed"] == 2
    assert units.loc[0, "key"] == "registred nurse nigth shift"  # as written, for the exact search
