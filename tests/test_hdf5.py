"""The native HDF5 yield-function file: exact round trip, atomic writes, clear errors."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pytest

from retina import sphere
from retina.errors import InputError
from retina.io import hdf5
from retina.spin.io import dump_system, load_system
from retina.yieldfn import BASIS, YieldFunction

ASSETS = Path(__file__).resolve().parents[1] / "assets"


def sample(L=16, seed=5):
    rng = np.random.default_rng(seed)
    c = rng.normal(size=sphere.n_coeffs(L)) * 1e-3
    c[0] = 0.6
    c[-1] = 1.0 / 3.0  # a value with a long binary expansion
    prov = {
        "kind": "test",
        "spin_system_toml": dump_system(load_system(ASSETS / "example_pair.toml")),
        "field_uT": 50.0,
        "degree": L,
        "flag": True,
        "small": 5e-324,  # the smallest subnormal survives too
        "unicode": "µT – ±",
        "versions": {"numpy": np.__version__, "nested": {"depth": 2}},
    }
    return YieldFunction(c, L, prov, fit_error=2.5e-7)


def test_round_trip_is_bit_identical(tmp_path):
    yf = sample()
    path = yf.save(tmp_path / "yf.h5")
    back = YieldFunction.load(path)
    # common practice, no source: a native format must give back exactly what was written.
    assert np.array_equal(back.coeffs, yf.coeffs)
    assert back.coeffs.tobytes() == yf.coeffs.tobytes()
    assert back.degree == yf.degree and back.fit_error == yf.fit_error
    assert back.provenance == yf.provenance
    assert type(back.provenance["degree"]) is int and type(back.provenance["flag"]) is bool
    assert type(back.provenance["field_uT"]) is float


def test_layout_is_as_documented(tmp_path):
    yf = sample(L=4)
    yf.save(tmp_path / "yf.h5")
    with h5py.File(tmp_path / "yf.h5", "r") as f:
        assert f.attrs["format"] == hdf5.FORMAT and f.attrs["format_version"] == 1
        ds = f["yield_function/coeffs"]
        assert ds.shape == (15,) and ds.dtype == np.dtype("<f8")
        assert ds.attrs["degree"] == 4 and ds.attrs["basis"] == BASIS
        # the long TOML text is a dataset, short strings are attributes
        assert isinstance(f["provenance/spin_system_toml"], h5py.Dataset)
        assert f["provenance"].attrs["kind"] == "test"
        assert f["provenance/versions/nested"].attrs["depth"] == 2


def test_no_overwrite_without_force_and_no_partial_file(tmp_path):
    yf = sample(L=2)
    out = tmp_path / "yf.h5"
    yf.save(out)
    with pytest.raises(InputError, match="exists already"):
        yf.save(out)
    yf.save(out, force=True)
    # a failing write (unsupported provenance type) leaves the old file intact and no temporary file
    bad = YieldFunction(yf.coeffs, 2, {"array": np.zeros(3)})
    before = out.read_bytes()
    with pytest.raises(ValueError, match="provenance entry array"):
        bad.save(out, force=True)
    assert out.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["yf.h5"]
    with pytest.raises(InputError, match="does not exist"):
        yf.save(tmp_path / "missing-folder" / "x.h5")


def test_foreign_files_get_clear_errors(tmp_path):
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f["values"] = np.zeros(10)
    with pytest.raises(InputError) as info:
        YieldFunction.load(other)
    assert str(other) in str(info.value) and "/yield_function/coeffs" in str(info.value)

    text = tmp_path / "notes.h5"
    text.write_text("hello")
    with pytest.raises(InputError, match="not an HDF5 file"):
        YieldFunction.load(text)
    with pytest.raises(InputError, match="not found"):
        YieldFunction.load(tmp_path / "absent.h5")

    wrong_basis = tmp_path / "basis.h5"
    with h5py.File(wrong_basis, "w") as f:
        ds = f.create_dataset("yield_function/coeffs", data=np.zeros(6))
        ds.attrs["degree"] = 2
        ds.attrs["basis"] = "complex-sh"
    with pytest.raises(InputError, match="basis is 'complex-sh'"):
        YieldFunction.load(wrong_basis)

    wrong_len = tmp_path / "len.h5"
    with h5py.File(wrong_len, "w") as f:
        ds = f.create_dataset("yield_function/coeffs", data=np.zeros(7))
        ds.attrs["degree"] = 2
        ds.attrs["basis"] = BASIS
    with pytest.raises(InputError, match="does not match degree 2"):
        YieldFunction.load(wrong_len)
