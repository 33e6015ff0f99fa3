"""Tests of the RF (Floquet) method, retina.spin.rf, and its command, retina.commands.rf.

Independent references: the static Liouville and eigen methods (retina.spin.liouville, hilbert,
themselves checked against QuTiP in test_spin_exact.py); a brute-force time integration written
here from scratch (numpy Kronecker products, scipy.integrate.solve_ivp) that shares no code with the
package; closed-form limits derived in the comments; the free-electron Larmor frequency from
scipy.constants.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import solve_ivp

from retina.errors import InputError, ResourceError
from retina.spin import hilbert, liouville, rf, rf_floquet
from retina.spin.system import Nucleus, Radical, Relaxation, SpinSystem
from retina.yieldfn import YieldFunction

ROOT = Path(__file__).resolve().parents[1]

# Constants recomputed here from scipy.constants (not imported from the package).
MU_B_OVER_HBAR = sc.physical_constants["Bohr magneton"][0] / sc.hbar
G_E = abs(sc.physical_constants["electron g factor"][0])
GAMMA_E = G_E * MU_B_OVER_HBAR

A_TENSOR = np.diag([0.2, 0.3, 0.9])  # mT, one anisotropic proton on radical A (invented)


def one_proton_pair(k_s=1e6, k_t=1e6, **kw):
    """Radical A with one anisotropic proton, radical B bare: Hilbert dimension 8."""
    return SpinSystem("one-proton pair", (Radical("A", g=G_E, nuclei=(Nucleus("H", 0.5, A_TENSOR),)),
                                          Radical("B", g=G_E)), k_singlet=k_s, k_triplet=k_t, **kw)


def rich_pair():
    """Unequal rates, exchange, dipolar, relaxation, anisotropic g: everything L0 can hold (d = 8)."""
    rng = np.random.default_rng(7)
    a = rng.normal(size=(3, 3)) * 0.3
    ga = G_E * np.eye(3) + np.diag([0.002, -0.001, 0.0005])
    return SpinSystem("rich", (Radical("A", g=G_E, g_tensor=ga, nuclei=(Nucleus("H", 0.5, (a + a.T) / 2 + 0.4 * np.eye(3)),)),
                               Radical("B", g=G_E)),
                      exchange_mT=0.02, dipolar_mT=np.diag([0.03, 0.03, -0.06]), k_singlet=2e6, k_triplet=5e5,
                      relaxation=Relaxation(random_field=(1e5, 3e4), st_dephasing=2e4))


def unit(v):
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


# ------------------------------------------------------------------------------------------ brute force

def brute_force(b, n_rf, field_uT, rf_nT, rf_MHz, k, n_phase=16, lifetimes=25.0, rtol=1e-10):
    """Singlet yields of ``one_proton_pair(k, k)`` for ``n_phase`` birth phases ``2 pi j / n_phase``.

    Built from scratch: Kronecker order electron A, proton, electron B; Haberkorn with equal rates
    as the non-Hermitian ``G = H - i k / 2``, ``d rho/dt = -i (G rho - rho G^+)``; the yield
    ``k int Tr(P_S rho) dt`` integrated as an extra ODE component up to ``lifetimes / k``
    (neglected tail ``exp(-25) = 1.4e-11``).  All phases are integrated together.
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
    h1 = sum(GAMMA_E * rf_nT * 1e-9 * n_rf[i] * (sa[i] + sb[i]) for i in range(3))
    ps = 0.25 * np.eye(8) - sum(sa[i] @ sb[i] for i in range(3))
    rho0 = ps / 2
    w = 2 * np.pi * rf_MHz * 1e6
    th = 2 * np.pi * np.arange(n_phase) / n_phase
    g0 = h0 - 0.5j * k * np.eye(8)
    us = 1e-6  # integrate in microseconds

    def rhs(t, y):
        r = y[:-n_phase].reshape(n_phase, 8, 8)
        g = g0[None] + np.cos(w * t * us + th)[:, None, None] * h1[None]
        dr = -1j * (g @ r - r @ g.conj().transpose(0, 2, 1)) * us
        dy = k * np.real(np.einsum("ij,pji->p", ps, r)) * us
        return np.concatenate([dr.reshape(-1), dy])

    y0 = np.concatenate([np.tile(rho0.reshape(-1), n_phase).astype(complex), np.zeros(n_phase)])
    sol = solve_ivp(rhs, (0.0, lifetimes / k / us), y0, method="DOP853", rtol=rtol, atol=1e-13)
    assert sol.success
    return np.real(sol.y[-n_phase:, -1])


