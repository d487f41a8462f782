"""Nonsense is referred, never accepted (issue 14, F11).

The nonsense set is invented: random 3-6 letter strings drawn with a fixed seed (strings that happen
to be a dictionary word or a lexicon abbreviation, such as "slp", are real and left out), typical
non-answers of survey occupation questions (common practice: "refused", "don't know", "n/a", "see
above", "retired" ...) and job titles written in scripts the demo dictionary never saw (the
nurse and driver words are standard dictionary translations, from memory).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

from titlematch.cli import main
from titlematch.coding.coder import TitleCoder
from titlematch.coding.gate import answer_kind, residual_codes, scripts_of, title_flags
from titlematch.confidence.routing import choose_threshold, gated, route

NON_ANSWERS = ["refused", "Refused", "REFUSED.", "don't know", "Dont know", "DK", "n/a", "N/A", "none", "None",
               "retired", "Retired ", "unemployed", "see above", "same as above", "student", "homemaker",
               "prefer not to say", "unknown", "nothing", "not applicable", "self-employed", "various"]
OTHER_SCRIPTS = ["ممرضة", "سائق شاحنة", "медсестра", "водитель", "护士", "司机", "看護師", "간호사", "νοσοκόμα",
                 "אחות", "नर्स", "พยาบาล", "Медсестра ночная смена"]


def nonsense_titles(coder: TitleCoder, n: int = 300, seed: int = 14) -> list[str]:
    rng = np.random.default_rng(seed)
    letters = np.array(list("abcdefghijklmnopqrstuvwxyz"))
    corrector = coder.index_.corrector_
    out: list[str] = []
    while len(out) < n:
        word = "".join(rng.choice(letters, rng.integers(3, 7)))
        if word not in coder.known_words_ and not corrector.known(word):
            out.append(word)
    return out


@pytest.fixture(scope="module")
def coded_nonsense(small_demo, tmp_path_factory):
    path = tmp_path_factory.mktemp("nonsense")
    coder = TitleCoder.load(small_demo["dictionary"])
    titles = nonsense_titles(coder) + NON_ANSWERS + OTHER_SCRIPTS
    pd.DataFrame({"id": range(len(titles)), "title": titles}).to_csv(path / "nonsense.csv", index=False)
    assert main(["code", str(path / "nonsense.csv"), "--dictionary", str(small_demo["dictionary"]),
                 "--model", str(small_demo["model"]), "--out", str(path / "coded.csv"), "--quiet"]) == 0
    return pd.read_csv(path / "coded.csv", dtype=str, keep_default_na=False)


def test_no_nonsense_is_accepted(coded_nonsense):
    assert len(coded_nonsense) == 300 + len(NON_ANSWERS) + len(OTHER_SCRIPTS)
    accepted = coded_nonsense[coded_nonsense["decision"] == "accept"]
    assert accepted["title"].tolist() == []


def test_every_nonsense_title_carries_its_reason(coded_nonsense):
    flags = dict(zip(coded_nonsense["title"], coded_nonsense["title_flag"]))
    assert flags["refused"] == "non-answer: 'refused'"
    assert flags["retired"] == "not-working: 'retired'"
    assert flags["ممرضة"] == "script not in the dictionary: ARABIC"
    assert flags["护士"] == "script not in the dictionary: CJK"
    assert all(flags[t] for t in NON_ANSWERS + OTHER_SCRIPTS)



def test_random_strings_are_flagged_unless_one_edit_from_a_word(coded_nonsense, small_demo):
    # "yelp" is one edit from "help" and "powt" from "post": misspellings of dictionary words, so not
    # flagged (and still referred, by their confidence); every other random string is flagged
    corrector = TitleCoder.load(small_demo["dictionary"]).index_.corrector_
    random = coded_nonsense.iloc[:300]
    unflagged = random.loc[random["title_flag"] == "", "title"].tolist()
    assert len(unflagged) <= 6
    assert all(corrector.near_known(t) for t in unflagged), unflagged
    flagged = random.loc[random["title_flag"] != "", "title"].tolist()
    assert not any(corrector.near_known(t) for t in flagged)


def test_real_titles_of_the_new_year_pass_the_gate(small_demo_coded):
    # the gate must not refer real titles: at most 1% of the demo's new year is flagged
    coded = pd.read_csv(small_demo_coded / "coded.csv", dtype=str, keep_default_na=False)
    assert (coded["title_flag"] != "").mean() <= 0.01
    assert (coded["decision"] == "accept").mean() >= 0.5


def test_short_words_are_not_corrected_by_two_edits(small_demo):
    coder = TitleCoder.load(small_demo["dictionary"])
    corrector = coder.index_.corrector_
    assert [corrector.allowed_distance(n) for n in (3, 4, 7, 8, 12)] == [0, 1, 1, 2, 2]
    assert corrector.correct_token("hbsz") == "hbsz"          # two edits from "host": not a correction
    assert corrector.correct_token("cahsier") == "cashier"    # one transposition in seven letters: corrected


def test_router_refers_flagged_records_whatever_their_confidence():
    decisions = route([0.999, 0.999, 0.2, float("nan")], 0.5, flags=["", "no dictionary word", "", ""])
    assert decisions.tolist() == ["accept", "refer", "refer", "refer"]


def test_threshold_simulation_refers_flagged_records_as_the_router_does(small_demo):
    # The gold sample's flagged titles count as referred when the threshold is chosen: a flagged record
    # that would be right at 0.999 must not buy automation the coder will never give.
    rng = np.random.default_rng(5)
    conf = rng.uniform(0.5, 1.0, 400)
    right = rng.uniform(size=400) < conf
    flags = np.where(np.arange(400) % 4 == 0, "non-answer: 'refused'", "")
    conf[flags != ""] = 0.999
    expert = np.where(right, "A", "B")
    chosen = choose_threshold(gated(conf, flags), ["A"] * 400, expert, min_accuracy=0.8, n_boot=50)
    accepted = route(conf, chosen.threshold, flags=flags) == "accept"
    assert not accepted[flags != ""].any()
    assert chosen.expected_share_automated == pytest.approx(accepted.mean())
    # and calibrate on the demo's gold sample with non-answers added never counts them as accepted
    from titlematch.confidence.calibration import calibrate
    coder = TitleCoder.load(small_demo["dictionary"])
    gold = pd.read_csv(small_demo["data"] / "gold_2025.csv", dtype=str, keep_default_na=False)[["title", "code"]].head(300)
    extra = pd.DataFrame({"title": NON_ANSWERS, "code": gold["code"].iloc[0]})
    result = calibrate(coder, pd.concat([gold, extra], ignore_index=True), min_accuracy=0.9, n_boot=50)
    flagged = coder.flags(extra)
    assert (flagged != "").all()
    n_ok = int(round(result.choice.expected_share_automated * result.choice.n_gold))
    decisions = route(result.confidence, result.model.threshold_, flags=coder.flags(pd.concat([gold, extra])))
    assert int((decisions == "accept").sum()) == n_ok


def test_scripts_and_answers():
    assert scripts_of("Enfermera de noche") == {"LATIN"}
    assert scripts_of("Señora de limpieza ª") == {"LATIN"}
    assert scripts_of("Медсестра 2") == {"CYRILLIC"}
    assert answer_kind(" Don't   know! ") == "non-answer"
    assert answer_kind("N.A.") == "non-answer"
    assert answer_kind("retired nurse") == ""   # a title with an occupation in it is not a non-answer


def test_residual_codes_are_offered_for_non_answers():
    # a classification with a code for insufficient information (as many national lists have;
    # common practice) gets it as the first candidate of a non-answer, and the record is referred
    past = pd.DataFrame({"title": ["registered nurse", "truck driver", "line cook"] * 3,
                         "code": ["29-1141", "53-3032", "35-2014"] * 3})
    catalogue = pd.DataFrame({"code": ["29-1141", "53-3032", "35-2014", "99-9999"],
                              "title": ["Registered Nurses", "Heavy and Tractor-Trailer Truck Drivers",
                                        "Cooks, Restaurant", "Insufficient information to code"]})
    assert residual_codes(catalogue) == ["99-9999"]
    coder = TitleCoder().fit(past, past["code"], classification=catalogue)
    coded = coder.code(pd.DataFrame({"title": ["refused", "registered nurse"]}))
    assert coded["code"].tolist()[0] == "99-9999"
    assert coded["code_title"].tolist()[0] == "Insufficient information to code"
    assert coded["title_flag"].tolist() == ["non-answer: 'refused'", ""]
    assert coded["code"].tolist()[1] == "29-1141"


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=30))
def test_flags_are_total(text):
    # any text gets a flag string (possibly empty) and never raises
    flag = title_flags([text], ["x"], ["x"], known_words=frozenset({"x"}), known_scripts=["LATIN"])[0]
    assert isinstance(flag, str)
