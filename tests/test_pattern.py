"""Tests for retina.eye.pattern: receptor yields for poses and fields, symmetry laws, quenched vs
annealed ordering, gradients.

Synthetic molecular yield functions are analytic polynomials in the field direction (degree 4),
so every fast path is checked against direct evaluation of the formula.
"""

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from retina import sphere
from retina.errors import InputError
from retina.eye.field import Field
from retina.eye.geometry import Eye, build_receptors, default_eyes
from retina.eye.ordering import Aligned, Composite, Cone, FreeRotation, Isotropic
from retina.eye.pattern import RetinaModel, modulation, resample
from retina.eye.pose import Pose, head_field, head_field_dyaw, pose_rotation


def f_general(b):
    b = np.asarray(b)
    x, y, z = b[..., 0], b[..., 1], b[..., 2]
    return 0.5 + 0.1 * z ** 2 + 0.12 * x ** 2 * y ** 2 - 0.05 * x * z + 0.03 * x ** 4 + 0.06 * y * z


def coeffs_of(f, L=4):
    g = sphere.grid_for_degree(L)
    return sphere.fit_even(f(g.points), g, L)


C4 = coeffs_of(f_general)
FIELD = Field(49.0, 64.0, 5.0)


@pytest.fixture(scope="module")
def receptors():
    return build_receptors(default_eyes(150))


def _b(n, seed=0):
    return sphere.normalize(np.random.default_rng(seed).normal(size=(n, 3)))


def test_general_path_against_direct_evaluation(receptors):
    # Derived: receptor i with frame F_i and molecule rotation Q sees f(Q^-1 F_i^-1 b).
    A = Aligned.tilted(35.0, 20.0, 15.0)
    m = RetinaModel(C4, receptors, A)
    assert not m.axial
    b = _b(4)
    F = receptors.rotations
    direct = np.stack([f_general((F * A.rotation).inv().apply(bb)) for bb in b])
    np.testing.assert_allclose(m.yields(b), direct, atol=1e-13)


def test_axial_path_against_direct_rotation_average(receptors):
    # Derived: free rotation about the receptor axis; direct average of the analytic f over 64
    # equally spaced alpha (exact for the degree-4 trigonometric polynomial in alpha).  The
    # response then depends on b only through the angle to the receptor axis.
    fr = FreeRotation(tilt_deg=30.0, twist_deg=10.0)
    m = RetinaModel(C4, receptors, fr)
    assert m.axial
    b = _b(3, seed=2)
    F = receptors.rotations
    direct = np.zeros((3, len(receptors)))
    for a in 2 * math.pi * np.arange(64) / 64:
        Q = F * Rotation.from_euler("z", a) * fr.base
        direct += np.stack([f_general(Q.inv().apply(bb)) for bb in b]) / 64
    np.testing.assert_allclose(m.yields(b), direct, atol=1e-13)
    # two receptors at the same angle to the field give the same yield
    t = b[0] @ receptors.axes.T
    y = m.yields(b[:1])[0]
    order = np.argsort(t)
    smooth = np.interp(t, t[order], y[order])
    np.testing.assert_allclose(y, smooth, atol=1e-13)


def test_legendre_path_matches_harmonic_path_at_degree_16(receptors):
    # Two independent evaluations of an axial response of degree 16: Horner in cos^2 against the
    # rotated harmonic coefficients.
    rng = np.random.default_rng(7)
    c = rng.normal(size=sphere.n_coeffs(16)) * 0.01
    c[0] = 2.0
    m = RetinaModel(sphere.axial_average(c), receptors)
    assert m.axial
    b = _b(5, seed=9)
    np.testing.assert_allclose(m.yields(b), sphere.evaluate(m.head_coeffs(), b).T, atol=1e-11)


@pytest.mark.parametrize("kind", ["general", "axial", "molecules"])
def test_field_reversal_leaves_yields_unchanged(receptors, kind):
    # Common practice, no source (inclination compass): the yield is unchanged when B -> -B.
    model = {
        "general": lambda: RetinaModel(C4, receptors, Aligned.tilted(40.0, 10.0)),
        "axial": lambda: RetinaModel(C4, receptors, FreeRotation(25.0)),
        "molecules": lambda: RetinaModel(C4, receptors, Cone(kappa=3.0), mode="molecules",
                                         n_molecules=8, seed=1),
    }[kind]()
    pose = Pose(33.0, 8.0, -4.0)
    a = model.pattern(pose, FIELD)
    b = model.pattern(pose, FIELD.reversed())
    np.testing.assert_allclose(a.yields, b.yields, atol=1e-14)


