"""One contract for the title coder and the establishment linker (scikit-learn's estimator conventions).

scikit-learn's developer guide (https://scikit-learn.org/stable/developers/develop.html, from memory):
``__init__`` only stores parameters, ``fit`` learns and returns ``self``, learned attributes end in
``_``, and applying a fitted estimator does not change it. Ours adds: ``save(dir)`` returns the
directory as a ``Path`` and the ``load(dir)`` classmethod gives back an estimator with identical output.
"""
from __future__ import annotations

import hashlib
import pickle
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import pandas as pd
import pytest

from titlematch.coding.coder import TitleCoder
from titlematch.datasets.scenario import classification, make_register_scenario, make_title_scenario
from titlematch.linking.linker import EstablishmentLinker


@dataclass
class Case:
    estimator: object
    fit: Callable          # fit(estimator) -> whatever fit returns
    apply: Callable        # apply(estimator, batch) -> frame
    batches: tuple         # two batches: the first warms lazy caches, the second is checked
    save: Callable         # save(estimator, directory) -> whatever save returns
    load: Callable         # load(directory) -> estimator


def _coder_case() -> Case:
    data = make_title_scenario(seed=4, records_per_year=300, new_records=120, gold_records=10)
    new = data["new"]
    return Case(TitleCoder(max_candidates=5),
                lambda est: est.fit(data["past"], classification=classification()),
                lambda est, batch: est.code(batch),
                (new.iloc[:60].reset_index(drop=True), new.iloc[60:].reset_index(drop=True)),
                lambda est, d: est.save(d),
                TitleCoder.load)


def _linker_case() -> Case:
    data = make_register_scenario(seed=8, register_rows=400, new_records=80)
    new = data["new"]
    return Case(EstablishmentLinker(threshold=0.8),
                lambda est: est.fit(data["register"], records=new),
                lambda est, batch: est.link(batch),
                (new.iloc[:40].reset_index(drop=True), new.iloc[40:].reset_index(drop=True)),
                lambda est, d: est.save(d, index_directory=Path(str(d) + "_index")),
                EstablishmentLinker.load)


CASES = {"coder": _coder_case, "linker": _linker_case}


@pytest.fixture(scope="module", params=sorted(CASES))
def case(request):
    return CASES[request.param]()


def _digest(value, depth: int = 0) -> str:
    """Content digest of a value; for our own objects, of their public attributes, recursively
    (private memo caches such as a spelling corrector's ``_cache`` are not learned state).
    Pickled here, in a test, only to compare deeply."""
    if depth < 3 and type(value).__module__.startswith("titlematch.") and hasattr(value, "__dict__"):
        parts = [f"{name}={_digest(v, depth + 1)}" for name, v in sorted(vars(value).items())
                 if not name.startswith("_")]
        return hashlib.sha256(";".join(parts).encode()).hexdigest()
    if isinstance(value, (list, tuple)) and depth < 3:
        return hashlib.sha256(";".join(_digest(v, depth + 1) for v in value).encode()).hexdigest()
    return hashlib.sha256(pickle.dumps(value)).hexdigest()


def _state(estimator) -> dict:
    """Every attribute of the estimator (private ones included) and its content."""
    return {name: _digest(value) for name, value in sorted(vars(estimator).items())}


def test_init_stores_parameters_only_and_fit_returns_self(case):
    estimator = case.estimator
    assert not [name for name in vars(estimator) if name.endswith("_")]  # nothing learned before fit
    assert set(estimator.get_params()) == set(vars(estimator))
    assert case.fit(estimator) is estimator
    assert [name for name in vars(estimator) if name.endswith("_")]


def test_applying_changes_nothing_on_the_estimator_nor_the_input(case):
    estimator = case.estimator
    if not hasattr(estimator, "index_"):
        case.fit(estimator)
    case.apply(estimator, case.batches[0])
    params, state = estimator.get_params(), _state(estimator)
    batch = case.batches[1]
    given = batch.copy()
    out = case.apply(estimator, batch)
    assert out is not batch and isinstance(out, pd.DataFrame)
    pd.testing.assert_frame_equal(batch, given)
    assert estimator.get_params() == params
    assert _state(estimator) == state, "code/link set or changed an attribute of the estimator"


def test_save_returns_the_path_and_load_gives_identical_output(case, tmp_path):
    estimator = case.estimator
    if not hasattr(estimator, "index_"):
        case.fit(estimator)
    saved = case.save(estimator, tmp_path / "artefact")
    assert isinstance(saved, Path) and saved == tmp_path / "artefact"
    again = case.load(saved)
    assert type(again) is type(estimator) and again.get_params().keys() == estimator.get_params().keys()
    for batch in case.batches:
        pd.testing.assert_frame_equal(case.apply(again, batch), case.apply(estimator, batch))
