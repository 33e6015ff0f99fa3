"""Simulated orientation trials (retina.readout.trials)."""

import dataclasses

import numpy as np
import pytest
from scipy.special import i0, i1

from retina.errors import InputError
from retina.readout import decode, trials
try:  # the tests folder is on sys.path (pytest rootdir-relative import)
    from test_fisher import real_signal, synthetic_signal
except ImportError:  # tests collected as a package
    from tests.test_fisher import real_signal, synthetic_signal


def test_good_compass_orients_the_group_to_the_goal():
    sig = synthetic_signal(n=30, photons=2e4, seed=1)
    dec = decode.HeadingDecoder.from_signal(sig, 360)
    res = trials.simulate_trials(sig, dec, 40, goal_deg=225.0, rng=3)
    # Derived: decode errors are ~2 deg (the Cramer-Rao bound of this retina), so departures cluster
    # at the goal: r = E cos(error) ~ 1 - sigma^2 / 2 > 0.99.
    assert res.preferred_analysis == "directional"
    assert res.rayleigh.r > 0.99
    assert abs(((res.rayleigh.mean_deg - 225.0) + 180) % 360 - 180) < 2.0
    assert res.v_test.p < 1e-6 and res.rayleigh.p < 1e-6


def test_behavioural_noise_sets_mean_vector_length():
    # Reference: scipy.special i0, i1: a von Mises of concentration k has E cos = I1(k) / I0(k);
    # decoding noise (~2 deg) lowers r by < 0.001.  500 birds: sd of r ~ 0.02; tolerance 0.06.
    sig = synthetic_signal(n=30, photons=2e4, seed=1)
    dec = decode.HeadingDecoder.from_signal(sig, 360)
    res = trials.simulate_trials(sig, dec, 500, goal_deg=10.0, behaviour_kappa=2.0, rng=5)
    assert res.rayleigh.r == pytest.approx(i1(2.0) / i0(2.0), abs=0.06)


def test_horizontal_field_gives_axial_distribution():
    # Derived: psi and psi + 180 are indistinguishable with I = 0 (even yield), so each bird goes
    # to the goal or its opposite with probability 1/2: directional r ~ 0, axial r ~ 1.
    sig = synthetic_signal(n=30, photons=2e4, inclination=0.0, seed=1)
    dec = decode.HeadingDecoder.from_signal(sig, 360)
    res = trials.simulate_trials(sig, dec, 60, goal_deg=30.0, rng=7)
    assert res.ambiguous_fraction == 1.0
    assert res.preferred_analysis == "axial"
    assert res.rayleigh.r < 0.4
    assert res.rayleigh_axial.r > 0.98
    assert abs(((res.mean_deg - 30.0) + 90) % 180 - 90) < 2.0
    assert res.v_test_axial.p < 1e-6


def test_no_information_no_orientation():
    from retina.eye import ordering

    # Derived: isotropic ordering gives a flat likelihood, so decoded headings carry no information
    # about the (uniformly random) starting headings and departures are uniform.  Fixed seed;
    # uniformity is not rejected at the 1 % level.
    sig = real_signal(ordering.Isotropic(), n_per_eye=30, photons=1e4)
    dec = decode.HeadingDecoder.from_signal(sig, 72)
    res = trials.simulate_trials(sig, dec, 40, rng=1)
    assert res.rayleigh.p > 0.01


def test_scanning_birds_orient():
    sig = real_signal(n_per_eye=60, photons=3e3)
    dec = decode.HeadingDecoder.from_signal(sig, 360, refine="parabolic")
    res = trials.simulate_trials(sig, dec, 30, goal_deg=90.0, scan_offsets_deg=[-30, 0, 30], rng=2)
    assert res.rayleigh.r > 0.95
    assert abs(((res.rayleigh.mean_deg - 90.0) + 180) % 360 - 180) < 5.0


def test_bad_input():
    sig = synthetic_signal(n=5)
    dec = decode.HeadingDecoder.from_signal(sig, 36)
    with pytest.raises(InputError, match="birds"):
        trials.simulate_trials(sig, dec, 0)
    with pytest.raises(InputError, match="starting headings"):
        trials.simulate_trials(sig, dec, 3, start_deg=[1.0, 2.0])
    with pytest.raises(InputError, match="multiples"):
        trials.simulate_trials(sig, dec, 3, scan_offsets_deg=[0.0, 5.0])
    with pytest.raises(InputError, match="sampler"):
        trials.simulate_trials(sig, dec, 3, sampler="plain")


def test_direct_and_walked_samplers_orient_alike():
    # Both samplers draw the Poisson law (tests/test_sample_split.py); here the whole experiment:
    # a good compass orients the group either way (derived as in the first test: r > 0.99).
    sig = synthetic_signal(n=30, photons=2e4, seed=1)
    dec = decode.HeadingDecoder.from_signal(sig, 360)
    for sampler in ("direct", "walked"):
        res = trials.simulate_trials(sig, dec, 40, goal_deg=225.0, rng=3, sampler=sampler)
        assert res.rayleigh.r > 0.99
