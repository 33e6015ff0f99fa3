"""Stage ``rf_sweep``: a frequency sweep at a fixed RF amplitude for one or more pair lifetimes.

The RF conditions side by side with the control (stage ``rf``) and the conventions shared with
it (degree, exact tones, the control) live in :mod:`retina.stages.rf`.

Conventions (owned here)
------------------------
- Sweep: for each lifetime (``k_S = k_T = k = 1 / lifetime``) one second-order response
  (:func:`retina.spin.broadband.response`) per direction of the degree's hemisphere grid gives the
  static yield function and the yield change per nT^2 at every frequency, perpendicular
  (azimuth-averaged) and parallel (:func:`sweep_spectra`, cached by content); a tone of amplitude
  ``b`` gives the yield function ``c0 + b^2 D(f)``.  The single-pose bound is computed from the
  coefficients through :class:`BoundModel` (the counts are linear in the coefficients, so one
  evaluation per basis function serves every frequency and amplitude).  At the swept frequencies
  ``sweep_MHz`` the bound is computed from the yield function itself; when the weak-field parameter
  ``eta = gamma_e b / k`` at ``sweep_nT`` exceeds :data:`retina.spin.broadband.WEAK_LIMIT`, those
  yield functions come from the exact tone method instead (slower).  On the curve (``sweep_points``
  log-spaced frequencies) the bound's response is linearised in ``b^2``:
  ``(B / B0)^2 = 1 + b^2 s(f)`` with ``s = g . D(f)`` and ``g`` the exact gradient of ``(B / B0)^2``
  with respect to the coefficients at the control.  ``linearisation_error`` compares the two at the
  swept frequencies.  Trials (``trials.n_trials``, scan of ``trials.scan_steps`` poses, at
  ``sweep_light``) run for the control and at the swept frequency with the largest perpendicular
  bound.
- Onset of disorientation (per lifetime): the lowest curve frequency at which the perpendicular
  field of ``sweep_nT`` raises the single-pose bound by ``onset_rise`` (0.1 = 10 %) over the
  control's, interpolated linearly in log frequency (:func:`first_crossing`); NaN when no curve
  frequency reaches it.  The ratio of bounds does not depend on the light level.
- Threshold amplitude (per lifetime, frequency and polarisation): the amplitude giving that rise,
  ``b_q = sqrt(((1 + q)^2 - 1) / s(f))`` (:func:`threshold_amplitude`; NaN where the field does not
  raise the bound), with ``eta`` at that amplitude.  It is the planning curve "amplitude needed to
  disorient against frequency"; where ``eta > WEAK_LIMIT`` it is an extrapolation of second order.
  The onset at any amplitude ``b`` is the lowest frequency at which ``b_q(f) <= b``.

Two frequency scales (why the onset moves with the lifetime)
-------------------------------------------------------------
In the eigenbasis of the static Hamiltonian the response is a sum over lines ``ij`` of
``Re[W_ij (1 / (G_ij + i w) + 1 / (G_ij - i w))]`` with ``G_ij = -k - i (E_i - E_j)``
(:mod:`retina.spin.broadband`).  Lines with ``E_i = E_j`` (populations, degenerate levels) give
``-2 k W / (k^2 + w^2)``: a Lorentzian of half-width ``k`` centred at zero frequency.  Lines at
``|E_i - E_j| >> w`` are flat in ``w``.  So for frequencies below the pair's line spacings
``R(w) = C + A / (1 + (w / k)^2)``.  ``A`` comes from paths through a population: a coherence of
``rho0`` (``~ 1 / delta``) turned into a population by the RF, kept for ``1 / (k +/- i w)`` and turned
back (``~ 1 / delta``), times the prefactor ``k``: ``A ~ V^2 / delta^2``, independent of ``k``.  It is
the energy modulation: a field much slower than the recombination rate acts like a slowly changing
static field (quasi-static), and the part of its effect that comes from shifting the energy levels
averages out once the field changes within the lifetime, ``w > k``; the part from turning the
eigenstates (``C``) follows the field adiabatically up to the line spacings.  When ``A`` and ``C``
do not depend on ``k`` (line spacings much larger than ``k``; the tests check it) the response
leaves its quasi-static value ``R(0) = A + C`` by a fixed fraction ``e`` at
``w = k sqrt(e |R(0)| / (|A| - e |R(0)|))``: a fixed multiple of ``k``, so that frequency scales as
1 / lifetime (:func:`departure_frequency` with ``e = 0.5``, stored as ``departure_MHz``).  A field
parallel to the static one modulates only its strength, so its response is dominated by ``A``:
``departure_MHz`` is taken from the parallel response.  The second scale is the pair's own
transition frequencies (hyperfine and Larmor, about 0.1-50 MHz), which do not depend on the
lifetime: there the response has resonant lines of width ``k`` whose height grows with the
lifetime (as ``eta^2``), so a longer-lived pair needs a weaker field at resonance, and the
threshold curve shows both scales.  A rise of the bound by 10 % needs the RF to turn an electron
spin by a sizeable angle within a lifetime (``eta`` of order 1 for the demo pair), outside second
order: there the threshold curve is indicative and an exact tone (``[[rf.conditions]]``,
``retina rf``) checks it.

RF exposure: the numbers describe a model.  Experiments with RF transmitters follow the usual
cautions and local regulations and need the ethics approval of the place where they are done.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np

from retina.stages._common import GridModel, Stage, grid_offsets, rms_bound, signal_model, stage_rng
from retina.stages.rf import pair_system, rf_yield_function_for, spin_field_uT

__all__ = ["compute_rf_sweep", "sweep_spectra", "BoundModel", "relative_anisotropy", "threshold_amplitude",
           "first_crossing", "departure_frequency", "curve_frequencies", "SWEEP_STAGE"]

def _with_lifetime(system, lifetime_us):
    import dataclasses

    k = 1e6 / float(lifetime_us)
    return dataclasses.replace(system, k_singlet=k, k_triplet=k)


def curve_frequencies(freqs_MHz, points: int) -> np.ndarray:
    """The sweep's curve frequencies: ``points`` log-spaced between the lowest and highest of
    ``freqs_MHz``, joined with ``freqs_MHz`` itself (sorted, duplicates removed), MHz.

    Parameters
    ----------
    freqs_MHz : array_like (F,)
        The swept frequencies, MHz, > 0, in any order.
    points : int
        Log-spaced points to add; fewer than 2, or a single distinct frequency, adds none.

    Returns
    -------
    ndarray (Y,)
        Increasing frequencies, MHz; ``Y <= F + points``.  Every swept frequency is among them.
    """
    f = np.asarray(freqs_MHz, float)
    if points >= 2 and f.max() > f.min():
        f = np.concatenate([np.geomspace(f.min(), f.max(), int(points)), f])
    return np.unique(f)


def _spectra_key(system, field_uT, degree, curve) -> str:
    import retina
    from retina.spin.io import dump_system

    record = {"system": dump_system(system), "field_uT": repr(float(field_uT)), "degree": int(degree),
              "curve_MHz": [repr(float(x)) for x in curve], "retina": retina.__version__,
              "what": "rf sweep response spectra"}
    return hashlib.sha256(json.dumps(record, sort_keys=True).encode("utf-8")).hexdigest()


def sweep_spectra(system, field_uT, degree: int, curve_MHz, *, cache: bool = True):
    """The control's coefficients and the coefficients of the yield change per nT^2 of a weak tone.

    One second-order response (:func:`retina.spin.broadband.response`) per direction of the
    degree's hemisphere grid serves every frequency and amplitude (module docstring, "Sweep").
    Cached by content (``rf-spectra/<sha256>.npz`` in the cache folder, :mod:`retina.cache`).

    Parameters
    ----------
    system : SpinSystem
        Equal rates, no relaxation.
    field_uT : float
    degree : int
        Even harmonic degree ``L``.
    curve_MHz : array_like (Y,)
        Frequencies, MHz.
    cache : bool

    Returns
    -------
    static : ndarray (K,)
        Coefficients of the yield function without RF (``K = (L + 1)(L + 2) / 2``).
    change : ndarray (2, Y, K)
        Coefficients of the yield change per nT^2 of amplitude squared, perpendicular
        (azimuth-averaged) and parallel.
    """
    from retina import sphere
    from retina.cache import default_cache_dir
    from retina.spin import broadband as bb

    curve = np.asarray(curve_MHz, float)
    path = None
    if cache:
        path = default_cache_dir() / "rf-spectra" / (_spectra_key(system, field_uT, degree, curve) + ".npz")
        try:
            with np.load(path) as z:
                static, change = np.array(z["static"]), np.array(z["change"])
            if change.shape == (2, curve.size, static.size):
                return static, change
        except (OSError, KeyError, ValueError):
            pass
    grid = sphere.grid_for_degree(degree)
    half, full = grid.hemisphere()
    vals = np.empty(half.size)
    dvals = np.empty((2, curve.size, half.size))
    for j, d in enumerate(grid.points[half]):
        r = bb.response(system, field_uT, d)
        vals[j] = r.static
        dvals[:, :, j] = r.tones(curve, [bb.polarisation_tensor(r.direction, k) for k in ("perpendicular",
                                                                                           "parallel")])
    static = sphere.fit_even(vals[full], grid, degree)
    change = sphere.fit_even(dvals[..., full], grid, degree)
    if path is not None:
        import io
        import warnings

        from retina.io.atomic import atomic_write_bytes

        buf = io.BytesIO()
        np.savez(buf, static=static, change=change)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            atomic_write_bytes(path, buf.getvalue(), force=True)
        except OSError as exc:   # the result stands; only the cache entry is lost
            warnings.warn(f"could not write the RF spectra cache entry: {exc}", stacklevel=2)
    return static, change


class BoundModel:
    """The single-pose heading information as a function of the yield-function coefficients.

    The expected counts and their heading derivative are linear in the coefficients (ordering
    average, pattern and photon catch are all linear maps of the yield function), so they are
    computed once for each basis coefficient vector and then combined for any yield function of
    the same degree; the information (:func:`retina.readout.fisher.gain_schur` or
    :func:`~retina.readout.fisher.poisson_information`) and the rms bound follow as in
    :mod:`retina.stages.precision`.

    Parameters
    ----------
    sc : Scenario
    built : Built
    degree : int
    """

    def __init__(self, sc, built, degree: int):
        from retina import sphere
        from retina.build import build_retina
        from retina.signal.noise import trig_interp_matrix
        from retina.stages._common import GRID
        from retina.yieldfn import YieldFunction

        K = sphere.n_coeffs(degree)
        self.gain = sc["readout"]["nuisance"] == "gain"
        grid = np.arange(GRID) * 360.0 / GRID
        lam, dlam = [], []
        for k in range(K):
            model = build_retina(sc, YieldFunction(np.eye(K)[k], degree), built.receptors)
            nodes, a, b = signal_model(sc, model, built.field).fourier_nodes(degree)
            lam.append(a)
            dlam.append(b)
        # the model is a trigonometric polynomial of degree L in the heading: 2 L + 1 nodes hold it
        # exactly (SignalModel.expected_and_derivative_fourier), interpolated to the grid by W
        self.w = trig_interp_matrix(np.deg2rad(nodes), np.deg2rad(grid), int(degree))     # (G, M)
        self.lam = np.stack(lam)      # (K, M, N) at one photon per receptor
        self.dlam = np.stack(dlam)

    def _nodes(self, coeffs):
        """Expected counts and their derivative at the ``M`` Fourier nodes, ``(M, N)`` each."""
        c = np.asarray(coeffs, float)
        return np.tensordot(c, self.lam, axes=1), np.tensordot(c, self.dlam, axes=1)

    def _counts(self, coeffs):
        ln, dn = self._nodes(coeffs)
        return self.w @ ln, self.w @ dn

    def info(self, coeffs) -> np.ndarray:
        """Heading information per photon at the grid headings.

    Parameters
    ----------
    coeffs : array_like (K,)
        Yield-function coefficients of the model's degree.

    Returns
    -------
    ndarray (G,)
        Fisher information about the heading, rad^-2, with one photon expected per receptor (it
        scales with the photon count), at the decoder grid's ``G`` headings
        (:data:`retina.stages._common.GRID`, one-degree steps); with a free gain the
        gain-marginalised (Schur complement) information.
    """
        from retina.readout.fisher import interpolated_information

        # the grid's (G, N) counts are never stored: one compiled pass interpolates and sums
        ln, dn = self._nodes(coeffs)
        return interpolated_information(self.w, ln, dn, "gain" if self.gain else "none")

    def bound(self, coeffs, photons) -> np.ndarray:
        """The rms Cramer-Rao bound over the grid headings at each photon level (:func:`rms_bound`).

    Parameters
    ----------
    coeffs : array_like (K,)
        Yield-function coefficients of the model's degree.
    photons : array_like (V,)
        Photons per receptor per look at each light level.

    Returns
    -------
    ndarray (V,)
        The bound, degrees.
    """
        return rms_bound(np.asarray(photons, float), self.info(coeffs))

    def power_gradient(self, coeffs) -> np.ndarray:
        """``d(B^2 / B0^2) / dc`` at ``coeffs`` (B the bound, B0 its value there), ``(K,)``: exact.

        ``B^2`` is proportional to ``mean_h 1 / I_h``, so the gradient is
        ``-mean_h(I_h^-2 dI_h/dc) / mean_h(1 / I_h)``, with ``dI/dc_k`` of
        ``I = sum dlam^2 / lam [- (sum dlam)^2 / sum lam]`` taken term by term.

        Parameters
        ----------
        coeffs : array_like (K,)
            Yield-function coefficients where the gradient is taken (the control's, for the sweep).

        Returns
        -------
        ndarray (K,)
            ``d(B^2 / B0^2) / dc_k``, dimensionless per unit coefficient; independent of the light
            level (the photon count scales ``B^2`` and ``B0^2`` alike).
        """
        lam, dlam = self._counts(coeffs)
        r = dlam / lam
        info = np.sum(dlam * r, axis=-1)
        s, sd = lam.sum(-1), dlam.sum(-1)
        if self.gain:
            info = info - sd**2 / s
        inv = 1.0 / info
        # dI_h/dc_k = sum_n (2 r dk - r^2 lk) with lk = W lam_k and dk = W dlam_k interpolated
        # from the nodes, so sum_n r_hn dk_hn = sum_m W_hm (r @ dlam_k^T)_hm: two products over
        # the receptors for every k and node at once, no (G, N) array per coefficient
        K, M, N = self.lam.shape
        rd = (r @ self.dlam.reshape(K * M, N).T).reshape(-1, K, M)
        rl = ((r * r) @ self.lam.reshape(K * M, N).T).reshape(-1, K, M)
        di = np.einsum("hm,hkm->hk", self.w, 2.0 * rd - rl)                       # (G, K)
        if self.gain:
            lk = self.w @ self.lam.sum(-1).T                                       # (G, K): sum_n lk
            dk = self.w @ self.dlam.sum(-1).T
            di -= 2.0 * (sd / s)[:, None] * dk - ((sd / s) ** 2)[:, None] * lk
        return -np.mean(di * (inv**2)[:, None], axis=0) / np.mean(inv)


def threshold_amplitude(sensitivity, rise: float) -> np.ndarray:
    """The amplitude whose bound is ``1 + rise`` times the control's, at second order (nT).

    Derived: at second order the yield change is ``b^2 D(f)``, so the bound's square changes as
    ``B^2 / B0^2 = 1 + b^2 s(f)`` to first order in ``b^2`` with ``s = g . D`` (``g`` the
    gradient of ``B^2 / B0^2`` with respect to the coefficients, :meth:`BoundModel.power_gradient`);
    ``B / B0 = 1 + rise`` then needs ``b^2 = ((1 + rise)^2 - 1) / s``.  NaN where ``s <= 0`` (the
    field does not raise the bound at second order).

    Parameters
    ----------
    sensitivity : array_like
        ``s(f)`` in nT^-2.
    rise : float
        Relative rise of the bound, > 0.

    Returns
    -------
    ndarray
        Amplitudes in nT, the shape of ``sensitivity``.
    """
    s = np.asarray(sensitivity, float)
    need = (1.0 + float(rise)) ** 2 - 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(s > 0, np.sqrt(need / np.where(s > 0, s, 1.0)), np.nan)


def first_crossing(freqs_MHz, values, level: float) -> float:
    """The lowest frequency at which ``values`` reaches ``level``, linear in log frequency.

    Parameters
    ----------
    freqs_MHz : array_like (F,)
        Increasing, > 0.
    values : array_like (F,)
    level : float

    Returns
    -------
    float
        MHz: the first point itself when it already reaches ``level``, else the log-linear
        interpolation between the last point below and the first at or above it; NaN when no point
        reaches it.
    """
    f = np.asarray(freqs_MHz, float)
    v = np.asarray(values, float)
    hit = np.flatnonzero(v >= level)
    if hit.size == 0:
        return float("nan")
    i = int(hit[0])
    if i == 0:
        return float(f[0])
    x0, x1 = np.log(f[i - 1]), np.log(f[i])
    t = (level - v[i - 1]) / (v[i] - v[i - 1])
    return float(np.exp(x0 + t * (x1 - x0)))


def departure_frequency(freqs_MHz, response, fraction: float = 0.5) -> float:
    """Where a response leaves its quasi-static value: the lowest frequency at which
    ``|R(f) - R(f_0)| >= fraction |R(f_0)|``, ``f_0`` the lowest frequency (MHz; NaN if never).

    Derived (module docstring, "Two frequency scales"): below the pair's line spacings the
    response is ``C + A / (1 + (2 pi f / k)^2)`` with ``A`` and ``C`` set by the level structure,
    so this frequency is a fixed multiple of ``k / (2 pi)`` and moves as 1 / lifetime.

    Parameters
    ----------
    freqs_MHz : array_like (F,)
        Increasing frequencies, MHz, > 0; the first is taken as quasi-static.
    response : array_like (F,)
        The response at those frequencies (any unit).
    fraction : float
        Relative departure that counts, > 0.

    Returns
    -------
    float
        MHz, interpolated linearly in log frequency (:func:`first_crossing`); NaN when the response
        never departs that far or its quasi-static value is 0.
    """
    r = np.asarray(response, float)
    if r[0] == 0:
        return float("nan")
    return first_crossing(freqs_MHz, np.abs(r - r[0]) / abs(r[0]), fraction)


def relative_anisotropy(coeffs, degree: int) -> float:
    """``(max - min) / mean`` of a yield function over the sphere.

    Degree 2 exactly: an even function of degree <= 2 on the unit sphere is a quadratic form
    ``b^T M b`` (``M`` from its values at the axes and the axis bisectors), whose extremes are the
    eigenvalues of ``M``; higher degrees through :meth:`retina.yieldfn.YieldFunction.anisotropy`.

    Parameters
    ----------
    coeffs : array_like (K,)
        Coefficients of an even yield function, ``K = (L + 1)(L + 2) / 2``.
    degree : int
        Its even degree ``L``.

    Returns
    -------
    float
        ``(max - min) / mean`` over directions, dimensionless.
    """
    from retina import sphere
    from retina.yieldfn import YieldFunction

    yf = YieldFunction(coeffs, degree)
    if degree != 2:
        return float(yf.anisotropy().relative)
    e = np.eye(3)
    pairs = [(0, 1), (0, 2), (1, 2)]
    pts = np.concatenate([e, [(e[i] + e[j]) / np.sqrt(2.0) for i, j in pairs]])
    v = sphere.evaluate(np.asarray(coeffs, float), pts)
    m = np.diag(v[:3])
    for n, (i, j) in enumerate(pairs):
        m[i, j] = m[j, i] = v[3 + n] - 0.5 * (v[i] + v[j])
    w = np.linalg.eigvalsh(m)
    return float((w[-1] - w[0]) / yf.mean)


def _trial_r(sc, built, coeffs, degree: int, light: str) -> float:
    """Mean vector length of the simulated trials at one light level (as :func:`_metrics`)."""
    from retina.build import build_retina
    from retina.readout.trials import simulate_trials
    from retina.yieldfn import YieldFunction

    model = build_retina(sc, YieldFunction(coeffs, degree), built.receptors)
    gain = "free" if sc["readout"]["nuisance"] == "gain" else "known"
    tr = sc["trials"]
    amp = sc["scan"]["amplitude_deg"]
    offs = grid_offsets(np.linspace(-amp, amp, tr["scan_steps"]) if tr["scan_steps"] > 1 else np.zeros(1))
    mk = GridModel(signal_model(sc, model, built.field, pitch=sc["scan"]["pitch_deg"]), model.degree, gain)
    ph = float(sc["light"]["photons"][list(sc["light"]["names"]).index(light)])
    r = simulate_trials(mk.truth(ph), mk.decoder(ph), tr["n_trials"], goal_deg=tr["goal_deg"],
                        scan_offsets_deg=offs, rng=stage_rng(sc.seed, f"rf/{light}"),
                        sampler="direct")   # common random numbers: the control and the swept field, one seed
    return float(r.rayleigh.r)


def compute_rf_sweep(built, progress=None) -> dict | None:
    """The frequency sweep of ``[rf]`` (module docstring, "Sweep"); None without ``sweep_MHz``.

    Parameters
    ----------
    built : retina.build.Built
        The scenario's built objects (scenario, field, receptors).
    progress : callable(done, total), optional
        Called once the bound model is built and after each lifetime (``total`` = lifetimes + 1).

    Returns
    -------
    dict or None
        At the swept frequencies ``freqs_MHz (F,)`` and amplitude ``amplitude_nT``:
        ``perp_bound_deg``/``par_bound_deg (T, F, V)`` (bounds from the second-order yield
        functions), ``perp_anisotropy``/``par_anisotropy (T, F)``; per lifetime
        ``lifetimes_us (T,)``: ``eta (T,)`` at the sweep amplitude, ``control_bound_deg (T, V)``,
        ``control_anisotropy (T,)``, trials (``control_r``, and ``trial_MHz``, ``trial_perp_r (T,)``
        at the swept frequency of the largest perpendicular bound); on the curve
        ``curve_MHz (Y,)``: ``perp_sensitivity``/``par_sensitivity (T, Y)`` (``s(f)``, nT^-2),
        ``perp_rise``/``par_rise (T, Y)`` (bound / control - 1 at the sweep amplitude),
        ``perp_threshold_nT``/``par_threshold_nT (T, Y)`` (NaN: never) and ``threshold_eta (T, Y)``
        (perpendicular); ``onset_MHz (T,)`` (NaN: none in the sweep), ``departure_MHz (T,)``,
        ``linearisation_error (T,)``; ``onset_rise``, ``light_names``, ``light_photons (V,)``,
        ``sweep_light``, ``method``, ``degree``.
    """
    from retina.spin import broadband as bb
    from retina.spin.operators import GAMMA_E
    from retina.yieldfn import YieldFunction

    sc = built.scenario
    rfc = sc["rf"]
    freqs = np.asarray(rfc["sweep_MHz"], float)
    if freqs.size == 0:
        return None
    system0 = pair_system(sc)
    field = spin_field_uT(sc, built.field)
    L = int(rfc["degree"])
    amp = float(rfc["sweep_nT"])
    q = float(rfc["onset_rise"])
    curve = curve_frequencies(freqs, rfc["sweep_points"])
    at = np.searchsorted(curve, freqs)             # the swept frequencies on the curve
    lifetimes = list(rfc["sweep_lifetimes_us"]) or [1e6 / float(system0.k_singlet)]
    names = list(sc["light"]["names"])
    photons = np.asarray(sc["light"]["photons"], float)
    light = rfc["sweep_light"] or names[-1]
    T, F, Y, nv = len(lifetimes), freqs.size, curve.size, len(names)
    out = {k: np.full((T, F, nv), np.nan) for k in ("perp_bound_deg", "par_bound_deg")}
    out.update({k: np.full((T, F), np.nan) for k in ("perp_anisotropy", "par_anisotropy")})
    out.update({k: np.full((T, Y), np.nan) for k in ("perp_sensitivity", "par_sensitivity", "perp_rise",
                                                       "par_rise", "perp_threshold_nT", "par_threshold_nT",
                                                       "threshold_eta")})
    out.update({k: np.full(T, np.nan) for k in ("control_r", "control_anisotropy", "trial_MHz", "trial_perp_r",
                                                 "onset_MHz", "departure_MHz",
                                                 "linearisation_error", "eta")})
    out["control_bound_deg"] = np.full((T, nv), np.nan)
    total = T + 1
    methods = []
    li = names.index(light)
    bm = BoundModel(sc, built, L)
    if progress:
        progress(1, total)
    for t, tau in enumerate(lifetimes):
        system = _with_lifetime(system0, tau)
        k = float(system.k_singlet)
        out["eta"][t] = bb.weak_parameter(amp, k)
        static, change = sweep_spectra(system, field, L, curve, cache=rfc["cache"])
        out["control_bound_deg"][t] = bm.bound(static, photons)
        out["control_anisotropy"][t] = relative_anisotropy(static, L)
        grad = bm.power_gradient(static)
        weak = out["eta"][t] <= bb.WEAK_LIMIT
        methods.append("second-order response" if weak else
                       "exact tones (separable RF or Floquet) at the swept frequencies, second order on the curve")
        exact_control = None if weak else YieldFunction.from_system(system, field, L,
                                                                    check_points=rfc["check_points"]).coeffs
        swept = {"perp": {}, "par": {}}
        for p, kind in enumerate(("perp", "par")):
            s = change[p] @ grad                                         # (Y,) per nT^2
            out[f"{kind}_sensitivity"][t] = s
            out[f"{kind}_rise"][t] = np.sqrt(np.maximum(1.0 + amp**2 * s, 0.0)) - 1.0
            out[f"{kind}_threshold_nT"][t] = threshold_amplitude(s, q)
            for f in range(F):
                c = static + amp**2 * change[p, at[f]]
                if not weak:      # outside second order: the exact tone at the swept frequencies
                    rec = {"kind": "tone", "direction": "perpendicular" if kind == "perp" else "parallel",
                           "frequency_MHz": float(freqs[f]), "amplitude_nT": amp}
                    c = rf_yield_function_for(system, field, rec, degree=L, check_points=rfc["check_points"],
                                              tol=rfc["tol"], cache=rfc["cache"]).coeffs
                    c = static + (np.asarray(c) - exact_control)
                swept[kind][f] = c
                out[f"{kind}_bound_deg"][t, f] = bm.bound(c, photons)
        out["threshold_eta"][t] = GAMMA_E * out["perp_threshold_nT"][t] * 1e-9 / k
        exact_rise = np.concatenate([out[f"{kd}_bound_deg"][t, :, li] / out["control_bound_deg"][t, li] - 1.0
                                     for kd in ("perp", "par")])
        lin_rise = np.concatenate([out[f"{kd}_rise"][t, at] for kd in ("perp", "par")])
        out["linearisation_error"][t] = float(np.max(np.abs(lin_rise - exact_rise)))
        out["onset_MHz"][t] = first_crossing(curve, out["perp_rise"][t], q)
        out["departure_MHz"][t] = departure_frequency(curve, out["par_sensitivity"][t])
        # anisotropy at the swept frequencies; trials for the control and at the largest rise
        for kind in ("perp", "par"):
            for f in range(F):
                out[f"{kind}_anisotropy"][t, f] = relative_anisotropy(swept[kind][f], L)
        fbest = int(np.argmax(out["perp_bound_deg"][t, :, li]))
        out["trial_MHz"][t] = freqs[fbest]
        for key, c in (("control_r", static), ("trial_perp_r", swept["perp"][fbest])):
            out[key][t] = _trial_r(sc, built, c, L, light)
        if progress:
            progress(t + 2, total)
    out.update({"freqs_MHz": freqs, "curve_MHz": curve, "amplitude_nT": amp, "onset_rise": q,
                "lifetimes_us": np.asarray(lifetimes, float), "light_names": json.dumps(names),
                "light_photons": photons, "sweep_light": light, "degree": L,
                "method": json.dumps(methods)})
    return out


def _sweep_steps(sc):
    if not sc["rf"]["sweep_MHz"]:
        return 0
    return max(1, len(sc["rf"]["sweep_lifetimes_us"])) + 1



SWEEP_STAGE = Stage("rf_sweep", lambda b, progress: compute_rf_sweep(b, progress), label="RF sweep",
                    steps=_sweep_steps)
