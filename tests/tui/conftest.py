"""Dashboard fixtures: a built store file (read-only tests share one per module)."""

from __future__ import annotations

import pytest

from ._build import build


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    path = tmp_path_factory.mktemp("dash") / "store.sqlite"
    ids = build(str(path))
    return str(path), ids