@pytest.mark.parametrize("rf_MHz", [1.4, 5.0])
def test_brute_force_time_integration(rf_MHz):
    # Reference: scipy.integrate.solve_ivp (DOP853, rtol 1e-10) of a from-scratch Hamiltonian over 25
    # lifetimes, 16 birth phases.  Its accuracy: tail 1.4e-11, local error ~1e-10 of the O(1) yield;
    # the phase average over 16 equally spaced phases is exact for harmonics |n| < 16, whose size here
    # falls like (w1/w)^n ~ 0.03^n.  Stated agreement: 1e-9.  A strong field (2 uT) makes the RF
    # effect (1e-5 to 1e-4) far larger than that.
    b, n = unit([1, 1, 1]), unit([1, -1, 0])
    ref = brute_force(b, n, 50.0, 2000.0, rf_MHz, 1e6)
    sys_ = one_proton_pair()
    avg, at0 = rf.yields_rf(sys_, 50.0, b[None], rf_MHz=rf_MHz, rf_nT=2000.0, rf_direction=n, phase_deg=0.0)
    at90 = rf.yields_rf(sys_, 50.0, b[None], rf_MHz=rf_MHz, rf_nT=2000.0, rf_direction=n, phase_deg=90.0)[1]
    static = liouville.yields(sys_, 50.0, b[None])[0]
    assert abs(ref.mean() - avg[0]) < 1e-9
    assert abs(ref[0] - at0[0]) < 1e-9
    assert abs(ref[4] - at90[0]) < 1e-9  # phase index 4 of 16 is 90 degrees
    assert abs(avg[0] - static) > 1e-6  # the comparison is not of two static yields


# ------------------------------------------------------------------------------------------ limits

def test_zero_amplitude_reproduces_static_methods():
    # Derived: with B1 = 0 the Floquet blocks decouple and a_0 = -(L0^T)^-1 q, so the yield is the
    # static Liouville yield.  Reference: retina.spin.liouville.yields (QuTiP-checked elsewhere), and
    # retina.spin.hilbert.yields for equal rates.
    dirs = unit(np.random.default_rng(1).normal(size=(4, 3)))
    rich = rich_pair()
    for direction in ("perpendicular", "parallel", [0.3, 0.1, 1.0]):
        got = rf.yields_rf(rich, 50.0, dirs, rf_MHz=1.4, rf_nT=0.0, rf_direction=direction)
        np.testing.assert_allclose(got, liouville.yields(rich, 50.0, dirs), atol=1e-10, rtol=0)
    eq = one_proton_pair()
    for solver in ("sylvester", "splu"):
        got = rf.yields_rf(eq, 47.0, dirs, rf_MHz=3.0, rf_nT=0.0, solver=solver)
        np.testing.assert_allclose(got, hilbert.yields(eq, 47.0, dirs), atol=1e-10, rtol=0)


