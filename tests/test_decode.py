"""Maximum-likelihood heading decoding (retina.readout.decode)."""

import dataclasses

import numpy as np
import pytest

from retina.errors import InputError
from retina.readout import decode, fisher
try:  # the tests folder is on sys.path (pytest rootdir-relative import)
    from test_fisher import synthetic_signal
except ImportError:  # tests collected as a package
    from tests.test_fisher import synthetic_signal


def test_error_approaches_cramer_rao_bound_at_high_counts():
    # Source: the maximum-likelihood estimator is asymptotically efficient (Cramer-Rao; e.g. Kay,
    # Estimation Theory, 1993, sec. 7.5), so at ~1e4 counts per receptor the error variance should
    # match 1 / I.  Tolerance 10 %: the sd of a variance estimated from 3000 near-Gaussian errors is
    # sqrt(2 / 3000) = 2.6 %, plus a few % of higher-order (non-asymptotic) terms.  Fixed seed.
    sig = synthetic_signal(n=30, photons=2e4, inclination=60, seed=1)
    crb = fisher.heading_information(sig, [70.0]).bound_deg[0]
    dec = decode.HeadingDecoder.from_signal(sig, 360)
    mc = decode.monte_carlo(sig, dec, 70.0, 3000, rng=11)
    assert np.var(mc.errors_deg) / crb ** 2 == pytest.approx(1.0, abs=0.10)
    assert abs(mc.summary["bias_deg"]) < 4 * crb / np.sqrt(3000)
    assert mc.ambiguous_fraction == 0.0


def test_error_scales_as_inverse_sqrt_photons():
    # Derived: the bound scales as photons^-1/2 (I is linear in the level); the decoder follows.
    sig = synthetic_signal(n=30, photons=5e3, seed=1)
    errs = []
    for ph in (5e3, 8e4):
        s = dataclasses.replace(sig, photons=ph)
        mc = decode.monte_carlo(s, decode.HeadingDecoder.from_signal(s, 360), 200.0, 2000, rng=5)
        errs.append(mc.summary["rms_deg"])
    # 16x photons -> 4x smaller error; tolerance 10 % (two estimates with ~1.6 % sd each, plus bias).
    assert errs[0] / errs[1] == pytest.approx(4.0, rel=0.10)


def test_refinements_agree_with_brent():
    # Reference: scipy.optimize.minimize_scalar (bounded Brent) on the exact likelihood through the
    # forward model, against the Hermite-Newton and parabolic refinements on the grid.
    sig = synthetic_signal(n=30, photons=2e4, seed=1)
    counts = sig.sample([123.4], rng=2, size=20)[:, 0, :]
    ref = decode.HeadingDecoder.from_signal(sig, 360, refine="brent").decode(counts).heading_deg
    her = decode.HeadingDecoder.from_signal(sig, 360).decode(counts).heading_deg
    par = decode.HeadingDecoder.from_signal(sig, 360, refine="parabolic").decode(counts).heading_deg
    # Hermite interpolation of the log-likelihood errs by O(h^4): ~1e-4 deg at h = 1 deg.
    np.testing.assert_allclose(her, ref, atol=5e-4)
    # The parabola ignores the cubic term of the log-likelihood: about 0.01 deg at h = 1 deg.
    np.testing.assert_allclose(par, ref, atol=0.05)
    # The same with the gain profiled out.
    ref_g = decode.HeadingDecoder.from_signal(sig, 360, refine="brent", gain="free").decode(counts)
    her_g = decode.HeadingDecoder.from_signal(sig, 360, gain="free").decode(counts)
    np.testing.assert_allclose(her_g.heading_deg, ref_g.heading_deg, atol=5e-4)


def test_grid_loglik_matches_forward_model():
    sig = synthetic_signal(n=15, photons=100.0)
    dec = decode.HeadingDecoder.from_signal(sig, 72)
    counts = sig.sample([10.0], rng=0, size=3)[:, 0, :]
    # Derived: the matrix-product form equals the direct sum at the grid headings.
    np.testing.assert_allclose(dec.loglik(counts), dec.loglik_at(counts, dec.headings_deg), rtol=1e-12)


