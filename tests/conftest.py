"""Fixtures shared by several test modules."""
from __future__ import annotations

import pytest


@pytest.fixture(scope="session")
def review_files(tmp_path_factory):
    """The review tests' fitted dictionary and coded files (see tests/_review_data.py), built once."""
    from _review_data import build

    return build(tmp_path_factory.mktemp("review"))


@pytest.fixture(scope="session")
def small_demo(tmp_path_factory):
    """The demo scenario's data, dictionary and confidence model (``demo --small`` sizes), built once
    per session through the command line: ``{"data": dir, "dictionary": dir, "model": dir}``."""
    from titlematch.cli import main
    from titlematch.datasets.scenario import write_scenario

    out = tmp_path_factory.mktemp("small_demo")
    data = out / "data"
    write_scenario(data, small=True)
    past = [str(data / f"past_{y}.csv") for y in (2022, 2023, 2024)]
    assert main(["dictionary", *past, "--classification", str(data / "classification.csv"),
                 "--out", str(out / "dictionary"), "--quiet"]) == 0
    assert main(["calibrate", "--dictionary", str(out / "dictionary"), "--gold", str(data / "gold_2025.csv"),
                 "--min-accuracy", "0.98", "--out", str(out / "model"), "--quiet"]) == 0
    return {"data": data, "dictionary": out / "dictionary", "model": out / "model"}


@pytest.fixture(scope="session")
def small_demo_coded(small_demo, tmp_path_factory):
    """The demo's new year coded with its model (``coded.csv``) and the referral queue issued for it
    (``queue.xlsx`` and ``queue.issued.csv``), in one directory."""
    from titlematch.cli import main

    path = tmp_path_factory.mktemp("small_demo_coded")
    assert main(["code", str(small_demo["data"] / "new_2025.csv"), "--dictionary", str(small_demo["dictionary"]),
                 "--model", str(small_demo["model"]), "--out", str(path / "coded.csv"), "--quiet"]) == 0
    assert main(["queue", str(path / "coded.csv"), "--dictionary", str(small_demo["dictionary"]),
                 "--out", str(path / "queue.xlsx"), "--quiet"]) == 0
    return path