def test_bare_pair_stays_singlet_under_any_rf():
    # Derived: with no hyperfine couplings and equal g, H(t) = gamma (B0 + B1(t)) . (S_A + S_B), and the
    # total spin commutes with P_S, so a singlet-born pair stays singlet and recombines only through
    # k_S: Phi_S = k_S int exp(-k_S t) dt = 1, for any RF field, frequency and phase.
    bare = SpinSystem("bare", (Radical("A", g=G_E), Radical("B", g=G_E)), k_singlet=1e6, k_triplet=3e6)
    dirs = unit([[0, 0, 1], [1, 2, 3]])
    for f in (0.3, 1.4, 20.0):
        avg, at = rf.yields_rf(bare, 50.0, dirs, rf_MHz=f, rf_nT=30000.0, rf_direction=[1, 0, 0], phase_deg=37.0)
        np.testing.assert_allclose(avg, 1.0, atol=1e-12)
        np.testing.assert_allclose(at, 1.0, atol=1e-12)


def test_high_frequency_effect_falls_as_inverse_square():
    # Derived: for w far above every system frequency the first-order (1/w) effective-Liouvillian
    # term of a single cos drive is [L1/2, L1/2]/w = 0, and the first-order micromotion kick is
    # proportional to sin(theta), which the phase average removes; the change is therefore
    # O((w1/w)^2): doubling w divides it by 4 (to O(1/w^2) corrections, here < 1 %).
    sys_, b = one_proton_pair(), unit([[1, 1, 1]])
    static = liouville.yields(sys_, 50.0, b)[0]
    d = [rf.yields_rf(sys_, 50.0, b, rf_MHz=f, rf_nT=1e5, tol=1e-13)[0] - static for f in (1000.0, 2000.0)]
    assert abs(d[0]) > 1e-9
    assert d[0] / d[1] == pytest.approx(4.0, rel=0.01)


def test_weak_field_effect_grows_as_amplitude_squared():
    # Derived: B1 -> -B1 is the phase shift theta -> theta + pi, so the phase average is even in B1:
    # the change is c B1^2 + O(B1^4); doubling a weak B1 (w1 = 3.5e3 rad/s << k = 1e6 s^-1)
    # multiplies it by 4 to about (w1/k)^2 ~ 1e-5.
    sys_, b = one_proton_pair(), unit([[1, 1, 1]])
    static = liouville.yields(sys_, 50.0, b)[0]
    d = [rf.yields_rf(sys_, 50.0, b, rf_MHz=1.4, rf_nT=a, tol=1e-15)[0] - static for a in (20.0, 40.0)]
    assert d[1] / d[0] == pytest.approx(4.0, rel=1e-3)


def test_perpendicular_resonance_at_free_electron_larmor_frequency():
    # Common practice, no source (a fact of the trade): an RF field
    # perpendicular to the static field near the free-electron Larmor frequency disturbs a pair with
    # a bare radical; a parallel one causes no transitions of a radical without hyperfine couplings.
    # Larmor frequency from scipy.constants: gamma_e B0 / (2 pi) = 1.401 MHz at 50 uT (g = g_e).
    larmor = GAMMA_E * 50e-6 / (2 * np.pi) / 1e6
    assert larmor == pytest.approx(1.40, abs=0.005)  # Derived: CODATA gamma_e / 2 pi = 28.025 MHz/mT
    sys_, b = one_proton_pair(), np.array([0.0, 0.0, 1.0])
    freqs = np.linspace(0.8, 1.8, 21)  # 0.05 MHz steps
    perp = rf.rf_spectrum(sys_, 50.0, b, freqs, 50.0, rf_direction="perpendicular")
    par = rf.rf_spectrum(sys_, 50.0, b, freqs, 50.0, rf_direction="parallel")
    peak = freqs[np.argmax(np.abs(perp.delta))]
    assert abs(peak - larmor) <= 0.05
    i = int(np.argmin(np.abs(freqs - larmor)))
    assert abs(perp.delta[i]) > 10 * abs(par.delta[i])
    assert perp.static == pytest.approx(liouville.yields(sys_, 50.0, b[None])[0], abs=1e-12)


# ------------------------------------------------------------------------------------------ numerics