def test_horizontal_field_is_flagged_ambiguous():
    # Derived: with I = 0 and a level head, b_head(psi + 180) = -b_head(psi) and the yield is even,
    # so psi and psi + 180 have identical likelihoods; the decoder reports both candidates.
    sig = synthetic_signal(n=30, photons=2e4, inclination=0.0, seed=1)
    dec = decode.HeadingDecoder.from_signal(sig, 360)
    lam = sig.expected([40.0, 220.0])
    np.testing.assert_allclose(lam[0], lam[1], rtol=1e-12)
    res = decode.monte_carlo(sig, dec, 40.0, 50, rng=4).estimates
    assert np.all(res.ambiguous)
    est = res[0]
    assert est.ambiguous and len(est.candidates_deg) == 2
    gap = abs((est.candidates_deg[0] - est.candidates_deg[1]) % 360 - 180)
    assert gap < 0.1
    # Axial errors are small even though directional ones are not.
    errs = decode.error_summary(np.array(res.heading_deg) - 40.0, axial=True)
    assert errs["rms_deg"] < 10.0
    # With a dipping field the same retina is not ambiguous.
    dip = dataclasses.replace(sig, inclination_deg=65.0)
    r2 = decode.monte_carlo(dip, decode.HeadingDecoder.from_signal(dip, 360), 40.0, 50, rng=4)
    assert r2.ambiguous_fraction == 0.0


def test_near_horizontal_field_at_low_light_is_often_ambiguous():
    # Derived: at I = 2 deg the psi + 180 image differs only through the small vertical component,
    # so at low counts the second peak is often within the ratio; at I = 60 deg it rarely is (at
    # these low counts a broad likelihood can still show a side peak now and then).
    sig = synthetic_signal(n=30, photons=200.0, inclination=2.0, seed=1)
    mc = decode.monte_carlo(sig, decode.HeadingDecoder.from_signal(sig, 360), 70.0, 200, rng=3)
    assert mc.ambiguous_fraction > 0.5
    amb = mc.estimates[int(np.flatnonzero(mc.estimates.ambiguous)[0])]
    assert abs(abs(((amb.candidates_deg[0] - amb.candidates_deg[1]) + 180) % 360 - 180) - 180) < 20
    steep = dataclasses.replace(sig, inclination_deg=60.0)
    mc2 = decode.monte_carlo(steep, decode.HeadingDecoder.from_signal(steep, 360), 70.0, 200, rng=3)
    assert mc2.ambiguous_fraction < 0.1


def test_free_gain_decoder_copes_with_unknown_light_level():
    # Derived: with the gain profiled out the estimator is efficient for the gain-Schur information;
    # a known-gain decoder fed 1.5x brighter data is biased.  Tolerance as in the CRB test.
    sig = synthetic_signal(n=30, photons=2e4, seed=1)
    truth = dataclasses.replace(sig, gain=1.5)
    free = decode.HeadingDecoder.from_signal(sig, 360, gain="free")
    mc = decode.monte_carlo(truth, free, 70.0, 2000, rng=8)
    crb_free = fisher.heading_information(truth, [70.0], nuisance="gain").bound_deg[0]
    assert np.var(mc.errors_deg) / crb_free ** 2 == pytest.approx(1.0, abs=0.12)
    assert abs(mc.summary["bias_deg"]) < 4 * crb_free / np.sqrt(2000)


def test_error_summary_values():
    # Derived: errors {-2, 2, 178} wrap as given; reversal fraction 1/3; rms sqrt((4+4+178^2)/3).
    s = decode.error_summary([-2.0, 2.0, 178.0])
    assert s["reversal_fraction"] == pytest.approx(1 / 3)
    assert s["rms_deg"] == pytest.approx(np.sqrt((8 + 178 ** 2) / 3))
    assert decode.error_summary([-2.0, 2.0, 178.0], axial=True)["rms_deg"] == pytest.approx(2.0)


def test_rms_standard_error_matches_the_spread_of_replicate_rms_values():
    # Derived (delta method, see rms_standard_error): for Gaussian errors of sd sigma,
    # Var(e^2) = 2 sigma^4, so SE(rms) = sqrt(2 sigma^4 / n) / (2 sigma) = sigma / sqrt(2 n).
    # Independent check: the sd of the rms over 2000 independent replicates of n = 60 errors.
    # Tolerance 10 %: the sd of 2000 replicates is itself known to about 1.6 %, and the delta method
    # is first order in 1 / n (a few % at n = 60).  Fixed seed.
    rng = np.random.default_rng(5)
    sigma, n = 3.0, 60
    e = rng.normal(0.0, sigma, (2000, n))
    rms = np.sqrt(np.mean(e ** 2, axis=1))
    se = np.array([decode.rms_standard_error(x) for x in e])
    assert np.mean(se) == pytest.approx(sigma / np.sqrt(2 * n), rel=0.05)
    assert np.std(rms, ddof=1) == pytest.approx(np.mean(se), rel=0.10)
    assert decode.error_summary(e[0])["rms_se_deg"] == pytest.approx(se[0])
    assert np.isnan(decode.rms_standard_error([1.0])) and decode.rms_standard_error([0.0, 0.0]) == 0.0


def test_bad_input():
    sig = synthetic_signal(n=5)
    dec = decode.HeadingDecoder.from_signal(sig, 36)
    with pytest.raises(InputError, match="counts"):
        dec.decode(np.ones((2, 6)))
    with pytest.raises(InputError, match="counts"):
        dec.decode(-np.ones(5))
    with pytest.raises(InputError, match="equally spaced"):
        decode.HeadingDecoder([0, 10, 50], np.ones((3, 2)))
    with pytest.raises(InputError, match="gain"):
        decode.HeadingDecoder.from_signal(sig, 36, gain="maybe")