def test_north_in_north_equals_south_in_south(receptors):
    # Common practice, no source: facing magnetic north in the northern hemisphere and magnetic
    # south in the southern hemisphere (same |inclination|) give the same pattern.
    m = RetinaModel(C4, receptors, Aligned.tilted(40.0, 10.0))
    north = m.pattern(Pose(yaw_deg=5.0), Field(49.0, 64.0, 5.0))
    south = m.pattern(Pose(yaw_deg=185.0), Field(49.0, -64.0, 5.0))
    np.testing.assert_allclose(north.yields, south.yields, atol=1e-14)
    np.testing.assert_allclose(north.modulation, south.modulation, atol=1e-13)
    # Common practice, no source: facing magnetic north in the north, the field is forward, down.
    assert north.b_head[0] > 0 and north.b_head[2] > 0


def test_mirror_headings_give_mirror_patterns(receptors):
    # Derived: with receptors axially symmetric about their axes and the left eye the mirror of
    # the right (y -> -y), heading D + psi and D - psi see mirrored field directions, so the left
    # eye at -psi sees what the right eye sees at +psi, receptor by receptor.
    m = RetinaModel(C4, receptors, FreeRotation(30.0))
    L, R = receptors.select(0), receptors.select(1)
    for psi in (25.0, 70.0, 130.0):
        plus = m.pattern(Pose(FIELD.D_deg + psi, 0.0, 0.0), FIELD)
        minus = m.pattern(Pose(FIELD.D_deg - psi, 0.0, 0.0), FIELD)
        np.testing.assert_allclose(minus.yields[L], plus.yields[R], atol=1e-14)
        np.testing.assert_allclose(minus.yields[R], plus.yields[L], atol=1e-14)
        assert not np.allclose(plus.yields[L], plus.yields[R], atol=1e-6)  # not trivially equal


def test_isotropic_ordering_gives_a_flat_pattern(receptors):
    # Derived: Haar-random molecules keep only the sphere average.
    m = RetinaModel(C4, receptors, Isotropic())
    p = m.pattern(Pose(12.0, 3.0, 1.0), FIELD)
    np.testing.assert_allclose(p.modulation, 0.0, atol=1e-14)
    assert p.eye_mean[0] == pytest.approx(C4[0] / math.sqrt(4 * math.pi), abs=1e-14)


def test_large_kappa_gives_the_aligned_pattern(receptors):
    # Derived: lambda_l -> 1 as kappa -> inf (deviation ~ l(l+1)/(2 kappa) = 1e-7 here).
    A = Aligned.tilted(35.0, 20.0)
    pa = RetinaModel(C4, receptors, A).pattern(Pose(40.0), FIELD)
    pc = RetinaModel(C4, receptors, Composite(Cone(kappa=1e8), A)).pattern(Pose(40.0), FIELD)
    np.testing.assert_allclose(pc.yields, pa.yields, atol=1e-7)


def test_modulation_is_zero_mean_per_eye(receptors):
    # Derived: (Phi - mean_e) / mean_e has zero solid-angle-weighted mean over each eye.
    m = RetinaModel(C4, receptors, Aligned.tilted(35.0, 20.0))
    y = m.yields(_b(3))
    mod = modulation(y, receptors)
    w = receptors.solid_angle
    for e in (0, 1):
        s = receptors.eye_index == e
        np.testing.assert_allclose(mod[:, s] @ w[s], 0.0, atol=1e-14)
    p = m.pattern(Pose(10.0), FIELD)
    np.testing.assert_allclose(p.modulation, modulation(p.yields, receptors), atol=0)


def test_quenched_bruteforce_equals_band_limited_average(receptors):
    # Derived (linearity of rotation): the mean of the rotated molecular functions is the
    # function of the mean rotated coefficients.
    m = RetinaModel(C4, receptors, Composite(Cone(kappa=2.0), Aligned.tilted(30.0)),
                    mode="molecules", n_molecules=7, seed=3)
    b = _b(3, seed=5)
    np.testing.assert_allclose(m.yields(b), m.yields_bruteforce(b), atol=1e-13)