def test_inversion_symmetry():
    # Derived (module docstring of retina.spin.rf): time reversal maps (b, n) on (-b, -n) and the phase
    # average makes -n equivalent to n, so Phi(-b) = Phi(b) for the perpendicular-averaged, parallel
    # and fixed-vector yields.  Checked on the rich pair (unequal rates, relaxation, anisotropic g)
    # to round-off (1e-10).
    dirs = unit(np.random.default_rng(3).normal(size=(3, 3)))
    sys_ = rich_pair()
    for direction in ("perpendicular", "parallel", [0.2, -0.5, 1.0]):
        kw = dict(rf_MHz=1.6, rf_nT=3000.0, rf_direction=direction)
        up = rf.yields_rf(sys_, 50.0, dirs, **kw)
        down = rf.yields_rf(sys_, 50.0, -dirs, **kw)
        np.testing.assert_allclose(up, down, atol=1e-10, rtol=0)
        assert np.max(np.abs(up - liouville.yields(sys_, 50.0, dirs))) > 1e-6


def test_truncation_order_and_azimuths_converged():
    # Derived: the truncated systems converge as N grows; the order chosen by "auto" must agree with
    # twice that order to within tol, and the azimuth rule with twice the azimuths likewise.
    # A strong RF field (20 uT, w1/w ~ 0.4) needs many harmonics.
    sys_, b, tol = one_proton_pair(), unit([[1, 0.5, 0.2]]), 1e-10
    kw = dict(rf_MHz=1.4, rf_nT=20000.0, tol=tol)
    y, info = rf.yields_rf(sys_, 50.0, b, rf_direction=[1, 0, 0], return_info=True, **kw)
    n_used = int(info["harmonics"][0])
    assert n_used >= 4
    y2 = rf.yields_rf(sys_, 50.0, b, rf_direction=[1, 0, 0], harmonics=2 * n_used, **kw)
    assert abs(y2[0] - y[0]) < tol
    kw["rf_nT"] = 5000.0  # 20 uT needs the largest azimuth rule (64 points); 5 uT needs 16
    yp, info = rf.yields_rf(sys_, 50.0, b, rf_direction="perpendicular", return_info=True, **kw)
    k, n_used = int(info["azimuths"][0]), int(info["harmonics"][0])
    assert k >= 8
    yp2 = rf.yields_rf(sys_, 50.0, b, rf_direction="perpendicular", azimuths=2 * k, harmonics=2 * n_used, **kw)
    assert abs(yp2[0] - yp[0]) < 2 * tol


def test_solvers_agree():
    # Reference: scipy.sparse.linalg.splu on the assembled (2N+1) d^2 system, against the dense block
    # elimination (matrix continued fraction), the Liouville-eigenbasis GMRES and the Hilbert-space
    # Sylvester GMRES: four solutions of the same truncated system, so they agree to round-off
    # (1e-12), for the average and at a fixed phase, with relaxation and unequal rates.
    sys_, dirs = rich_pair(), unit([[0.1, 0.2, 1.0], [1.0, 0.0, 0.0]])
    kw = dict(rf_MHz=0.9, rf_nT=8000.0, rf_direction=[0.0, 1.0, 1.0], harmonics=6, phase_deg=123.0)
    a1, p1 = rf.yields_rf(sys_, 50.0, dirs, solver="splu", **kw)
    for solver in ("blocks", "eig", "sylvester"):
        a2, p2 = rf.yields_rf(sys_, 50.0, dirs, solver=solver, **kw)
        np.testing.assert_allclose(a2, a1, atol=1e-12, rtol=0)
        np.testing.assert_allclose(p2, p1, atol=1e-12, rtol=0)
    # Derived: the mean over 16 equally spaced phases of the fixed-phase yield is the average
    # (exact for harmonics |n| < 16; the truncation keeps |n| <= 6).
    fixed = dict(rf_MHz=0.9, rf_nT=8000.0, rf_direction=[0.0, 1.0, 1.0], harmonics=6)
    ph = [rf.yields_rf(sys_, 50.0, dirs, phase_deg=360.0 * j / 16, **fixed)[1] for j in range(16)]
    np.testing.assert_allclose(np.mean(ph, axis=0), a1, atol=1e-12, rtol=0)