def test_scan_decoding_single_pose_equals_static_and_sums_over_poses():
    sig = synthetic_signal(n=20, photons=500.0)
    dec = decode.HeadingDecoder.from_signal(sig, 120, refine="parabolic")
    counts = sig.sample([50.0], rng=1, size=10)[:, 0, :]
    # Derived: one pose with scale 1 is the static likelihood.
    a = dec.decode_scan(counts[:, None, :], [0.0], scale=1.0)
    b = dec.decode(counts)
    np.testing.assert_allclose(a.heading_deg, b.heading_deg, atol=1e-9)
    # Derived: the scan likelihood is the sum of per-pose likelihoods at psi + offset; check at one
    # grid heading against the forward-model likelihood evaluated directly.
    off = np.array([-30.0, 0.0, 60.0])
    sc = sig.sample(50.0 + off, rng=2)[None]       # (1, 3, N), full budget per pose (scale 1)
    res = dec.decode_scan(sc, off, scale=1.0)
    grid = dec.headings_deg
    direct = sum(dec.loglik_at(sc[0, p], grid + off[p])[0] for p in range(3))
    j = int(np.argmax(direct))
    assert res.loglik[0] == pytest.approx(direct[j], rel=1e-12)
    # With 100x the light the scan estimate lands within a few bounds of the truth.
    bright = dataclasses.replace(sig, photons=5e4)
    r2 = dec.decode_scan(bright.sample(50.0 + off, rng=3)[None], off, scale=100.0)
    crb = fisher.heading_information(bright, [50.0]).bound_deg[0]
    assert abs(((r2.heading_deg[0] - 50.0) + 180) % 360 - 180) < 5 * crb


def test_unmodelled_world_texture_adds_error():
    # Common practice, no source: a scene contrast the decoder's model lacks is a model mismatch,
    # which biases the likelihood; with 20 % log-contrast the errors exceed the clean bound clearly.
    from retina.signal.light import SceneTexture

    sig = synthetic_signal(n=30, photons=2e4, seed=1)
    crb = fisher.heading_information(sig, [70.0]).bound_deg[0]
    dec = decode.HeadingDecoder.from_signal(sig, 360)
    textured = dataclasses.replace(sig, texture=SceneTexture(contrast=0.2, attached="world", seed=3))
    mc = decode.monte_carlo(textured, dec, 70.0, 300, rng=2)
    assert mc.summary["rms_deg"] > 2.0 * crb
    # A decoder that knows the texture does better (it also uses it as a visual cue); parabolic
    # refinement, since a world-fixed texture has no magnetic heading derivative here.
    own = decode.HeadingDecoder.from_signal(textured, 360)
    assert own.refine == "parabolic"
    mc2 = decode.monte_carlo(textured, own, 70.0, 300, rng=2)
    assert mc2.summary["rms_deg"] < mc.summary["rms_deg"]



@pytest.mark.parametrize("gain", ["known", "free"])
def test_scan_decoding_blocks_match_a_per_pose_reference(gain):
    # Reference: the scan log-likelihood written out pose by pose in this test from the module
    # docstring's formula (counts times log lam at psi + o_p, minus the split budget, or the profiled
    # gain), with np.roll for the grid shift; decoded in several blocks (chunk=7) and in one.
    sig = synthetic_signal(n=25, photons=400.0, seed=4)
    dec = decode.HeadingDecoder.from_signal(sig, 90, gain=gain, refine="parabolic")
    off = np.array([-40.0, -12.0, 0.0, 24.0, 80.0])
    c = np.asarray(sig.sample(130.0 + off, rng=5, size=23), float)          # (23, 5, N)
    P = off.size
    sh = np.round(off / dec.step_deg).astype(int)
    loglam = np.log(np.maximum(dec.lam, 1e-300))                              # (G, N)
    ll = sum(np.roll(c[:, p] @ loglam.T, -sh[p], axis=1) for p in range(P))
    tot = sum(np.roll(dec.lam.sum(axis=1) / P, -s) for s in sh)
    ll = ll - (tot[None, :] if gain == "known" else c.sum(axis=(1, 2))[:, None] * np.log(tot)[None, :])
    res = dec.decode_scan(c, off, chunk=7)
    np.testing.assert_allclose(res.loglik, ll.max(axis=1), rtol=1e-12)
    j = np.argmax(ll, axis=1)
    d = ((res.heading_deg - dec.headings_deg[j] + 180.0) % 360.0) - 180.0
    assert np.all(np.abs(d) <= 0.5 * dec.step_deg + 1e-9)   # parabolic refinement stays in the cell
    # Blocks change the BLAS summation order, so the refined headings agree to rounding, not bit for bit.
    np.testing.assert_allclose(dec.decode_scan(c, off).heading_deg, res.heading_deg, rtol=0, atol=1e-8)


