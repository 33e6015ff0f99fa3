"""The TOML spin-system schema: values, conventions, round trip and error messages."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial.transform import Rotation

from retina.errors import InputError
from retina.spin.io import (
    FREE_ELECTRON_G,
    dump_system,
    load_system,
    loads_system,
    point_dipole_mT,
    systems_equal,
)
from retina.spin.system import Nucleus, Radical, Relaxation, SpinSystem

ASSETS = Path(__file__).resolve().parents[1] / "assets"

MINIMAL = """
[pair]
name = "tiny"

[radical_a]
[[radical_a.nuclei]]
label = "H"
spin = 0.5
hyperfine_mT = 0.5

[radical_b]

[kinetics]
lifetime_us = 1.0
"""


def test_example_asset_loads_with_the_documented_dimension():
    s = load_system(ASSETS / "example_pair.toml")
    # Derived: radical A = electron (2) x N (3) x H (2) x H (2) = 24, radical B = 2 x 2 = 4; pair 96.
    assert s.radicals[0].dimension == 24 and s.radicals[1].dimension == 4
    assert s.dimension == 96
    # Derived: lifetime 2 us -> k = 1 / 2e-6 s = 5e5 s^-1 for both channels.
    assert s.k_singlet == s.k_triplet == pytest.approx(5e5, rel=1e-15)
    assert s.source.endswith("example_pair.toml")
    assert s.document["pair"]["name"] == s.name


def test_defaults_of_the_minimal_file():
    s = loads_system(MINIMAL, source="mini.toml")
    assert s.initial_state == "singlet" and s.reported_yield == "singlet"
    assert s.radicals[0].label == "A" and s.radicals[1].label == "B"
    # Reference: scipy.constants CODATA free-electron g (its magnitude).
    assert s.radicals[1].g == pytest.approx(2.00231930436, abs=1e-10)
    assert s.exchange_mT == 0.0 and s.dipolar_mT is None and not s.relaxation.any
    # Derived: hyperfine_mT = 0.5 means A = 0.5 * identity.
    np.testing.assert_array_equal(s.radicals[0].nuclei[0].hyperfine_mT, 0.5 * np.eye(3))
    assert not s.radicals[0].nuclei[0].hyperfine_mT.flags.writeable


def _with_nucleus(body: str) -> str:
    return MINIMAL.replace('[[radical_a.nuclei]]\nlabel = "H"\nspin = 0.5\nhyperfine_mT = 0.5', body)


def test_principal_values_with_euler_angles_follow_the_documented_convention():
    angles = [30.0, 55.0, -10.0]
    s = loads_system(_with_nucleus(
        '[[radical_a.nuclei]]\nspin = 1\nprincipal_mT = [0.1, 0.3, 1.2]\n'
        f'orientation = {{ euler_zyz_deg = {angles} }}'))
    a = s.radicals[0].nuclei[0].hyperfine_mT
    r = Rotation.from_euler("ZYZ", angles, degrees=True).as_matrix()
    # Reference: numpy.linalg.eigh -- eigenvalues are the principal values, and the eigenvector of
    # the largest one is the third column of R (Derived: A = R diag(a) R^T => A R e3 = a3 R e3).
    w, v = np.linalg.eigh(a)
    np.testing.assert_allclose(w, [0.1, 0.3, 1.2], atol=1e-14)
    assert abs(abs(v[:, 2] @ r[:, 2]) - 1.0) < 1e-12
    # Independent check of the Euler convention: intrinsic ZYZ = R_z(alpha) R_y(beta) R_z(gamma).
    # Derived from the definition of intrinsic rotations; matrices written from the axis formulas.
    def rz(t):
        c, s_ = np.cos(np.radians(t)), np.sin(np.radians(t))
        return np.array([[c, -s_, 0], [s_, c, 0], [0, 0, 1]])

    def ry(t):
        c, s_ = np.cos(np.radians(t)), np.sin(np.radians(t))
        return np.array([[c, 0, s_], [0, 1, 0], [-s_, 0, c]])

    r_hand = rz(angles[0]) @ ry(angles[1]) @ rz(angles[2])
    np.testing.assert_allclose(a, r_hand @ np.diag([0.1, 0.3, 1.2]) @ r_hand.T, atol=1e-14)


def test_axes_rows_give_the_same_tensor_as_the_equivalent_euler_angles():
    angles = [-40.0, 120.0, 75.0]
    r = Rotation.from_euler("ZYZ", angles, degrees=True).as_matrix()
    rows = [[float(x) for x in row] for row in r.T]  # principal axes as rows
    a_euler = loads_system(_with_nucleus(
        f'[[radical_a.nuclei]]\nspin = 0.5\nprincipal_mT = [0.2, -0.4, 0.9]\n'
        f'orientation = {{ euler_zyz_deg = {angles} }}')).radicals[0].nuclei[0].hyperfine_mT
    a_axes = loads_system(_with_nucleus(
        f'[[radical_a.nuclei]]\nspin = 0.5\nprincipal_mT = [0.2, -0.4, 0.9]\n'
        f'orientation = {{ axes = {rows} }}')).radicals[0].nuclei[0].hyperfine_mT
    # Derived: both forms describe the same principal frame, so the tensors agree to rounding.
    np.testing.assert_allclose(a_axes, a_euler, atol=1e-14)


def test_point_dipole_magnitude_and_shape():
    # From memory: the electron-electron dipolar coupling constant is 52.04 MHz nm^3, i.e.
    # 52.04 / 28.025 = 1.857 mT nm^3 (28.025 MHz/mT: CODATA electron gyromagnetic ratio / 2 pi,
    # scipy.constants).
    d = point_dipole_mT(1.0, [0.0, 0.0, 1.0])
    np.testing.assert_allclose(np.diag(d), [1.857, 1.857, -2 * 1.857], rtol=2e-3)
    # Derived: (I - 3 n n^T) is traceless with eigenvalues (1, 1, -2) and eigenvector n for -2;
    # the coupling scales as r^-3.
    n = np.array([1.0, 2.0, -2.0])
    d2 = point_dipole_mT(2.0, n)
    assert abs(np.trace(d2)) < 1e-15
    np.testing.assert_allclose(d2 @ (n / 3), -2 * (1.857 / 8) * (n / 3), rtol=2e-3)
    s = loads_system(MINIMAL + '\n[coupling]\ndipolar = { distance_nm = 2.0, direction = [1.0, 2.0, -2.0] }\n')
    np.testing.assert_array_equal(s.dipolar_mT, d2)
    assert s.electron_coupled


def test_rates_relaxation_and_states():
    s = loads_system(MINIMAL.replace("lifetime_us = 1.0", "k_singlet_per_s = 2e6\nk_triplet_per_s = 0.0")
                     + '\n[relaxation]\nrandom_field_per_s = [1e5, 2e5]\nst_dephasing_per_s = 3e4\n')
    assert (s.k_singlet, s.k_triplet) == (2e6, 0.0)
    assert s.relaxation == Relaxation(random_field=(1e5, 2e5), st_dephasing=3e4)
    s2 = loads_system(MINIMAL + '\n[relaxation]\nrandom_field_per_s = 4e5\n')
    assert s2.relaxation.random_field == (4e5, 4e5)


def test_example_round_trips_exactly():
    s = load_system(ASSETS / "example_pair.toml")
    text = dump_system(s)
    back = loads_system(text, source="dumped.toml")
    # common practice, no source: a canonical dump must load back to the same values bit for bit.
    assert systems_equal(s, back)
    assert dump_system(back) == text


_floats = st.floats(min_value=-50.0, max_value=50.0, allow_nan=False, allow_infinity=False)
_tensor = st.lists(st.lists(_floats, min_size=3, max_size=3), min_size=3, max_size=3)
# g tensors inside the schema's physical range (entries within +/- 20, trace / 3 in [0.1, 20])
_g_tensor = st.lists(st.lists(st.floats(min_value=-1.0, max_value=1.0), min_size=3, max_size=3),
                     min_size=3, max_size=3).map(lambda t: (2.0 * np.eye(3) + np.array(t)).tolist())


@settings(max_examples=40, deadline=None)
@given(
    tensors=st.lists(_tensor, min_size=0, max_size=3),
    spins=st.lists(st.integers(min_value=1, max_value=7), min_size=3, max_size=3),
    g_tensor=st.one_of(st.none(), _g_tensor),
    exchange=_floats,
    dipolar=st.one_of(st.none(), _tensor),
    k_s=st.floats(min_value=1e3, max_value=1e9),
    k_t=st.floats(min_value=0.0, max_value=1e9),
    rf=st.tuples(st.floats(min_value=0.0, max_value=1e7), st.floats(min_value=0.0, max_value=1e7)),
    states=st.tuples(st.sampled_from(["singlet", "triplet"]), st.just("singlet")),
)
def test_random_systems_round_trip(tensors, spins, g_tensor, exchange, dipolar, k_s, k_t, rf, states):
    def ro(x):
        a = np.array(x, dtype=float)
        a.flags.writeable = False
        return a

    nuclei = tuple(Nucleus(f"n{i}", spins[i] / 2, ro(t)) for i, t in enumerate(tensors))
    rad_a = Radical("A", g=2.0031, nuclei=nuclei)
    rad_b = (Radical("B", g=float(np.trace(g_tensor)) / 3.0, g_tensor=ro(g_tensor)) if g_tensor is not None
             else Radical("B", g=2.0))
    system = SpinSystem(
        name="random", radicals=(rad_a, rad_b), exchange_mT=exchange,
        dipolar_mT=None if dipolar is None else ro(dipolar), k_singlet=k_s, k_triplet=k_t,
        relaxation=Relaxation(random_field=rf, st_dephasing=0.0), initial_state=states[0],
        reported_yield=states[1],
    )
    # common practice, no source: the round trip is exact for any finite values.
    assert systems_equal(system, loads_system(dump_system(system)))


# ---------------------------------------------------------------------------------- errors

def _err(text: str) -> InputError:
    with pytest.raises(InputError) as info:
        loads_system(text, source="bad.toml")
    return info.value


@pytest.mark.parametrize(
    "old, new, key, pattern",
    [
        ("spin = 0.5", "spin = 0.7", "radical_a.nuclei[0].spin", "positive multiple of 1/2"),
        ("spin = 0.5", "spin = -1", "radical_a.nuclei[0].spin", "positive multiple of 1/2"),
        ("spin = 0.5", "spin = 0", "radical_a.nuclei[0].spin", "positive multiple of 1/2"),
        ("spin = 0.5", 'spin = "half"', "radical_a.nuclei[0].spin", "got the string 'half'"),
        ("spin = 0.5", "spin = true", "radical_a.nuclei[0].spin", "got a boolean"),
        ("spin = 0.5\n", "", "radical_a.nuclei[0].spin", "missing"),
        ("hyperfine_mT = 0.5", "hyperfine_mT = [[1, 0, 0], [0, 1, 0]]", "radical_a.nuclei[0].hyperfine_mT",
         "3x3.*got 2 rows"),
        ("hyperfine_mT = 0.5", "hyperfine_mT = [[1, 0], [0, 1], [0, 0]]", "radical_a.nuclei[0].hyperfine_mT[0]",
         "3x3.*row of length 2"),
        ("hyperfine_mT = 0.5", "hyperfine_mT = [[1, 0, 0], [0, 1, 0], [0, 0, nan]]",
         "radical_a.nuclei[0].hyperfine_mT[2][2]", "finite"),
        ("hyperfine_mT = 0.5", "principal_mT = [1, 2, 3]\norientation = { axes = [[1, 0, 0], [0, 1, 0], [0, 1, 1]] }",
         "radical_a.nuclei[0].orientation.axes", "orthonormal"),
        ("hyperfine_mT = 0.5", "principal_mT = [1, 2]", "radical_a.nuclei[0].principal_mT", "array of 3 numbers"),
        ("hyperfine_mT = 0.5", "principal_mT = [1, 2, 3]\norientation = { euler = [0, 0, 0] }",
         "radical_a.nuclei[0].orientation.euler", "did you mean 'euler_zyz_deg'"),
        ("hyperfine_mT = 0.5", "hyperfine_mT = 0.5\nprincipal_mT = [1, 2, 3]", "radical_a.nuclei[0].principal_mT",
         "not both"),
        ("hyperfine_mT = 0.5", "", "radical_a.nuclei[0].hyperfine_mT", "missing"),
        ("hyperfine_mT = 0.5", "hyperfin_mT = 0.5", "radical_a.nuclei[0].hyperfin_mT", "did you mean 'hyperfine_mT'"),
        ("lifetime_us = 1.0", "lifetime_us = -1.0", "kinetics.lifetime_us", "> 0"),
        ("lifetime_us = 1.0", "k_singlet_per_s = -5.0\nk_triplet_per_s = 1e6", "kinetics.k_singlet_per_s", ">= 0"),
        ("lifetime_us = 1.0", "k_singlet_per_s = 1e6", "kinetics.k_triplet_per_s", "missing"),
        ("lifetime_us = 1.0", "k_singlet_per_s = 0\nk_triplet_per_s = 1e6", "kinetics.k_singlet_per_s",
         "zero everywhere"),
        ("lifetime_us = 1.0", "lifetime_us = 1.0\nk_singlet_per_s = 1e6", "kinetics.k_singlet_per_s", "not both"),
        ('name = "tiny"', 'name = "tiny"\ninitial_state = "singlett"', "pair.initial_state", "did you mean 'singlet'"),
        ('name = "tiny"', "name = 3", "pair.name", "expected a string"),
        ('name = "tiny"', "", "pair.name", "missing"),
        ("[radical_b]", "[radical_c]", "radical_c", "did you mean 'radical_b'"),
        ("[radical_b]", "[radical_b]\ng = -2.0", "radical_b.g", "> 0"),
        ("[kinetics]", "[kinetic]", "kinetic", "did you mean 'kinetics'"),
    ],
)
def test_each_wrong_value_gets_one_error_naming_file_and_key(old, new, key, pattern):
    assert old in MINIMAL
    exc = _err(MINIMAL.replace(old, new, 1))
    assert exc.source == "bad.toml"
    assert exc.key == key, str(exc)
    assert re.search(pattern, exc.detail), exc.detail
    assert str(exc).startswith(f"bad.toml: {key}: ")


def test_relaxation_and_coupling_errors():
    exc = _err(MINIMAL + "\n[relaxation]\nrandom_field_per_s = [1e5, -1.0]\n")
    assert exc.key == "relaxation.random_field_per_s[1]" and ">= 0" in exc.detail
    exc = _err(MINIMAL + "\n[relaxation]\nrandom_field_per_s = [1e5, 1e5, 1e5]\n")
    assert exc.key == "relaxation.random_field_per_s" and "array of 2" in exc.detail
    exc = _err(MINIMAL + "\n[coupling]\ndipolar = { distance_nm = 0.0, direction = [0, 0, 1] }\n")
    assert exc.key == "coupling.dipolar.distance_nm"
    exc = _err(MINIMAL + "\n[coupling]\ndipolar = { distance_nm = 2.0, direction = [0, 0, 0] }\n")
    assert exc.key == "coupling.dipolar.direction"
    exc = _err(MINIMAL + "\n[coupling]\ndipolar = { distance_nm = 2.0 }\n")
    assert exc.key == "coupling.dipolar.direction" and "missing" in exc.detail
    exc = _err(MINIMAL + "\n[coupling]\nexchange = 0.1\n")
    assert exc.key == "coupling.exchange" and "did you mean 'exchange_mT'" in exc.detail


def test_missing_required_tables():
    exc = _err(MINIMAL.replace("[kinetics]\nlifetime_us = 1.0", ""))
    assert exc.key == "kinetics" and "missing" in exc.detail
    exc = _err(MINIMAL.replace("[radical_b]", ""))
    assert exc.key == "radical_b"


def test_toml_syntax_error_names_the_line():
    text = MINIMAL.replace("spin = 0.5", "spin = = 0.5")
    line = text.splitlines().index("spin = = 0.5") + 1
    exc = _err(text)
    assert "TOML syntax error" in exc.detail
    assert f"line {line}" in exc.detail


def test_files_missing_or_not_text(tmp_path):
    with pytest.raises(InputError, match="not found"):
        load_system(tmp_path / "nope.toml")
    bad = tmp_path / "binary.toml"
    bad.write_bytes(b"\xff\xfe\x00junk")
    with pytest.raises(InputError, match="binary.toml.*UTF-8"):
        load_system(bad)
    wrong = tmp_path / "wrong.toml"
    wrong.write_text(MINIMAL.replace("spin = 0.5", "spin = 1.25"))
    with pytest.raises(InputError) as info:
        load_system(wrong)
    assert str(wrong) in str(info.value) and "radical_a.nuclei[0].spin" in str(info.value)


def test_a_byte_order_mark_is_accepted(tmp_path):
    # Common practice, no source: editors on some systems save UTF-8 with a leading byte-order mark
    # (EF BB BF); it is not part of the TOML text and must not become a syntax error at line 1.
    marked = tmp_path / "marked.toml"
    marked.write_bytes(b"\xef\xbb\xbf" + MINIMAL.encode("utf-8"))
    assert systems_equal(load_system(marked), loads_system(MINIMAL))


def test_free_electron_g_comes_from_codata():
    # Reference: scipy.constants CODATA "electron g factor" = -2.00231930436...
    assert FREE_ELECTRON_G == pytest.approx(2.00231930436, abs=1e-10)