def test_rf_yield_function_fits_and_records_provenance(tmp_path):
    # Reference: the fitted function against direct yields_rf values at directions that are not
    # grid nodes, within the fit's own measured truncation error (+1e-9); provenance survives the
    # HDF5 round trip.
    sys_ = one_proton_pair(k_s=2e6, k_t=2e6)
    yf = rf.rf_yield_function(sys_, 50.0, rf_MHz=1.4, rf_nT=500.0, degree=4, check_points=6)
    p = yf.provenance
    assert (p["rf_MHz"], p["rf_nT"], p["rf_direction"], p["rf_phase"]) == (1.4, 500.0, "perpendicular", "averaged")
    assert p["rf_harmonics_max"] >= 2 and p["method"] == "separable-floquet"  # chosen for an uncoupled pair
    dirs = unit(np.random.default_rng(5).normal(size=(3, 3)))
    direct = rf.yields_rf(sys_, 50.0, dirs, rf_MHz=1.4, rf_nT=500.0)
    static = YieldFunction.from_system(sys_, 50.0, 4)
    assert np.max(np.abs(yf(dirs) - direct)) <= yf.fit_error + 1e-9
    assert np.max(np.abs(yf(dirs) - static(dirs))) > 1e-6
    back = YieldFunction.load(yf.save(tmp_path / "rf.h5"))
    assert back.provenance["rf_MHz"] == 1.4 and back.provenance["rf_direction"] == "perpendicular"
    np.testing.assert_array_equal(back.coeffs, yf.coeffs)


# ------------------------------------------------------------------------------------------ refusals

@pytest.mark.parametrize("kw, key", [
    (dict(rf_MHz=0.0, rf_nT=50.0), "rf_MHz"),
    (dict(rf_MHz=-1.0, rf_nT=50.0), "rf_MHz"),
    (dict(rf_MHz=1.4, rf_nT=-5.0), "rf_nT"),
    (dict(rf_MHz=1.4, rf_nT=float("nan")), "rf_nT"),
    (dict(rf_MHz=1.4, rf_nT=50.0, rf_direction="sideways"), "rf_direction"),
    (dict(rf_MHz=1.4, rf_nT=50.0, rf_direction=[0, 0, 0]), "rf_direction"),
    (dict(rf_MHz=1.4, rf_nT=50.0, harmonics=-1), "harmonics"),
    (dict(rf_MHz=1.4, rf_nT=50.0, tol=0.0), "tol"),
    (dict(rf_MHz=1.4, rf_nT=50.0, solver="qr"), "solver"),
])
def test_bad_input_is_refused(kw, key):
    # common practice, no source: every bad value raises InputError naming its key.
    with pytest.raises(InputError, match=key):
        rf.yields_rf(one_proton_pair(), 50.0, [[0, 0, 1]], **kw)


def test_large_system_is_refused_before_allocating():
    # Derived: the demo pair has d = 576, so one Liouville block alone is 576^4 complex entries
    # (~1.7 TB, refused by the Liouville-space solvers); the Hilbert-space solver needs about
    # 52 x 9 x 576^2 x 16 bytes ~ 2.5 GB at order 4, refused under a 1 GiB limit.
    from retina.spin.io import load_system

    demo = load_system(ROOT / "assets" / "demo_pair.toml")
    for solver in ("blocks", "eig", "splu"):
        with pytest.raises(ResourceError, match="Floquet space"):
            rf.yields_rf(demo, 50.0, [[0, 0, 1]], rf_MHz=1.4, rf_nT=50.0, solver=solver)
    assert 2e9 < rf.floquet_bytes(demo, 4) < 3e9
    with pytest.raises(ResourceError, match="Floquet space"):
        rf.yields_rf(demo, 50.0, [[0, 0, 1]], rf_MHz=1.4, rf_nT=50.0, max_bytes=2**30)


