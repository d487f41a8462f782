"""Fixtures shared by several test modules."""
from __future__ import annotations

import pytest


@pytest.fixture(scope="session")
def review_files(tmp_path_factory):
    """The review tests' fitted dictionary and coded files (see tests/_review_data.py), built once."""
    from _review_data import build

    return build(tmp_path_factory.mktemp("review"))
