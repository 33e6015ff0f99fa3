"""Tests of the separable RF method (retina.spin.rf_separable) and the broadband response
(retina.spin.broadband).

Independent references: the whole-pair Floquet-Liouville solver (retina.spin.rf, itself checked
against time integration in test_spin_rf.py); a direct time integration written here from scratch
(numpy Kronecker products, scipy.integrate.solve_ivp) that shares no code with the package, for
single tones and for several simultaneous tones; the static separable method for the quasi-static
limit; the free-electron Larmor frequency from scipy.constants (CODATA).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import solve_ivp

from retina.errors import InputError
from retina.spin import broadband as bb
from retina.spin import rf, rf_separable as rs, separable
from retina.spin.system import Nucleus, Radical, SpinSystem

MU_B_OVER_HBAR = sc.physical_constants["Bohr magneton"][0] / sc.hbar
G_E = abs(sc.physical_constants["electron g factor"][0])
GAMMA_E = G_E * MU_B_OVER_HBAR
A_TENSOR = np.diag([0.2, 0.3, 0.9])  # mT, invented


def sym(rng, scale=0.3, iso=0.5):
    a = rng.normal(size=(3, 3)) * scale
    return (a + a.T) / 2 + iso * np.eye(3)


def invented_pair(seed=1, k=1e6, **kw):
    """A: a proton and a spin-1 nucleus, anisotropic g; B: one proton (d = 12 x 4 = 48)."""
    rng = np.random.default_rng(seed)
    ga = G_E * np.eye(3) + np.diag([0.002, -0.001, 0.0005])
    ra = Radical("A", g=G_E, g_tensor=ga, nuclei=(Nucleus("H1", 0.5, sym(rng)), Nucleus("N", 1.0, sym(rng))))
    rb = Radical("B", g=G_E, nuclei=(Nucleus("h", 0.5, sym(rng)),))
    return SpinSystem("invented", (ra, rb), k_singlet=k, k_triplet=k, **kw)


def one_proton_pair(k=1e6):
    """Radical A with one anisotropic proton, radical B bare: Hilbert dimension 8."""
    return SpinSystem("one-proton pair", (Radical("A", g=G_E, nuclei=(Nucleus("H", 0.5, A_TENSOR),)),
                                          Radical("B", g=G_E)), k_singlet=k, k_triplet=k)


def unit(v):
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def time_integration(b, field_uT, tones, k, lifetimes=25.0, rtol=1e-10):
    """Singlet yields of ``one_proton_pair(k)`` under ``sum_i B_i n_i cos(w_i t + theta_i)``.

    ``tones``: list of (rf_nT, rf_MHz, n_rf (3,), phases (P,)); the P phase sets are integrated
    together.  Built from scratch (Kronecker order electron A, proton, electron B; Haberkorn with equal
    rates as ``G = H - i k / 2``); yield integrated as an extra component up to ``lifetimes / k``.
    """
    sx = np.array([[0, 1], [1, 0]]) / 2
    sy = np.array([[0, -1j], [1j, 0]]) / 2
    sz = np.diag([0.5, -0.5])
    i2 = np.eye(2)
    sa = [np.kron(np.kron(s, i2), i2) for s in (sx, sy, sz)]
    ia = [np.kron(np.kron(i2, s), i2) for s in (sx, sy, sz)]
    sb = [np.kron(np.kron(i2, i2), s) for s in (sx, sy, sz)]
    h0 = sum(GAMMA_E * A_TENSOR[i, j] * 1e-3 * sa[i] @ ia[j] for i in range(3) for j in range(3))
    h0 = h0 + sum(GAMMA_E * field_uT * 1e-6 * b[i] * (sa[i] + sb[i]) for i in range(3))
    hs = [sum(GAMMA_E * t[0] * 1e-9 * t[2][i] * (sa[i] + sb[i]) for i in range(3)) for t in tones]
    ws = [2 * np.pi * t[1] * 1e6 for t in tones]
    phases = [np.asarray(t[3], dtype=float) for t in tones]
    n_p = phases[0].size
    ps = 0.25 * np.eye(8) - sum(sa[i] @ sb[i] for i in range(3))
    g0 = h0 - 0.5j * k * np.eye(8)
    us = 1e-6

    def rhs(t, y):
        r = y[:-n_p].reshape(n_p, 8, 8)
        g = np.broadcast_to(g0, (n_p, 8, 8)).copy()
        for h, w, th in zip(hs, ws, phases):
            g = g + np.cos(w * t * us + th)[:, None, None] * h[None]
        dr = -1j * (g @ r - r @ g.conj().transpose(0, 2, 1)) * us
        dy = k * np.real(np.einsum("ij,pji->p", ps, r)) * us
        return np.concatenate([dr.reshape(-1), dy])

    y0 = np.concatenate([np.tile((ps / 2).reshape(-1), n_p).astype(complex), np.zeros(n_p)])
    sol = solve_ivp(rhs, (0.0, lifetimes / k / us), y0, method="DOP853", rtol=rtol, atol=1e-13)
    assert sol.success
    return np.real(sol.y[-n_p:, -1])


# ------------------------------------------------------------------------------------------ exact method

@pytest.mark.parametrize("kw", [
    dict(rf_MHz=1.4, rf_nT=2000.0, rf_direction="perpendicular"),
    dict(rf_MHz=0.3, rf_nT=4000.0, rf_direction="parallel"),
    dict(rf_MHz=5.0, rf_nT=3000.0, rf_direction=[0.3, 0.2, 1.0]),
])
@pytest.mark.parametrize("start", [("singlet", "singlet"), ("triplet", "triplet")])
def test_agrees_with_whole_pair_floquet(kw, start):
    # Reference: the whole-pair Floquet-Liouville solver of retina.spin.rf (independent algorithm:
    # Liouville space, backward equation); agreement 1e-8 asked, both run at tol 1e-12.
    sys_ = invented_pair(initial_state=start[0], reported_yield=start[1])
    dirs = unit(np.random.default_rng(3).normal(size=(2, 3)))
    ref = rf.yields_rf(sys_, 50.0, dirs, tol=1e-12, **kw)
    got, info = rs.yields_rf(sys_, 50.0, dirs, tol=1e-12, return_info=True, **kw)
    static = separable.yields(sys_, 50.0, dirs)
    assert np.max(np.abs(ref - static)) > 1e-7          # the RF effect is there
    np.testing.assert_allclose(got, ref, atol=1e-8, rtol=0)
    assert np.all(info["orthonormality"] < 1e-9)


@pytest.mark.slow
def test_agrees_with_direct_time_integration():
    # Reference: direct solve_ivp integration of the pair's density matrix, 16 birth phases
    # averaged (the yield at one phase is a trigonometric polynomial in the phase whose harmonics
    # above 8 are below 1e-12 here), rtol 1e-10.
    sys_ = one_proton_pair()
    b = unit([0.3, 0.4, 1.0])
    n = unit(np.cross(b, [1.0, 0.0, 0.0]))
    for f in (4.0,):
        th = 2 * np.pi * np.arange(16) / 16
        ref = float(np.mean(time_integration(b, 50.0, [(2000.0, f, n, th)], 1e6)))
        got = rs.yields_rf(sys_, 50.0, b[None], rf_MHz=f, rf_nT=2000.0, rf_direction=n, tol=1e-12)[0]
        assert abs(got - ref) < 2e-8


def test_zero_amplitude_is_the_static_method():
    # Reference: retina.spin.separable (the n = 0 term of the derivation is its formula).
    sys_ = invented_pair()
    dirs = unit(np.random.default_rng(5).normal(size=(4, 3)))
    got = rs.yields_rf(sys_, 50.0, dirs, rf_MHz=1.0, rf_nT=0.0)
    np.testing.assert_allclose(got, separable.yields(sys_, 50.0, dirs), atol=1e-13, rtol=0)


def test_larmor_resonance_of_a_bare_radical():
    # Source: free-electron gyromagnetic ratio from scipy.constants (CODATA): 28.025 MHz/mT
    # (shared/references "Physical constants"), so at 50 uT the bare radical B resonates at
    # 1.401 MHz.  Radical A's hyperfine lines are kept away (a 2 mT proton: lines near 28 MHz and
    # above).  Long lifetime (10 us) for a narrow line.
    assert GAMMA_E / (2 * np.pi) * 1e-9 == pytest.approx(28.025, abs=1e-3)
    sys_ = SpinSystem("bare-B", (Radical("A", g=G_E, nuclei=(Nucleus("H", 0.5, 2.0 * np.eye(3)),)),
                                 Radical("B", g=G_E)), k_singlet=1e5, k_triplet=1e5)
    b = np.array([[0.0, 0.0, 1.0]])
    f_l = GAMMA_E * 50e-6 / (2 * np.pi) / 1e6
    freqs = f_l * np.linspace(0.9, 1.1, 41)
    static = separable.yields(sys_, 50.0, b)[0]
    perp = np.array([rs.yields_rf(sys_, 50.0, b, rf_MHz=f, rf_nT=50.0)[0] for f in freqs]) - static
    peak = freqs[np.argmax(np.abs(perp))]
    assert abs(peak - f_l) <= 0.005 * f_l + 1e-12
    # the response spectrum puts its extreme at the same place
    r = bb.response(sys_, 50.0, b[0])
    fine = f_l * np.linspace(0.98, 1.02, 401)
    tone = r.tone(fine, bb.polarisation_tensor(r.direction, "perpendicular"))
    assert abs(fine[np.argmax(np.abs(tone))] - f_l) <= 0.001 * f_l


def test_parallel_field_causes_no_transitions_of_a_bare_radical():
    # Common practice, no source (shared/references "facts of the trade"): a field along the static
    # field commutes with a bare electron's Zeeman Hamiltonian, so its Floquet states stay the
    # static eigenstates (only phases), whereas a perpendicular field at resonance mixes them half
    # and half.  Derived: H(t) = (w0 + w1 cos wt) S_z keeps |up>, |down> as eigenstates at all t.
    se = np.stack([np.array([[0, 1], [1, 0]]) / 2, np.array([[0, -1j], [1j, 0]]) / 2, np.diag([0.5, -0.5])])
    w0 = 1.0
    h0 = w0 * se[2]
    for vec, mixed in (([0, 0, 1], False), ([1, 0, 0], True)):
        v = 0.05 * np.einsum("j,jab->ab", np.asarray(vec, float), se)
        eps, u, edge, ortho = rs.radical_floquet(h0, v, w0, 8)
        pop = np.sum(np.abs(u) ** 2, axis=0)          # (2 static states, 2 Floquet states), period average
        assert ortho < 1e-12
        if mixed:
            # half and half up to the Bloch-Siegert shift of the resonance, ~ (w1 / w0)^2 / 16 here
            np.testing.assert_allclose(pop, 0.5, atol=0.01)
        else:
            np.testing.assert_allclose(np.sort(pop, axis=0), [[0, 0], [1, 1]], atol=1e-14)


def test_effect_vanishes_as_amplitude_squared():
    # Derived (module docstring of retina.spin.broadband): the phase-averaged change is even in the
    # amplitude and starts at second order, so doubling a weak amplitude quadruples it.
    sys_ = invented_pair()
    b = unit([[0.2, -0.4, 1.0]])
    static = separable.yields(sys_, 50.0, b)[0]
    d = [rs.yields_rf(sys_, 50.0, b, rf_MHz=1.4, rf_nT=a, tol=1e-15)[0] - static for a in (100.0, 200.0)]
    # fourth order ~ (gamma_e 200 nT / k)^2 = 1.2e-3 relative
    assert abs(d[0]) > 1e-9
    assert d[1] / d[0] == pytest.approx(4.0, rel=5e-3)


def test_quasi_static_limit_is_the_average_of_static_yields():
    # Derived: for w << k the field hardly changes during a pair's life, so a pair born at phase
    # theta sees the static field B0 + b cos(theta) n and gives the static yield there; averaging
    # over the uniform birth phase gives (1/2 pi) int Phi_static(B0 + b cos(theta) n) dtheta.  The
    # first correction in w / k is linear in the field's rate of change, -b w sin(theta) n, times a
    # function of cos(theta): odd in theta, it averages to zero, so the deviation falls as (w / k)^2.  Reference: the static separable method on a
    # 64-point phase rule (spectrally accurate for this smooth periodic integrand).
    k = 1e7
    sys_ = SpinSystem("qs", (Radical("A", g=G_E, nuclei=(Nucleus("H", 0.5, np.diag([0.05, 0.08, 0.15])),)),
                             Radical("B", g=G_E)), k_singlet=k, k_triplet=k)
    b0 = unit([0.2, 0.1, 1.0])
    n = unit(np.cross(b0, [1.0, 0, 0]))
    field_uT, b1_uT = 100.0, 50.0
    th = 2 * np.pi * np.arange(64) / 64
    vecs = field_uT * b0[None] + b1_uT * np.cos(th)[:, None] * n[None]
    mags = np.linalg.norm(vecs, axis=1)
    avg_static = np.mean([separable.yields(sys_, m, v[None] / m)[0] for m, v in zip(mags, vecs)])
    static = separable.yields(sys_, field_uT, b0[None])[0]
    devs = []
    for ratio in (0.04, 0.02):
        f = ratio * k / (2 * np.pi) / 1e6
        y = rs.yields_rf(sys_, field_uT, b0[None], rf_MHz=f, rf_nT=b1_uT * 1e3, rf_direction=n, tol=1e-9)[0]
        devs.append(abs(y - avg_static))
    effect = abs(avg_static - static)
    assert effect > 1e-3
    assert devs[1] < 0.02 * effect
    assert devs[0] / devs[1] == pytest.approx(4.0, rel=0.1)   # (w / k)^2: halving w quarters it


def test_bad_input_and_scope():
    sys_ = invented_pair()
    with pytest.raises(InputError, match="rf_MHz"):
        rs.yields_rf(sys_, 50.0, [[0, 0, 1]], rf_MHz=-1.0, rf_nT=10.0)
    with pytest.raises(InputError, match="azimuths"):
        rs.yields_rf(sys_, 50.0, [[0, 0, 1]], rf_MHz=1.0, rf_nT=10.0, azimuths=3)
    coupled = invented_pair(exchange_mT=0.01)
    with pytest.raises(InputError, match="exchange"):
        rs.yields_rf(coupled, 50.0, [[0, 0, 1]], rf_MHz=1.0, rf_nT=10.0)


# ------------------------------------------------------------------------------------------ broadband

@pytest.mark.parametrize("coupled", [False, True])
def test_response_is_the_weak_field_limit_of_the_exact_methods(coupled):
    # Reference: exact single tones (separable Floquet, or the whole-pair Floquet when an exchange
    # coupling puts the pair outside the separable scope), (Phi(B1) - Phi(0)) / B1^2 at 20 nT; the
    # fourth order is ~ (gamma_e B1 / k)^2 ~ 1e-5 relative.
    sys_ = invented_pair(exchange_mT=0.005) if coupled else invented_pair()
    solve = rf.yields_rf if coupled else rs.yields_rf
    d = unit([0.3, 0.2, 1.0])
    r = bb.response(sys_, 50.0, d)
    static = solve(sys_, 50.0, d[None], rf_MHz=1.0, rf_nT=0.0)[0]
    assert r.static == pytest.approx(static, abs=1e-13)
    for f in (0.5, 1.4, 3.0):
        for kind in ("perpendicular", "parallel"):
            y = solve(sys_, 50.0, d[None], rf_MHz=f, rf_nT=20.0, rf_direction=kind, tol=1e-14)[0]
            pred = r.tone(f, bb.polarisation_tensor(r.direction, kind))[0] * 20.0**2
            assert pred == pytest.approx(y - static, rel=1e-4, abs=1e-13)


def test_band_integral_matches_quadrature_of_the_tone_response():
    # Derived: the closed-form band integral (module docstring) against a trapezoid rule of the
    # tone response on 20001 points (line width k / 2 pi = 0.16 MHz, spacing 0.5 kHz).
    sys_ = invented_pair()
    r = bb.response(sys_, 50.0, unit([0.3, 0.2, 1.0]))
    pol = bb.polarisation_tensor(r.direction, "angle", angle_deg=60.0)
    psd = (0.01e-9) ** 2                                   # (0.01 nT/sqrt(Hz))^2
    f = np.linspace(0.1, 10.0, 20001)
    quad = np.trapezoid(2 * psd * r.tone(f, pol) * 1e18, f * 1e6)
    assert r.band((0.1, 10.0), pol, psd) == pytest.approx(quad, rel=1e-5)


@pytest.mark.slow
def test_noise_tones_add_incoherently():
    # Reference: direct time integration with four simultaneous tones (random phase offsets, each
    # averaged over 32 phase sets theta_i + 2 pi m c_i / 32 with c = 1, 2, 4, 8 so every product of
    # two different tones, and every tone's own 2 theta term, averages to zero as for independent
    # uniform phases), against (a) the sum of the four exact single-tone changes and (b) the
    # response spectrum.  Derived (retina.spin.broadband docstring): at second order the changes add.
    k = 1e6
    sys_ = one_proton_pair(k)
    b = unit([0.3, 0.4, 1.0])
    n = unit(np.cross(b, [1.0, 0.0, 0.0]))
    rng = np.random.default_rng(11)
    freqs = [0.6, 1.1, 1.6, 2.9]
    amps = [600.0, 500.0, 700.0, 400.0]
    cs = [1, 2, 4, 8]
    m = np.arange(32)
    tones = [(a, f, n, rng.uniform(0, 2 * np.pi) + 2 * np.pi * m * c / 32) for a, f, c in zip(amps, freqs, cs)]
    multi = float(np.mean(time_integration(b, 50.0, tones, k, rtol=1e-11)))
    static = separable.yields(sys_, 50.0, b[None])[0]
    singles = sum(rs.yields_rf(sys_, 50.0, b[None], rf_MHz=f, rf_nT=a, rf_direction=n, tol=1e-13)[0] - static
                  for a, f in zip(amps, freqs))
    r = bb.response(sys_, 50.0, b)
    pol = bb.polarisation_tensor(b, "vector", vector=n)
    pred = sum(a**2 * r.tone(f, pol)[0] for a, f in zip(amps, freqs))
    eta = bb.weak_parameter(np.sqrt(np.sum(np.square(amps)) / 2), k)
    assert abs(multi - static) > 1e-5
    assert multi - static == pytest.approx(singles, rel=3 * eta**2 + 1e-6)
    assert multi - static == pytest.approx(pred, rel=3 * eta**2 + 1e-6)


def test_band_yields_report_the_validity_limit():
    sys_ = invented_pair()
    dirs = unit(np.random.default_rng(2).normal(size=(3, 3)))
    y, info = bb.band_yields(sys_, 50.0, dirs, (0.1, 10.0), rms_nT=10.0)
    # Derived: eta = gamma_e b_rms / k with gamma_e from scipy.constants.
    assert info["eta"] == pytest.approx(GAMMA_E * 10e-9 / 1e6, rel=1e-12)
    assert info["valid"]
    y2, info2 = bb.band_yields(sys_, 50.0, dirs, (0.1, 10.0), asd_nT_per_rtHz=10.0 / np.sqrt(9.9e6))
    np.testing.assert_allclose(y2, y, rtol=1e-12)         # the two forms of the same band
    assert np.max(np.abs(y - info["static"])) > 0
    with pytest.raises(InputError, match="band_MHz"):
        bb.band_yields(sys_, 50.0, dirs, (10.0, 0.1), rms_nT=10.0)
    with pytest.raises(InputError, match="asd_nT_per_rtHz"):
        bb.band_yields(sys_, 50.0, dirs, (0.1, 10.0), rms_nT=10.0, asd_nT_per_rtHz=1.0)


def test_rf_direction_at_an_angle():
    # Derived: at 90 deg the azimuth-averaged direction is the perpendicular one, at 0 deg the
    # parallel one; at 60 deg and weak amplitude the change is cos^2 60 (parallel) + sin^2 60
    # (perpendicular) of the second-order response (retina.spin.broadband, polarisation tensor).
    sys_ = invented_pair()
    b = unit([[0.2, -0.4, 1.0]])
    kw = dict(rf_MHz=1.4, rf_nT=3000.0, tol=1e-12)
    perp = rs.yields_rf(sys_, 50.0, b, rf_direction="perpendicular", **kw)
    np.testing.assert_allclose(rs.yields_rf(sys_, 50.0, b, angle_deg=90.0, **kw), perp, atol=1e-14, rtol=0)
    par = rs.yields_rf(sys_, 50.0, b, rf_direction="parallel", **kw)
    np.testing.assert_allclose(rs.yields_rf(sys_, 50.0, b, angle_deg=0.0, **kw), par, atol=1e-12, rtol=0)
    static = separable.yields(sys_, 50.0, b)[0]
    weak = dict(rf_MHz=1.4, rf_nT=50.0, tol=1e-14)
    y60 = rs.yields_rf(sys_, 50.0, b, angle_deg=60.0, **weak)[0] - static
    r = bb.response(sys_, 50.0, b[0])
    pred = r.tone(1.4, bb.polarisation_tensor(r.direction, "angle", angle_deg=60.0))[0] * 50.0**2
    assert y60 == pytest.approx(pred, rel=1e-3)
    with pytest.raises(InputError, match="angle_deg"):
        rs.yields_rf(sys_, 50.0, b, angle_deg=200.0, **kw)