def test_quenched_converges_to_ensemble_as_one_over_sqrt_n():
    # Derived (central limit theorem): the quenched yield is a mean of N independent molecules,
    # so its rms deviation from the ensemble falls as sigma / sqrt(N).  Check rms * sqrt(N) stays
    # within a factor 1.5 over N = 16 ... 1024 (each rms uses 600 values: ~3 % scatter).
    rec = build_receptors(Eye(n_receptors=200))
    order = Composite(Cone(kappa=3.0), Aligned.tilted(30.0, 15.0))
    b = _b(3, seed=1)
    ens = RetinaModel(C4, rec, order).yields(b)
    scaled = []
    for n in (16, 64, 256, 1024):
        q = RetinaModel(C4, rec, order, mode="molecules", n_molecules=n, seed=10 + n).yields(b)
        scaled.append(np.sqrt(np.mean((q - ens) ** 2)) * math.sqrt(n))
    assert max(scaled) / min(scaled) < 1.5, scaled


def test_molecule_build_reports_progress(receptors):
    calls = []
    RetinaModel(C4, receptors, Cone(kappa=3.0), mode="molecules", n_molecules=3, seed=1,
                progress=lambda done, total: calls.append((done, total)))
    assert calls and calls[-1] == (len(receptors), len(receptors))
    assert all(a <= b for (a, _), (b, _) in zip(calls, calls[1:]))


def test_molecules_are_reproducible(receptors):
    order = Cone(kappa=3.0)
    a = RetinaModel(C4, receptors, order, mode="molecules", n_molecules=5, seed=9)
    b = RetinaModel(C4, receptors, order, mode="molecules", n_molecules=5, seed=9)
    c = RetinaModel(C4, receptors, order, mode="molecules", n_molecules=5, seed=10)
    np.testing.assert_array_equal(a.coeffs, b.coeffs)
    assert not np.allclose(a.coeffs, c.coeffs)


@pytest.mark.parametrize("kind", ["general", "axial", "molecules"])
def test_yaw_derivative_against_central_difference(receptors, kind):
    # Reference: central finite difference in yaw (h = 1e-5 rad, error ~ 1e-11) of the yields,
    # against grad . d b_head / d yaw.
    model = {
        "general": lambda: RetinaModel(C4, receptors, Aligned.tilted(40.0, 10.0)),
        "axial": lambda: RetinaModel(C4, receptors, FreeRotation(25.0)),
        "molecules": lambda: RetinaModel(C4, receptors, Cone(kappa=3.0), mode="molecules",
                                         n_molecules=4, seed=2),
    }[kind]()
    yaw = np.array([0.0, 47.0, 200.0])
    pitch, roll = 6.0, -9.0
    bw = FIELD.vector
    R = pose_rotation(yaw, pitch, roll)
    y, g = model.yields_and_grad(head_field(R, bw))
    np.testing.assert_allclose(y, model.yields(head_field(R, bw)), atol=1e-15)
    dy = np.einsum("pnc,pc->pn", g, head_field_dyaw(R, bw))
    h = math.degrees(1e-5)
    fd = (model.yields(head_field(pose_rotation(yaw + h, pitch, roll), bw))
          - model.yields(head_field(pose_rotation(yaw - h, pitch, roll), bw))) / 2e-5
    np.testing.assert_allclose(dy, fd, atol=1e-9)


def test_resample(receptors):
    m = RetinaModel(C4, receptors, Aligned.tilted(35.0, 20.0))
    p = m.pattern(Pose(10.0), FIELD)
    i = receptors.select(1)[17]
    d = receptors.visual_dirs[i]
    az = math.degrees(math.atan2(d[1], d[0]))
    el = math.degrees(math.asin(-d[2]))
    out = resample(p, ([az, 180.0], [el]))
    assert out.shape == (2, 1, 2)
    assert out[1, 0, 0] == pytest.approx(p.modulation[i], abs=1e-15)
    # Derived: straight behind the head is 120 degrees from both optical axes (+/-60 azimuth),
    # outside both hemispherical retinas.
    assert np.all(np.isnan(out[:, 0, 1]))
    # the right eye's optical axis is outside the left eye's field (120 degrees from its axis)
    out = resample(p, ([60.0], [0.0]), values="yields")
    assert np.isnan(out[0, 0, 0]) and np.isfinite(out[1, 0, 0])


def test_bad_input(receptors):
    with pytest.raises(InputError):
        RetinaModel(C4, receptors, Cone(kappa=1.0), mode="sometimes")
    with pytest.raises(InputError, match="needs an ordering"):
        RetinaModel(C4, receptors, None, mode="molecules")
    with pytest.raises(InputError):
        RetinaModel(C4[:-1], receptors)
    m = RetinaModel(C4, receptors)
    with pytest.raises(InputError):
        m.yields(np.zeros((2, 2)))
    with pytest.raises(InputError):
        m.pattern("north", FIELD)