# ------------------------------------------------------------------------------------------ command

TINY = """
[pair]
name = "tiny rf pair"
[radical_a]
[[radical_a.nuclei]]
label = "H"
spin = 0.5
principal_mT = [0.2, 0.3, 0.9]
[radical_b]
[kinetics]
lifetime_us = 1.0
"""


def parse(argv):
    from retina.commands import rf as cmd

    parser = argparse.ArgumentParser(prog="retina")
    sub = parser.add_subparsers(dest="command")
    cmd.register(sub)
    return parser.parse_args(["rf", *argv])


def test_command_writes_rf_yield_function_and_prints_changes(tmp_path, capsys):
    # Reference: the printed change of the mean equals the difference of the two files' means
    # (static from the engine, RF from the file written).
    from retina.commands import rf as cmd

    system = tmp_path / "tiny.toml"
    system.write_text(TINY)
    out = tmp_path / "tiny_rf.h5"
    args = parse([str(system), "--rf-MHz", "1.4", "--rf-nT", "200", "--degree", "4", "-o", str(out), "-q",
                  "--spectrum", "1:2:3"])
    assert cmd.run(args) == 0
    text = capsys.readouterr().out
    yf = YieldFunction.load(out)
    assert yf.provenance["rf_nT"] == 200.0
    from retina.spin.io import load_system

    static = YieldFunction.from_system(load_system(system), 50.0, 4)
    assert f"change {yf.mean - static.mean:+.3e}" in text
    assert "percentage points" in text and "harmonics used up to" in text and "wall time" in text
    assert len([ln for ln in text.splitlines() if ln.strip().startswith(("1 ", "1.414", "2 "))]) == 3
    with pytest.raises(InputError, match="exists already"):
        cmd.run(args)


@pytest.mark.parametrize("extra, key", [(["--rf-nT", "-3"], "--rf-nT"), (["--rf-MHz", "0"], "--rf-MHz"),
                                        (["--spectrum", "5:1:3"], "--spectrum")])
def test_command_bad_input_names_the_option(tmp_path, extra, key):
    # common practice, no source: bad options raise InputError naming the option, before any work.
    from retina.commands import rf as cmd

    system = tmp_path / "tiny.toml"
    system.write_text(TINY)
    base = {"--rf-MHz": "1.4", "--rf-nT": "50"}
    base[extra[0]] = extra[1]
    argv = [str(system), "-o", str(tmp_path / "x.h5")] + [x for kv in base.items() for x in kv]
    if extra[0] == "--spectrum":
        argv += extra
        with pytest.raises(InputError, match=key):
            cmd.run(parse(argv))
    else:  # numeric options are checked while parsing (retina.commands._types): a usage error, exit 2
        with pytest.raises(SystemExit) as info:
            parse(argv)
        assert info.value.code == 2
    assert not (tmp_path / "x.h5").exists()


