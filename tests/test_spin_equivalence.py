"""Tests of the total-spin reduction of equivalent nuclei (retina.spin.equivalence) and the
``count`` key of the spin-system schema.

References: Clebsch-Gordan decompositions (derived beside each case), the unreduced radical
Hamiltonian of retina.spin.separable.radical_operators diagonalised by numpy, and the unreduced
pair-sum method retina.spin.separable.
"""

from __future__ import annotations

import numpy as np
import pytest

from retina.errors import InputError
from retina.spin import equivalence, fast_separable, separable
from retina.spin.io import loads_system
from retina.spin.system import Nucleus, Radical, SpinSystem


@pytest.mark.parametrize("spin, n, want", [
    # Derived: 1/2 x 1/2 = 1 + 0; (1/2)^3 = 3/2 + 2 x 1/2; 1 x 1 = 2 + 1 + 0;
    # (1/2)^4 = 2 + 3 x 1 + 2 x 0 (the Catalan-triangle counts); one spin is itself.
    (0.5, 2, {1.0: 1, 0.0: 1}),
    (0.5, 3, {1.5: 1, 0.5: 2}),
    (1.0, 2, {2.0: 1, 1.0: 1, 0.0: 1}),
    (0.5, 4, {2.0: 1, 1.0: 3, 0.0: 2}),
    (1.0, 1, {1.0: 1}),
])
def test_multiplicities(spin, n, want):
    assert equivalence.multiplicities(spin, n) == want


def _sym(rng, scale=0.5):
    a = rng.normal(size=(3, 3)) * scale
    return (a + a.T) / 2


def _radical_with_groups(rng, label="A"):
    methyl = _sym(rng)
    nitro = _sym(rng)
    nuclei = (Nucleus("CH3 1", 0.5, methyl), Nucleus("N1", 1.0, nitro), Nucleus("CH3 2", 0.5, methyl),
              Nucleus("H", 0.5, _sym(rng)), Nucleus("CH3 3", 0.5, methyl.copy()), Nucleus("N2", 1.0, nitro))
    return Radical(label, nuclei=nuclei)


def test_groups_and_blocks_cover_the_radical():
    rad = _radical_with_groups(np.random.default_rng(0))
    assert equivalence.groups(rad) == [[0, 2, 4], [1, 5], [3]]
    blocks = equivalence.radical_blocks(rad)
    # Derived: J_methyl in {3/2 (x1), 1/2 (x2)}, J_N in {2, 1, 0 (x1 each)}: 6 blocks
    assert len(blocks) == 6
    assert sum(b.multiplicity * b.dimension for b in blocks) == rad.dimension == 2 * 8 * 9 * 2
    assert max(b.dimension for b in blocks) == 2 * 4 * 5 * 2


def test_block_spectra_are_the_full_spectrum():
    # Reference: numpy.linalg.eigvalsh of the unreduced radical Hamiltonian (separable.radical_operators)
    rng = np.random.default_rng(1)
    rad = _radical_with_groups(rng)
    b = np.array([0.3, -0.5, 0.8]) * 50e-6
    s_e, h_hf, zee = separable.radical_operators(rad)
    full = np.linalg.eigvalsh(h_hf + np.einsum("j,jab->ab", b @ zee, s_e))
    parts = []
    for blk in equivalence.radical_blocks(rad):
        ev = np.linalg.eigvalsh(blk.h_hf + np.einsum("j,jab->ab", b @ blk.zeeman, blk.s_e))
        parts.extend(np.repeat(ev, blk.multiplicity))
    np.testing.assert_allclose(np.sort(parts), full, rtol=0, atol=1e-6 * np.abs(full).max())


def test_reduced_fast_method_matches_the_unreduced_pair_sum():
    # Reference: retina.spin.separable on the full (unreduced) spaces, exact to rounding.
    rng = np.random.default_rng(2)
    ra = _radical_with_groups(rng, "A")
    methyl = _sym(rng)
    rb = Radical("B", nuclei=(Nucleus("a", 0.5, methyl), Nucleus("b", 0.5, methyl), Nucleus("c", 1.0, _sym(rng))))
    system = SpinSystem("grouped", (ra, rb), k_singlet=1e6, k_triplet=1e6)
    dirs = rng.normal(size=(3, 3))
    got, bound = fast_separable.singlet_start_singlet_yield(system, 50.0, dirs, return_bound=True)
    want = separable.singlet_start_singlet_yield(system, 50.0, dirs)
    assert np.all(np.abs(got - want) <= bound + 1e-13)
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-9)


_TOML = """
[pair]
name = "invented methyl pair"
[radical_a]
[[radical_a.nuclei]]
label = "CH3"
spin = 0.5
hyperfine_mT = 0.8
count = {count}
[radical_b]
[[radical_b.nuclei]]
spin = 1
hyperfine_mT = 0.3
[kinetics]
lifetime_us = 1.0
"""


def test_count_key_reads_equivalent_nuclei():
    s = loads_system(_TOML.format(count=3))
    labels = [n.label for n in s.radicals[0].nuclei]
    assert labels == ["CH3 1", "CH3 2", "CH3 3"]
    assert equivalence.groups(s.radicals[0]) == [[0, 1, 2]]
    assert loads_system(_TOML.format(count=1)).radicals[0].nuclei[0].label == "CH3"


@pytest.mark.parametrize("bad", ["0", "1.5", "true", '"3"'])
def test_bad_count_names_the_key(bad):
    with pytest.raises(InputError, match=r"radical_a\.nuclei\[0\]\.count: expected a whole number"):
        loads_system(_TOML.format(count=bad))
