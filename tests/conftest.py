"""Session-wide test settings."""

from __future__ import annotations

import os

import pytest


@pytest.fixture(scope="session", autouse=True)
def _gate_count_cache_in_tmp(tmp_path_factory):
    """Point the gate-count disk cache (qgp.circuits.count_store) at a temporary folder.

    The suite must not write into the user's ~/.cache; os.environ is set directly because
    ``monkeypatch`` is function-scoped. Subprocesses started by tests inherit it.
    """
    saved = os.environ.get("QGP_CACHE_DIR")
    os.environ["QGP_CACHE_DIR"] = str(tmp_path_factory.mktemp("qgp-cache"))
    yield
    if saved is None:
        os.environ.pop("QGP_CACHE_DIR", None)
    else:
        os.environ["QGP_CACHE_DIR"] = saved