def test_command_exit_codes_through_the_cli(tmp_path, capsys, monkeypatch):
    # common practice, no source (retina.cli docstring): bad input -> exit 2 with one line; Ctrl-C ->
    # exit 130 and no partial file.
    import retina.commands
    from retina.cli import main

    assert "rf" in retina.commands.COMMANDS
    system = tmp_path / "tiny.toml"
    system.write_text(TINY)
    out = tmp_path / "o.h5"
    assert main(["rf", str(system), "--rf-MHz", "1.4", "--rf-nT", "-1", "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--rf-nT" in err[0]

    def interrupted(*a, **k):
        k["progress"](1, 10)
        raise KeyboardInterrupt

    monkeypatch.setattr(rf, "rf_yield_function", interrupted)
    assert main(["rf", str(system), "--rf-MHz", "1.4", "--rf-nT", "50", "--degree", "2", "-o", str(out), "-q"]) == 130
    assert not out.exists() and not list(tmp_path.glob("*.part"))
    assert "Modelling only; RF transmitters are regulated" in retina.commands.rf._EXAMPLES


def test_iterative_solvers_hand_over_to_block_elimination(monkeypatch):
    # Reference: the block elimination.  With the eigenvector-condition limit forced to 0 every
    # direction takes the fallback path of the "sylvester" and "eig" solvers, which must give the
    # same yields (1e-12).
    sys_, dirs = rich_pair(), unit([[0.3, -0.2, 1.0]])
    kw = dict(rf_MHz=1.2, rf_nT=4000.0, rf_direction="parallel", harmonics=4)
    ref = rf.yields_rf(sys_, 50.0, dirs, solver="blocks", **kw)
    monkeypatch.setattr(rf_floquet, "_COND_LIMIT", 0.0)
    for solver in ("sylvester", "eig"):
        np.testing.assert_allclose(rf.yields_rf(sys_, 50.0, dirs, solver=solver, **kw), ref, atol=1e-12, rtol=0)


def test_spectrum_anisotropy_option():
    # Derived: with B1 = 0 the RF yield function is the static one, so its relative anisotropy equals
    # the static value (1e-10); a strong resonant field changes it.  Reference for the static value:
    # retina.yieldfn.YieldFunction.from_system at the same degree (same quadrature, engine yields).
    sys_ = one_proton_pair()
    zero = rf.rf_spectrum(sys_, 50.0, [0, 0, 1], [1.4], 0.0, anisotropy_degree=2)
    static = YieldFunction.from_system(sys_, 50.0, 2).anisotropy().relative
    assert zero.static_relative_anisotropy == pytest.approx(static, abs=1e-10)
    assert zero.relative_anisotropy[0] == pytest.approx(static, abs=1e-10)
    strong = rf.rf_spectrum(sys_, 50.0, [0, 0, 1], [1.4], 5000.0, anisotropy_degree=2)
    assert abs(strong.relative_anisotropy[0] - static) > 1e-4
    with pytest.raises(InputError, match="freqs_MHz"):
        rf.rf_spectrum(sys_, 50.0, [0, 0, 1], [1.0, 0.0], 50.0)


def test_nested_azimuth_rule_is_exact_and_shares_points():
    # Derived: K equally spaced azimuths phi_j = j pi / K average cos(2 m phi) exactly (to 0) unless
    # m is a non-zero multiple of K.  f(phi) = 1 + cos(2 phi)^2 = 3/2 + cos(4 phi) / 2 has mean 3/2;
    # the 2-point rule gives 2 (m = 2 is a multiple of 2), the 4- and 8-point rules 3/2, so "auto"
    # stops at 8 azimuths.  Nested rules: 8 distinct azimuths are evaluated, not 2 + 4 + 8.
    from retina.spin._rf_common import azimuth_mean, check_azimuths

    calls = []

    def f(t):
        calls.append(t)
        phi = np.pi * t
        return (1.0 + np.cos(2 * phi) ** 2, 7.0)

    (mean, other), k = azimuth_mean(f, "auto", 1e-12)
    assert k == 8 and mean == pytest.approx(1.5, abs=1e-14) and other == 7.0
    assert len(calls) == len(set(calls)) == 8
    (mean2,), k2 = azimuth_mean(lambda t: (1.0 + np.cos(2 * np.pi * t) ** 2,), 2, 1e-12)
    assert (mean2, k2) == (pytest.approx(2.0, abs=1e-14), 2)
    for bad in (3, 0, 128, True, 2.0):
        with pytest.raises(InputError, match="azimuths"):
            check_azimuths(bad)
