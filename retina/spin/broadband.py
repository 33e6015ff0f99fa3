r"""Weak RF fields and broadband noise: the second-order response spectrum of the yield.

Scope: equal rates ``k_S = k_T = k`` and no relaxation (any exchange or dipolar coupling; pairs
without them take a fast path through each radical's own eigenbasis).  Units at the boundary: MHz,
nT, nT/sqrt(Hz); inside, frequencies are measured in units of ``k`` (dimensionless).

Derivation (response spectrum)
------------------------------
Notation of :mod:`retina.spin.rf_floquet`: ``d rho / dt = (L0 + cos(w t + theta) L1) rho`` with
``L0 rho = -i [H0, rho] - k rho`` (equal rates) and ``L1 rho = -i [V, rho]``, ``V`` the electron
Zeeman operator of the RF amplitude vector ``B1 n``.  The yield is ``Phi = k int Tr(P rho) dt`` with
``P`` the projector of the reported channel.  Expanding the Floquet equations of
:mod:`retina.spin.rf_floquet` (``q delta_n0 + (L0^T + i n w) a_n + (L1^T / 2)(a_{n-1} + a_{n+1}) = 0``) in
powers of ``L1``: ``a_0 = -(L0^T)^-1 q`` at order 0, ``a_{+/-1} = -(L0^T +/- i w)^-1 (L1^T / 2) a_0``
at order 1, and the order-2 part of ``a_0`` is ``-(L0^T)^-1 (L1^T / 2)(a_1 + a_-1)``.  The
phase-averaged change of the yield is therefore, to second order in the amplitude,

    dPhi(w) = -(k / 4) sum_{+/-} Tr[ P L0^-1 L1 (L0 +/- i w)^-1 L1 L0^-1 rho0 ]

(the odd orders vanish on the phase average).  The same follows in the time domain from the Dyson
series: three propagation intervals ``int_0^inf exp(L0 s) ds = -L0^-1`` and the phase average
``<cos(w t1 + theta) cos(w t2 + theta)> = (1/4) sum_{+/-} exp(+/- i w (t1 - t2))``.

In the eigenbasis of ``H0`` (energies ``E_i``) ``L0`` is diagonal, ``(L0 X)_ij = G_ij X_ij`` with
``G_ij = -k - i (E_i - E_j)``.  With ``Y = -i [V, rho0 / G]`` (elementwise division) and
``Z = -i [P / G^T, V]``, the trace becomes a sum over "lines" ``ij``:

    dPhi(w) = -(k / 4) sum_ij Z_ji Y_ij [ 1 / (G_ij + i w) + 1 / (G_ij - i w) ].

Each line sits at ``|w| = |E_i - E_j|`` with the recombination width ``k``.  ``V`` is linear in the
RF vector, ``V = B1 sum_c n_c V_c``, so the weights are a quadratic form in ``n``: one computation
per static field direction (``W_cd,ij = -(1/4)(Z_c)_ji (Y_d)_ij`` for the three axes ``c, d``) gives the
response to every frequency, polarisation and amplitude, ``dPhi = B1^2 sum_cd <n_c n_d> R_cd(w)``.
The polarisation enters only through the tensor ``<n n^T>``: ``b b^T`` for a field parallel to the
static field ``b``, ``(1 - b b^T) / 2`` perpendicular and averaged over the azimuth, and
``cos^2 a b b^T + sin^2 a (1 - b b^T) / 2`` at an angle ``a`` to it with a random azimuth.

Derivation (broadband noise adds incoherently)
----------------------------------------------
A noise field ``b(t) = n sum_i B_i cos(w_i t + theta_i)`` with independent uniform phases (a
stationary field sampled at the pair's random birth time).  To second order the yield change is a
quadratic functional ``int int K(t1, t2) b(t1) b(t2)`` (the first order vanishes on averaging over
``theta_i``), and ``<cos(w_i t1 + theta_i) cos(w_j t2 + theta_j)> = delta_ij cos(w_i (t1 - t2)) / 2``:
the tones at different frequencies do not interfere, and the change is the sum of the single-tone
changes, ``dPhi = sum_i B_i^2 R(w_i)``.  A tone of amplitude ``B_i`` has mean square ``B_i^2 / 2``;
a band with one-sided power spectral density ``S(f)`` (``T^2 / Hz``, so that the mean square field
is ``int S df``) is the limit of tones with ``B_i^2 = 2 S(f_i) df``:

    dPhi = int 2 S(f) R(2 pi f) df.

For a white band ``[f1, f2]`` the integral is exact in closed form: with ``x = w / k`` and the line
position ``D = (E_i - E_j) / k``, ``int dx / (G/k + i x) = -i ln(1 - i (x - D))`` and
``int dx / (G/k - i x) = i ln(1 + i (x + D))`` (principal logarithms: their arguments keep a positive
real part, so no branch cut is crossed).  Amplitude spectral density ``s`` in nT/sqrt(Hz):
``S = s^2``; an rms amplitude ``b_rms`` over the band: ``S = b_rms^2 / (f2 - f1)``.

Where it holds: second order is the first term of an expansion in the RF rotation angle within a
lifetime, ``eta = gamma_e b_rms / k`` (``gamma_e b_rms`` the precession rate in the rms field); the
neglected fourth order is smaller by about ``eta^2`` (at resonance; less off resonance).  Every
result reports ``eta``; :data:`WEAK_LIMIT` is the value above which results are flagged.  The tests
check the additivity against a direct multi-tone time integration and the single-tone response
against the exact Floquet methods.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from retina.errors import InputError
from retina.spin.operators import GAMMA_E

__all__ = ["Response", "response", "polarisation_tensor", "band_yields", "WEAK_LIMIT", "weak_parameter",
           "psd_T2_per_Hz"]

#: ``eta = gamma_e b_rms / k`` above which the weak-field (second-order) result is flagged.
WEAK_LIMIT = 0.1


def weak_parameter(b_rms_nT: float, k: float) -> float:
    """The weak-field parameter ``eta = gamma_e b_rms / k``.

    The rotation angle of an electron in the rms field per lifetime; results are flagged above
    :data:`WEAK_LIMIT`.

    Parameters
    ----------
    b_rms_nT : float
        rms amplitude of the RF or noise field, nT.
    k : float
        Recombination rate, s^-1.

    Returns
    -------
    float
        Dimensionless.
    """
    return float(GAMMA_E * b_rms_nT * 1e-9 / k)


def psd_T2_per_Hz(band_MHz, *, asd_nT_per_rtHz=None, rms_nT=None, source=None):
    """One-sided power spectral density of a white band from exactly one of its two forms.

    Parameters
    ----------
    band_MHz : (float, float)
        ``(f1, f2)`` with ``0 < f1 < f2``, MHz.
    asd_nT_per_rtHz : float, optional
        Amplitude spectral density, nT/sqrt(Hz).
    rms_nT : float, optional
        rms amplitude over the band, nT.
    source : str, optional
        File named in error messages.

    Returns
    -------
    psd : float
        T^2/Hz.
    b_rms_nT : float
        The band's rms amplitude, nT.

    Raises
    ------
    InputError
        For a bad band, a negative or non-finite amplitude, or not exactly one of the two forms.
    """
    f1, f2 = check_band(band_MHz, source=source)
    if (asd_nT_per_rtHz is None) == (rms_nT is None):
        raise InputError("expected exactly one of an amplitude spectral density (nT/sqrt(Hz)) or an rms "
                         "amplitude (nT) for the band", source=source, key="asd_nT_per_rtHz")
    width_hz = (f2 - f1) * 1e6
    if asd_nT_per_rtHz is not None:
        s = _nonneg(asd_nT_per_rtHz, "asd_nT_per_rtHz", source)
        return (s * 1e-9) ** 2, s * np.sqrt(width_hz)
    r = _nonneg(rms_nT, "rms_nT", source)
    return (r * 1e-9) ** 2 / width_hz, r


def _nonneg(x, key, source):
    try:
        v = float(x)
    except (TypeError, ValueError):
        v = float("nan")
    if not np.isfinite(v) or v < 0:
        raise InputError(f"expected a finite number >= 0, got {x!r}", source=source, key=key)
    return v


def check_band(band_MHz, source=None):
    """Validate a frequency band.

    Parameters
    ----------
    band_MHz : (float, float)
        ``(f1, f2)`` in MHz.
    source : str, optional
        File named in error messages.

    Returns
    -------
    f1, f2 : float
        MHz, with ``0 < f1 < f2``.

    Raises
    ------
    InputError
        Key ``band_MHz``.
    """
    try:
        f1, f2 = (float(v) for v in band_MHz)
    except (TypeError, ValueError):
        raise InputError(f"expected a band [f1, f2] in MHz, got {band_MHz!r}", source=source,
                         key="band_MHz") from None
    if not (np.isfinite(f1) and np.isfinite(f2) and 0 < f1 < f2):
        raise InputError(f"expected a band [f1, f2] in MHz with 0 < f1 < f2, got {band_MHz!r}", source=source,
                         key="band_MHz")
    return f1, f2


def polarisation_tensor(b, kind="perpendicular", *, angle_deg=None, vector=None) -> np.ndarray:
    """The polarisation tensor ``<n n^T>`` of an RF field relative to the static field direction.

    Parameters
    ----------
    b : array_like, shape (3,)
        Unit static field direction (molecular frame).
    kind : {"parallel", "perpendicular", "angle", "vector"}
        ``"parallel"``: ``b b^T``; ``"perpendicular"``: azimuth-averaged, ``(1 - b b^T) / 2``;
        ``"angle"``: at ``angle_deg`` to ``b``, azimuth-averaged; ``"vector"``: ``vector`` fixed in
        the molecular frame, normalised.
    angle_deg : float, optional
        For ``"angle"``, degrees.
    vector : array_like, shape (3,), optional
        For ``"vector"``.

    Returns
    -------
    ndarray, shape (3, 3)
        Symmetric, trace 1.

    Raises
    ------
    InputError
        Key ``rf_direction``, for an unknown kind.
    """
    b = np.asarray(b, dtype=float)
    b = b / np.linalg.norm(b)
    bb = np.outer(b, b)
    perp = 0.5 * (np.eye(3) - bb)
    if kind == "parallel":
        return bb
    if kind == "perpendicular":
        return perp
    if kind == "angle":
        a = np.radians(float(angle_deg))
        return np.cos(a) ** 2 * bb + np.sin(a) ** 2 * perp
    if kind == "vector":
        v = np.asarray(vector, dtype=float)
        v = v / np.linalg.norm(v)
        return np.outer(v, v)
    raise InputError(f"expected polarisation 'parallel', 'perpendicular', 'angle' or 'vector', got {kind!r}",
                     key="rf_direction")


@dataclass(frozen=True)
class Response:
    """Second-order RF response of the reported yield at one static field (module docstring).

    Attributes
    ----------
    k : float
        Recombination rate, s^-1 (frequencies below are in units of ``k``).
    static : float
        Reported yield without RF.
    direction : ndarray (3,)
        Unit static field direction (molecular frame).
    field_uT : float
    delta : ndarray (L,)
        Line positions ``(E_i - E_j) / k``.
    zt, y : ndarray (3, L) complex
        ``(Z_c)_ji`` and ``(Y_c)_ij`` per line ``ij`` for an RF field of 1 T along axis ``c``; the
        line weights are ``W_cd = -(1/4) zt_c y_d`` (the ``-1/4`` of the docstring included).
    """

    k: float
    static: float
    direction: np.ndarray
    field_uT: float
    delta: np.ndarray
    zt: np.ndarray
    y: np.ndarray

    def lines(self, pol: np.ndarray) -> np.ndarray:
        """Line weights ``sum_cd pol_cd W_cd`` for a polarisation tensor.

        Parameters
        ----------
        pol : ndarray (3, 3)
            Polarisation tensor ``<n n^T>`` of the RF field's unit direction ``n`` (molecular frame),
            from :func:`polarisation_tensor`.

        Returns
        -------
        ndarray (L,) complex
            The weight of each line ``ij`` (ordered as :attr:`delta`), per T^2 of RF amplitude.
        """
        py = np.asarray(pol, dtype=float) @ self.y                  # (3, L): sum_d pol_cd y_d
        return -0.25 * np.sum(self.zt * py, axis=0)

    def tone(self, freqs_MHz, pol) -> np.ndarray:
        """Yield change per nT^2 of a single tone of amplitude ``B1`` at each frequency.

        Parameters
        ----------
        freqs_MHz : float or array_like (F,)
            Tone frequencies, MHz.
        pol : ndarray (3, 3)
            Polarisation tensor of the tone (:func:`polarisation_tensor`).

        Returns
        -------
        ndarray (F,)
            Second-order change of the reported yield per nT^2 of ``B1**2``.
        """
        return self.tones(freqs_MHz, [pol])[0]

    def tones(self, freqs_MHz, pols) -> np.ndarray:
        """:meth:`tone` for several polarisations at once, vectorised over frequencies, (P, F).

        Lines ``ij`` and ``ji`` are merged (``G_ji = conj(G_ij)``, so the bracket of ``ji`` is the
        conjugate of that of ``ij`` and only ``Re[(w_ij + conj(w_ji)) (...)]`` is needed), and lines of
        zero weight for every polarisation are skipped; the result equals the line-by-line sum up to
        rounding.

        Parameters
        ----------
        freqs_MHz : float or array_like (F,)
            Tone frequencies, MHz.
        pols : sequence of ndarray (3, 3)
            ``P`` polarisation tensors (:func:`polarisation_tensor`).

        Returns
        -------
        ndarray (P, F)
            Yield change per nT^2 of ``B1**2`` for each polarisation and frequency.
        """
        pols = [np.asarray(p, dtype=float) for p in pols]
        n = int(round(np.sqrt(self.delta.size)))
        iu = np.triu_indices(n, 1)
        ws = []
        for p in pols:
            w = self.lines(p).reshape(n, n)
            ws.append(np.concatenate([np.real(np.diag(w)) + 0j, w[iu] + np.conj(w.T[iu])]))
        wmat = np.stack(ws)                                               # (P, M)
        d = np.concatenate([np.zeros(n), self.delta.reshape(n, n)[iu]])
        keep = np.flatnonzero(np.any(wmat != 0, axis=0))
        wmat, d = wmat[:, keep], d[keep]
        g = -1.0 - 1j * d
        x = 2 * np.pi * np.atleast_1d(np.asarray(freqs_MHz, dtype=float)) * 1e6 / self.k
        out = np.empty((len(pols), x.size))
        step = max(1, 2_000_000 // max(d.size, 1))                        # about 32 MB of temporaries
        for a in range(0, x.size, step):
            xi = x[a:a + step, None]
            br = 1.0 / (g[None] + 1j * xi) + 1.0 / (g[None] - 1j * xi)      # (f, M)
            out[:, a:a + step] = np.real(wmat @ br.T)
        return out * 1e-18

    def band(self, band_MHz, pol, psd_T2_Hz: float) -> float:
        """Yield change in a white band of RF noise, by the closed-form integral over the band.

        Parameters
        ----------
        band_MHz : sequence of two floats
            Band edges ``[f1, f2]``, MHz, ``0 < f1 < f2`` (:func:`check_band`).
        pol : ndarray (3, 3)
            Polarisation tensor of the noise field (:func:`polarisation_tensor`).
        psd_T2_Hz : float
            One-sided power spectral density of the field inside the band, T^2/Hz (flat).

        Returns
        -------
        float
            Second-order change of the reported yield.
        """
        f1, f2 = check_band(band_MHz)
        w = self.lines(pol)
        x1, x2 = (2 * np.pi * f * 1e6 / self.k for f in (f1, f2))
        d = self.delta

        def prim(x):
            return -1j * np.log(1.0 - 1j * (x - d)) + 1j * np.log(1.0 + 1j * (x + d))

        integral = np.real(np.sum(w * (prim(x2) - prim(x1))))      # int R dx, per T^2
        return float(2.0 * psd_T2_Hz * self.k / (2 * np.pi) * integral)


class _Basis:
    """Operators of the pair in the eigenbasis of ``H0``, with separable (Kronecker) structure when possible."""

    def __init__(self, system, b_t):
        from retina.spin import operators as ops

        k = float(system.k_singlet)
        self.sep = not system.electron_coupled
        if self.sep:
            from retina.spin.separable import radical_operators

            mats = []
            evs = []
            for r in system.radicals:
                s_e, h_hf, zee = radical_operators(r)
                h = (h_hf + np.einsum("j,jab->ab", b_t @ zee, s_e)) / k
                e, u = np.linalg.eigh(h)
                evs.append(e)
                s_rot = u.conj().T[None] @ s_e @ u[None]                   # (3, d, d)
                v_rot = np.einsum("cj,jab->cab", zee / k, s_rot)          # per tesla along axis c
                mats.append((s_rot, v_rot))
            (sa, va), (sb, vb) = mats
            self.da, self.db = sa.shape[1], sb.shape[1]
            self.energy = (evs[0][:, None] + evs[1][None, :]).reshape(-1)
            ps = 0.25 * np.eye(self.da * self.db) - sum(np.kron(sa[a], sb[a]) for a in range(3))
            self.v = [(va[c], vb[c]) for c in range(3)]
        else:
            parts = ops.hamiltonian_parts(system)
            h = (parts.h0 + np.einsum("j,jab->ab", b_t, parts.hb)) / k
            e, u = np.linalg.eigh(h)
            self.energy = e
            space = parts.space
            ps = u.conj().T @ ops.singlet_projector(space) @ u
            self.v = [u.conj().T @ (parts.hb[c] / k) @ u for c in range(3)]
        d = self.energy.size
        m = d / 4.0
        if system.initial_state == "singlet":
            self.rho0 = ps / m
        else:
            self.rho0 = (np.eye(d) - ps) / (3 * m)
        self.proj = ps if system.reported_yield == "singlet" else np.eye(d) - ps

    def vmul(self, c, x, left):
        """``V_c x`` (left) or ``x V_c``."""
        v = self.v[c]
        if not self.sep:
            return v @ x if left else x @ v
        va, vb = v
        da, db = self.da, self.db
        d = da * db
        if left:      # (A x 1) X + (1 x B) X, rows indexed (j, q): two plain matrix products
            out = (va @ x.reshape(da, db * d)).reshape(da, db, d)
            xb = np.ascontiguousarray(x.reshape(da, db, d).transpose(1, 0, 2)).reshape(db, da * d)
            out += (vb @ xb).reshape(db, da, d).transpose(1, 0, 2)
        else:         # X (A x 1) + X (1 x B), columns indexed (j, q)
            x4 = x.reshape(d, da, db)
            out = np.matmul(va.T[None], x4) + x4 @ vb
        return out.reshape(d, d)

    def comm(self, c, x):
        """``-i [V_c, x]`` for a Hermitian ``x`` (then ``x V_c = (V_c x)^+``: one product)."""
        a = self.vmul(c, x, True)
        return -1j * (a - a.conj().T)


def response(system, field_uT, direction) -> Response:
    """The second-order RF response at one static field (module docstring).

    Parameters
    ----------
    system : SpinSystem
        Equal rates, no relaxation.
    field_uT : float
        Static field strength, microtesla.
    direction : array_like, shape (3,)
        Static field direction, molecular frame.

    Returns
    -------
    Response
    """
    from retina.spin.hilbert import validate_field

    src = system.source
    if not system.equal_rates or system.relaxation.any:
        raise InputError("the broadband (second-order) RF response needs equal recombination rates and no "
                         "relaxation; use the Floquet methods of retina.spin.rf for single tones", source=src,
                         key="k_triplet")
    b, dirs = validate_field(field_uT, np.asarray(direction, dtype=float).reshape(1, 3), src)
    bd = dirs[0]
    basis = _Basis(system, b * bd)
    e = basis.energy
    delta = e[:, None] - e[None, :]
    g = -1.0 - 1j * delta
    rho1 = basis.rho0 / g
    phat = basis.proj / g.T
    # rho0 / G and P / G^T are Hermitian (G_ji = conj(G_ij)), so each commutator is one product
    ys = [basis.comm(c, rho1) for c in range(3)]
    zs = [-basis.comm(c, phat) for c in range(3)]        # Z_c = -i [P / G^T, V_c] = i [V_c, P / G^T]
    zt = np.stack([np.ascontiguousarray(z.T).reshape(-1) for z in zs])
    yv = np.stack([yy.reshape(-1) for yy in ys])
    static = float(np.real(np.sum(basis.proj.T * (basis.rho0 / -g))))     # k Tr[P (-L0^-1) rho0]
    return Response(k=float(system.k_singlet), static=static, direction=bd, field_uT=float(b * 1e6),
                    delta=delta.reshape(-1), zt=zt, y=yv)


def band_yields(system, field_uT, directions, band_MHz, *, rf_direction="perpendicular", angle_deg=None,
                asd_nT_per_rtHz=None, rms_nT=None, progress=None):
    """Reported yields under a weak white noise band, for many static field directions.

    Parameters
    ----------
    system : SpinSystem
    field_uT : float
    directions : array_like (N, 3)
    band_MHz : (float, float)
    rf_direction : {"perpendicular", "parallel", "angle"} or array_like (3,)
        Polarisation (a vector is fixed in the molecular frame).
    angle_deg : float, optional
        For ``"angle"``.
    asd_nT_per_rtHz, rms_nT : float
        Exactly one: the band's amplitude spectral density or its rms amplitude.
    progress : callable(done, total), optional

    Returns
    -------
    yields : ndarray (N,)
    info : dict
        ``static`` (N,), ``eta`` (the weak-field parameter), ``b_rms_nT``, ``psd_T2_per_Hz``,
        ``valid`` (eta below :data:`WEAK_LIMIT`).
    """
    psd, b_rms = psd_T2_per_Hz(band_MHz, asd_nT_per_rtHz=asd_nT_per_rtHz, rms_nT=rms_nT, source=system.source)
    dirs = np.asarray(directions, dtype=float).reshape(-1, 3)
    out = np.empty(len(dirs))
    static = np.empty(len(dirs))
    for i, d in enumerate(dirs):
        r = response(system, field_uT, d)
        if isinstance(rf_direction, str):
            pol = polarisation_tensor(r.direction, rf_direction, angle_deg=angle_deg)
        else:
            pol = polarisation_tensor(r.direction, "vector", vector=rf_direction)
        static[i] = r.static
        out[i] = r.static + r.band(band_MHz, pol, psd)
        if progress is not None:
            progress(i + 1, len(dirs))
    eta = weak_parameter(b_rms, float(system.k_singlet))
    return out, {"static": static, "eta": eta, "b_rms_nT": b_rms, "psd_T2_per_Hz": psd,
                 "valid": eta < WEAK_LIMIT}
