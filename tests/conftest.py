"""Suite-wide settings: one BLAS thread, and every test run gets its own yield-function cache folder, so no test reads a
stale cache from an earlier run or writes into the user's ~/.cache."""

import os

# One BLAS thread: on the 2-core machine, threaded BLAS on the many small matrices of these tests
# was measured to be several times slower than one thread (common practice for small problems).
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import pytest  # noqa: E402


@pytest.fixture(autouse=True, scope="session")
def _private_yield_cache(tmp_path_factory):
    old = os.environ.get("RETINA_CACHE")
    os.environ["RETINA_CACHE"] = str(tmp_path_factory.mktemp("retina-cache"))
    yield
    if old is None:
        os.environ.pop("RETINA_CACHE", None)
    else:
        os.environ["RETINA_CACHE"] = old