def test_sparse_counts_product_equals_the_dense_product():
    # counts_product multiplies mostly-zero counts as a sparse matrix; reference: numpy's dense
    # product of the same arrays (equal up to rounding), and decoding dim head-scan counts gives
    # the same headings either way.
    from retina.readout import decode as D

    rng = np.random.default_rng(8)
    m = rng.normal(size=(400, 36))
    c = rng.poisson(0.01, size=(300, 400)).astype(float)
    assert np.count_nonzero(c) < D.SPARSE_DENSITY * c.size        # takes the sparse path
    np.testing.assert_allclose(D.counts_product(c, m), c @ m, rtol=1e-12, atol=1e-12)
    dense = rng.poisson(3.0, size=(20, 400)).astype(float)
    np.testing.assert_array_equal(D.counts_product(dense, m), dense @ m)   # the dense path is numpy's
    G, N, P = 72, 300, 5
    h = np.arange(G) * 360.0 / G
    ph = rng.uniform(0, 2 * np.pi, N)
    lam1 = 1.0 + 0.3 * np.cos(np.radians(h)[:, None] + ph[None, :])
    dec = D.HeadingDecoder(h, lam1, gain="known", refine="parabolic")
    off = np.array([-10.0, -5.0, 0.0, 5.0, 10.0])
    counts = rng.poisson(0.004, size=(200, P, N)).astype(float)
    got = dec.decode_scan(counts, off)
    old, D.SPARSE_DENSITY = D.SPARSE_DENSITY, 0.0                  # force the dense product
    try:
        ref = dec.decode_scan(counts, off)
    finally:
        D.SPARSE_DENSITY = old
    np.testing.assert_allclose(got.heading_deg, ref.heading_deg, atol=1e-9)
    np.testing.assert_array_equal(got.ambiguous, ref.ambiguous)


@pytest.mark.parametrize("gain", ["known", "free"])
def test_scaled_decoder_equals_a_decoder_built_at_that_light(gain):
    # Derived: log(f lam) = log f + log lam and (f dlam) / (f lam) = dlam / lam, so a decoder scaled
    # from one photon decodes like one built from f times the expected counts.  Reference: the
    # decoder built directly (its own logarithms and divisions), single looks and head scans.
    sig = synthetic_signal(n=30, photons=1.0, seed=3)
    h = np.arange(360.0)
    lam, dlam = sig.expected_and_derivative(h)
    base = decode.HeadingDecoder(h, lam, dlam, gain=gain)
    rng = np.random.default_rng(4)
    offs = np.array([-20.0, 0.0, 20.0])
    for f in (3.0, 300.0, 3e4):
        direct = decode.HeadingDecoder(h, f * lam, f * dlam, gain=gain)
        scaled = base.scaled(f)
        counts = rng.poisson(f * lam[[17, 140, 301]]).astype(float)
        a, b = direct.decode(counts), scaled.decode(counts)
        np.testing.assert_allclose(b.heading_deg, a.heading_deg, rtol=0, atol=1e-8)
        np.testing.assert_allclose(b.loglik, a.loglik, rtol=1e-12, atol=1e-8)
        sc = rng.poisson(f * lam[(np.array([50, 200])[:, None] + offs[None, :].astype(int)) % 360] / 3)
        np.testing.assert_allclose(scaled.decode_scan(sc.astype(float), offs).heading_deg,
                                   direct.decode_scan(sc.astype(float), offs).heading_deg, rtol=0, atol=1e-8)
    with pytest.raises(InputError, match="positive finite"):
        base.scaled(0.0)
    with pytest.raises(InputError, match="brent"):
        decode.HeadingDecoder.from_signal(sig, 36, refine="brent").scaled(2.0)


def test_grid_model_expected_counts_scale_the_one_photon_model():
    # Reference: the signal model's own forward evaluation at that light level (SignalModel.expected,
    # every receptor's harmonics at each heading); the grid model interpolates the model evaluated
    # once at one photon and scales it (derived: expected counts are proportional to the photons).
    from retina.stages._common import GridModel

    sig = synthetic_signal(n=30, photons=1.0, seed=3)
    m = GridModel(sig, 2, "known")          # the synthetic yield a + c (axis . b)^2 has degree 2
    h = np.array([3.7, 91.2, 250.0])
    for ph in (1.0, 30.0, 1e5):
        ref = dataclasses.replace(sig, photons=ph).expected(h)
        np.testing.assert_allclose(m.expected(h, ph), np.maximum(ref, 0.0), rtol=1e-9, atol=1e-12 * ph)
