"""Test-session settings: the on-disk cache of derived tables (hbmodel.core.cache) goes to a temporary
directory, so tests never read or fill the user's cache (subprocesses inherit the setting)."""
import os

import pytest


@pytest.fixture(autouse=True, scope="session")
def _private_cache_dir(tmp_path_factory):
    old = os.environ.get("HBMODEL_CACHE_DIR")
    os.environ["HBMODEL_CACHE_DIR"] = str(tmp_path_factory.mktemp("hbmodel_cache"))
    yield
    if old is None:
        os.environ.pop("HBMODEL_CACHE_DIR", None)
    else:
        os.environ["HBMODEL_CACHE_DIR"] = old
