"""Suite-wide settings: every test run gets its own yield-function cache folder, so no test reads a
stale cache from an earlier run or writes into the user's ~/.cache."""

import os

import pytest


@pytest.fixture(autouse=True, scope="session")
def _private_yield_cache(tmp_path_factory):
    old = os.environ.get("RETINA_CACHE")
    os.environ["RETINA_CACHE"] = str(tmp_path_factory.mktemp("retina-cache"))
    yield
    if old is None:
        os.environ.pop("RETINA_CACHE", None)
    else:
        os.environ["RETINA_CACHE"] = old
