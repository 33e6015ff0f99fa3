"""Heavy work off the GUI thread: one worker, newest request only.

Conventions (owned here)
------------------------
- The GUI thread builds a small frozen :class:`PatternRequest` (:meth:`retina_viewer.state.ViewerState.request`)
  and hands it to :meth:`LatestOnlyWorker.submit`.  One worker thread computes; while it is busy,
  a newer request replaces the pending one, so only the newest pending request is ever computed
  (the replaced ones are counted in :attr:`LatestOnlyWorker.dropped`).  A request still computing
  a yield function is cancelled (:class:`retina.errors.Cancelled` from its progress callback) when
  a newer request needs a different yield function.
- :class:`PatternComputer` does the work with the core: the yield function of the scenario
  (recomputed at the requested field intensity when the scenario computes it from a spin system and
  does not fix ``yield.field_uT``; otherwise the scenario's own yield function at its own field
  strength, noted in :attr:`PatternResult.yield_note`), the receptors (once per scenario), the
  :class:`retina.eye.pattern.RetinaModel` (rebuilt only when the yield function or ``kappa``
  changes), the pattern, and the readout numbers.
- RF (``PatternRequest.rf``, :meth:`retina_viewer.state.ViewerState.rf_setting`): with a tone the
  yield function is the ``rf`` stage's for that condition
  (:func:`retina.stages.rf.condition_yield_function`: at ``[rf] degree``, content-hash cached), at
  the requested intensity (or ``yield.field_uT``); it is computed only when the RF setting or the
  field strength changes, and cancelled like any other yield function.  RF off is the scenario's
  own yield function, untouched.
- Readout numbers: modulation depth ``(max - min) / mean`` of the receptor yields over both eyes
  (the convention of :mod:`retina.stages._common`); the Cramer-Rao bound on heading at the current pose
  and light level, ``1 / sqrt(I(psi))`` with ``I`` from :func:`retina.readout.fisher.heading_information`
  (the scenario's ``readout.nuisance``); and the bound on the rms heading error over uniformly
  distributed true headings at the same pitch, roll and light, ``sqrt(mean_h 1 / I(h))`` over 360
  one-degree headings (the pipeline's precision-curve convention).  Degrees.
- Information over the whole circle: the per-photon information at 360 one-degree headings (exact
  trigonometric interpolation from ``2 L + 1`` node headings, :func:`retina.signal.noise.trig_interp_matrix`)
  is kept per pitch, roll and field direction; :attr:`PatternResult.curve_bound_deg` is the bound
  over the circle at the requested light level.  The information at the heading shown (and at a
  scan's looks) comes from the same nodes through :func:`information_at` (numpy; the same sums as
  the core's compiled kernel, which is parallel over headings and slow to start for one).
- What the bound means (:attr:`PatternResult.status`, :func:`describe_bound`): ``"none"`` when the
  pattern carries no heading information at any heading (the largest per-photon information is
  below :data:`NO_INFORMATION` times the number of receptors, i.e. rounding noise: a vertical field
  or a flat pattern); ``"not_informative"`` when the bound exceeds
  :data:`retina.readout.fisher.INFORMATIVE_BOUND_DEG` (as in the report); else ``"ok"``.
  ``ambiguous``: the headings ``psi`` and ``psi + 180`` deg cannot be told apart at this light level,
  i.e. ``d'^2 < 1`` with ``d'^2 = sum (lam_1 - lam_2)^2 / lam_bar`` (minus the gain term
  ``(sum (lam_1 - lam_2))^2 / sum lam_bar`` when the gain is unknown), the Poisson analogue of the
  bound's Fisher information for a finite step (derived from ``log`` likelihood ratios to second
  order; common practice, no source).  A horizontal field of a level head gives ``d' = 0``
  exactly: the pattern of ``psi + 180`` is the same (``Phi(b) = Phi(-b)``).
- Head scans played in the window: ``PatternRequest.scan_yaws`` are the looks so far, each with
  ``photons`` pairs per receptor; the information adds over looks (the per-look nuisance, an
  unknown light level per look when ``readout.nuisance = "gain"``, adds too:
  :mod:`retina.readout.scans` "pose_gain").  :attr:`PatternResult.scan_bound_deg` is compared with
  :attr:`PatternResult.look_bound_deg`, the same number of looks all at the scan centre.
- Threads: the pattern and its numbers are computed with one BLAS thread (:func:`_one_blas_thread`);
  the yield function and the retina model (built once per yield function and ``kappa``) keep the
  library's default.  An OpenBLAS thread keeps spinning for a while after each call: with the
  default two threads on a 2-core machine, a heading step's small products cost about 45 ms of
  spinning CPU that the GUI thread and the software renderer wait for
  (``benchmarks/bench_viewer.py``).
- Colours: a request that names ``display`` (and ``eye``, ``colour_limits``) gets its colours
  made here, on the worker thread (:attr:`PatternResult.colours`: float32 arrays of the receptor
  colours and the map image, :func:`retina_viewer.views.pattern_colours`), so the GUI thread does
  no per-receptor work for a new pattern; it only uploads them.
- Results reach the GUI thread through a Qt signal (:class:`QtPatternWorker`); Qt queues a signal
  emitted on the worker thread to the receiver's thread.  ``synchronous=True`` computes inside
  :meth:`~LatestOnlyWorker.submit` on the caller's thread (for tests and scripts).
"""

from __future__ import annotations

import math
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from retina.errors import Cancelled, InputError

__all__ = ["PatternRequest", "PatternResult", "PatternComputer", "LatestOnlyWorker",
           "QtPatternWorker", "HAVE_QT", "describe_bound", "format_deg", "NO_INFORMATION",
           "FLAT_MODULATION", "information_at"]

#: Per-photon information (rad^-2) per receptor below which a pattern carries no heading
#: information (rounding noise of a heading-independent pattern is about 1e-30).
NO_INFORMATION = 1e-20
#: Modulation depth below which a pattern counts as flat (rounding noise is about 1e-16).
FLAT_MODULATION = 1e-9


def format_deg(v: float, decimals: int = 1) -> str:
    """An angle as the readout writes it, never "-0.0 deg".

    Parameters
    ----------
    v : float
        The angle, degrees.
    decimals : int, optional
        Decimals shown.

    Returns
    -------
    str
        e.g. ``"12.5 deg"``.
    """
    s = f"{float(v):.{decimals}f}"
    if float(s) == 0.0:
        s = s.lstrip("-")
    return f"{s} deg"


def describe_bound(bound_deg: float, status: str = "ok", ambiguous: bool = False) -> str:
    """The words the viewer shows for a bound (module docstring): never an absurd number.

    Parameters
    ----------
    bound_deg : float
        Cramer-Rao bound on heading, degrees (inf or nan without information).
    status : {"ok", "not_informative", "none"}, optional
        What the bound means (:class:`PatternResult`).
    ambiguous : bool, optional
        Heading and heading + 180 deg give one pattern.

    Returns
    -------
    str
        The bound in degrees, or "no heading information", "not informative (> 60 deg)", with
        the ambiguity said in words.
    """
    from retina.readout.fisher import INFORMATIVE_BOUND_DEG

    if status == "none" or not np.isfinite(bound_deg):
        return "no heading information"
    if bound_deg > INFORMATIVE_BOUND_DEG:
        text = f"not informative (> {INFORMATIVE_BOUND_DEG:g} deg)"
    else:
        text = format_deg(bound_deg, 2)
    if ambiguous:
        text += "; ambiguous: heading + 180 deg looks the same"
    return text


@dataclass(frozen=True)
class PatternRequest:
    """What to compute: a scenario and the user's settings (units as :mod:`retina_viewer.state`)."""

    serial: int
    scenario: Any
    yaw_deg: float = 0.0
    pitch_deg: float = 0.0
    roll_deg: float = 0.0
    intensity_uT: float = 50.0
    inclination_deg: float = 60.0
    declination_deg: float = 0.0
    photons: float = 300.0
    ordering: str = "scenario"
    kappa: float | None = None
    scan_yaws: tuple = ()
    scan_centre_deg: float | None = None
    rf: tuple | None = None
    display: str | None = None
    eye: str = "both"
    colour_limits: tuple | None = None


@dataclass(frozen=True, eq=False)
class PatternResult:
    """What the worker computed for one request.

    Attributes
    ----------
    request : PatternRequest
    pattern : retina.eye.pattern.Pattern
        Yields and modulation at every receptor, shape (N,) each.
    depth : float
        Modulation depth (dimensionless; module docstring).
    bound_deg : float
        Cramer-Rao bound on heading at this pose and light, degrees (inf without information).
    rms_bound_deg : float
        Bound on the rms heading error over all headings, degrees.
    yield_field_uT : float
        Field strength at which the yield function was computed, microtesla.
    yield_note : str
        How the yield function was obtained.
    seconds : float
        Wall time of the computation, seconds.
    curve_bound_deg : ndarray, shape (360,)
        Bound at headings 0, 1, ..., 359 deg at this pitch, roll, field and light, degrees.
    status : {"ok", "not_informative", "none"}
        What the bound at this heading means (module docstring).
    ambiguous : bool
        Heading and heading + 180 deg cannot be told apart (``mirror_dprime < 1``).
    mirror_dprime : float
        Discriminability ``d'`` of the patterns at ``psi`` and ``psi + 180`` deg.
    flat : bool
        The pattern is flat (depth below :data:`FLAT_MODULATION`).
    scan_bound_deg, look_bound_deg : float
        With ``request.scan_yaws``: the bound after those looks, and after as many looks at the
        scan centre; NaN without a scan.
    colours : retina_viewer.views.PatternColours or None
        With ``request.display``: the receptor colours ``(N, 4)`` and the map image ``(E, A, 4)``
        as float32, made on the worker thread so that the GUI thread only uploads them.
    """

    request: PatternRequest
    pattern: Any
    depth: float
    bound_deg: float
    rms_bound_deg: float
    yield_field_uT: float
    yield_note: str
    seconds: float
    curve_bound_deg: Any = None
    status: str = "ok"
    ambiguous: bool = False
    mirror_dprime: float = float("nan")
    flat: bool = False
    scan_bound_deg: float = float("nan")
    look_bound_deg: float = float("nan")
    colours: Any = None


def _same_yield_key(sc, intensity_uT: float, rf=None):
    """The cache key of the yield function a request needs (``rf``: None or a tone)."""
    kind, _ = sc.yield_source
    if kind == "system" and sc["yield"]["field_uT"] is None:
        key = ("system", round(float(intensity_uT), 3))
    else:
        key = ("fixed",)
    return key if rf is None else key + (("rf",) + tuple(rf),)


def information_at(W, lam_n, dlam_n, nuisance: str = "none") -> np.ndarray:
    """:func:`retina.readout.fisher.interpolated_information` for a few headings, with numpy.

    The same quantity (``lam = W @ lam_n``, ``dlam = W @ dlam_n``, the Poisson information
    ``sum dlam^2 / lam`` over receptors with ``lam > 0``, minus ``(sum dlam)^2 / sum lam`` for an
    unknown gain); the core's compiled kernel is parallel over headings, and for one heading
    starting its threads costs more than the sums (about 10 ms against 0.2 ms at 2 x 4,000
    receptors on 2 cores).  The curve over 360 headings still uses the kernel.

    Parameters
    ----------
    W : ndarray, shape (P, M)
        Interpolation weights (:func:`retina.signal.noise.trig_interp_matrix`).
    lam_n, dlam_n : ndarray, shape (M, N)
        Expected counts and their heading derivatives at the nodes.
    nuisance : {"none", "gain"}

    Returns
    -------
    ndarray, shape (P,)
        Information, rad^-2.
    """
    lam = np.asarray(W, float) @ np.asarray(lam_n, float)
    dl = np.asarray(W, float) @ np.asarray(dlam_n, float)
    pos = lam > 0.0
    full = np.sum(np.divide(dl * dl, lam, out=np.zeros_like(lam), where=pos), axis=1)
    if nuisance == "none":
        return full
    sd, sl = dl.sum(axis=1), lam.sum(axis=1)
    corr = np.zeros_like(full)
    np.divide(sd * sd, sl, out=corr, where=sl > 0)
    return np.maximum(full - corr, 0.0)


_BLAS = []


def _one_blas_thread():
    """A context in which BLAS (OpenBLAS, MKL, ...) uses one thread (threadpoolctl; the limit is
    process-wide while inside, and cheap to set: the libraries are looked up once)."""
    if not _BLAS:
        try:
            from threadpoolctl import ThreadpoolController

            _BLAS.append(ThreadpoolController())
        except Exception:  # noqa: BLE001 - no threadpoolctl, or a library it cannot inspect
            _BLAS.append(None)
    if _BLAS[0] is None:
        import contextlib

        return contextlib.nullcontext()
    return _BLAS[0].limit(limits=1, user_api="blas")


class PatternComputer:
    """Computes :class:`PatternResult` objects with the core (module docstring).

    Parameters
    ----------
    max_yield_functions : int
        How many yield functions (one per field intensity) to keep for the current scenario.
    """

    def __init__(self, max_yield_functions: int = 8):
        self.max_yield_functions = int(max_yield_functions)
        self._scenario = None
        self._yfs: OrderedDict = OrderedDict()
        self._receptors = None
        self._model = self._model_yf = self._model_kappa = None
        self._curve_key = None
        self._curve = None
        self._nodes = None
        self._map_index = None
        self.model_builds = 0  # diagnostics: how often a RetinaModel was built
        self.yield_builds = 0

    def _reset(self, sc):
        from retina import build

        self._scenario = sc
        self._yfs.clear()
        from retina.eye.geometry import build_receptors

        self._receptors = build_receptors(build.build_eyes(sc))
        self._map_index = None
        self._model = self._model_yf = self._model_kappa = None
        self._curve_key = self._curve = None

    def yield_function(self, sc, intensity_uT: float, *, rf=None, progress=None):
        """The yield function a request needs, computed once and kept (the newest
        :attr:`max_yield_functions`).

        Parameters
        ----------
        sc : retina.scenario.Scenario
        intensity_uT : float
            Field intensity asked for, microtesla (used when the scenario computes its yield
            function from a spin system).
        rf : tuple (float, float, str), optional
            ``(frequency_MHz, amplitude_nT, direction)`` of an RF tone; None without RF.
        progress : callable, optional
            Progress reporter passed to the yield-function builder (polled for cancellation).

        Returns
        -------
        yf : retina.yieldfn.YieldFunction
        field_uT : float
            The field strength it was computed at, microtesla (nan when an imported table does not
            record it).
        note : str
            How it was obtained, for the readout and the status bar.

        Raises
        ------
        retina.errors.InputError
            RF asked for a scenario whose yield function is not computed from a spin system.
        """
        from retina import build

        if sc is not self._scenario:
            self._reset(sc)
        key = _same_yield_key(sc, intensity_uT, rf)
        if key in self._yfs:
            self._yfs.move_to_end(key)
            return self._yfs[key]
        kind, path = sc.yield_source
        if rf is not None:
            from retina.eye.field import Field
            from retina.stages.rf import condition_yield_function

            from .state import describe_rf, rf_unavailable

            why = rf_unavailable(sc)
            if why is not None:
                raise InputError(why, source=sc.source, key="rf")
            F = key[1] if key[0] == "system" else float(sc["yield"]["field_uT"])
            cond = {"kind": "tone", "frequency_MHz": float(rf[0]), "amplitude_nT": float(rf[1]),
                    "direction": rf[2]}
            # only the intensity matters for a perpendicular or parallel tone (stages.rf)
            yf = condition_yield_function(sc, cond, Field(F, 90.0, 0.0, source="viewer"), progress=progress)
            entry = (yf, F, f"{describe_rf(rf)}: computed from {path.name} at {F:g} uT, degree {yf.degree} "
                            f"([rf] degree), {yf.provenance.get('method', 'exact')} method")
        elif key[0] == "system":
            yf = build.build_yield_function(sc.replace(**{"yield": {"field_uT": key[1]}}),
                                               progress=progress)
            entry = (yf, key[1], f"computed from {path.name} at {key[1]:g} uT")
        else:
            yf = build.build_yield_function(sc, progress=progress)
            if kind == "system":
                F = float(sc["yield"]["field_uT"])
                note = (f"computed from {path.name} at the scenario's yield.field_uT = {F:g} uT; "
                        "the intensity slider does not change it")
            else:
                try:
                    F = float((getattr(yf, "provenance", None) or {}).get("field_uT"))
                except (TypeError, ValueError):
                    F = float("nan")  # an imported table need not record its field
                note = f"read from {path.name}; the intensity slider does not change it"
            entry = (yf, F, note)
        self.yield_builds += 1
        self._yfs[key] = entry
        while len(self._yfs) > self.max_yield_functions:
            self._yfs.popitem(last=False)
        return entry

    def model(self, sc, yf, kappa, ordering="scenario"):
        """The retina model for a yield function, ``kappa`` and the ordering choice (rebuilt only
        when they change); ``ordering`` other than "scenario" replaces the scenario's model
        (:func:`retina.build.build_ordering`), in ensemble mode.

        Parameters
        ----------
        sc : retina.scenario.Scenario
        yf : retina.yieldfn.YieldFunction
        kappa : float or None
            Concentration of the ordering (dimensionless); None keeps the scenario's.
        ordering : str, optional
            "scenario" or one of the ordering models.

        Returns
        -------
        retina model
            What :func:`retina.build.build_retina` returns.
        """
        from retina import build

        key = (kappa, ordering)
        if self._model is None or self._model_yf is not yf or self._model_kappa != key:
            if ordering == "scenario":
                self._model = build.build_retina(sc, yf, self._receptors, kappa=kappa)
            else:
                order = build.build_ordering(sc, kappa, model=ordering)
                self._model = build.build_retina(sc, yf, self._receptors, ordering=order)
            self._model_yf, self._model_kappa = yf, key
            self._curve_key = self._curve = self._nodes = None
            self.model_builds += 1
        return self._model

    def yield_is_computed(self, sc, intensity_uT: float, rf=None) -> bool:
        """Whether a request must compute a yield function first (none kept fits it).

        Parameters
        ----------
        sc : retina.scenario.Scenario
        intensity_uT : float
            Field intensity, microtesla.
        rf : tuple (float, float, str), optional
            ``(frequency_MHz, amplitude_nT, direction)``; None without RF.

        Returns
        -------
        bool
        """
        if sc is not self._scenario:
            return sc.yield_source[0] == "system"
        return _same_yield_key(sc, intensity_uT, rf) not in self._yfs and sc.yield_source[0] == "system"

    def compute(self, req: PatternRequest, *, cancel: Callable[[], bool] | None = None) -> PatternResult:
        """Compute one request.

        Parameters
        ----------
        req : PatternRequest
        cancel : callable() -> bool, optional
            Polled while a yield function is computed; when it returns True the computation
            raises :class:`retina.errors.Cancelled`.

        Returns
        -------
        PatternResult

        Raises
        ------
        retina.errors.InputError
            No scenario, or a setting the scenario cannot take.
        retina.errors.Cancelled
            ``cancel()`` returned True.
        """
        from retina.eye.field import Field
        from retina.eye.pose import Pose
        from retina.readout.fisher import INFORMATIVE_BOUND_DEG, cramer_rao_deg, interpolated_information
        from retina.signal.noise import SignalModel, trig_interp_matrix

        if req.scenario is None:
            raise InputError("no scenario loaded; open one with File > Open scenario", key="scenario")
        t0 = time.perf_counter()

        def progress(done, total):
            if cancel is not None and cancel():
                raise Cancelled("a newer request needs another yield function")

        sc = req.scenario
        yf, F_yield, note = self.yield_function(sc, req.intensity_uT, rf=req.rf, progress=progress)
        model = self.model(sc, yf, req.kappa, req.ordering)
        # one BLAS thread for the pattern and its numbers (small products, milliseconds): an idle
        # OpenBLAS thread spins for a while after each call, and on a 2-core machine that takes the
        # core the GUI thread and the software renderer need (module docstring)
        with _one_blas_thread():
            fld = Field(req.intensity_uT, req.inclination_deg, req.declination_deg, source="viewer")
            pat = model.pattern(Pose(req.yaw_deg, req.pitch_deg, req.roll_deg), fld)
            y = pat.yields
            depth = float((y.max() - y.min()) / y.mean())
            nuisance = sc["readout"]["nuisance"]
            sig = SignalModel(model, inclination_deg=req.inclination_deg,
                              declination_deg=req.declination_deg, photons=1.0,
                              pitch_deg=req.pitch_deg, roll_deg=req.roll_deg)
            # information is linear in the light level (retina.readout.fisher): per photon, then scale
            ckey = (req.inclination_deg, req.declination_deg, req.pitch_deg, req.roll_deg)
            L = int(model.degree)
            if self._curve_key != ckey:
                self._nodes = sig.fourier_nodes(L)
                nodes = np.deg2rad(self._nodes[0])
                W = trig_interp_matrix(nodes, np.deg2rad(np.arange(360.0)), L)
                self._curve = interpolated_information(W, self._nodes[1], self._nodes[2], nuisance)
                self._curve_key = ckey
            nodes_rad, lam_n, dlam_n = np.deg2rad(self._nodes[0]), self._nodes[1], self._nodes[2]
            # information here from the same nodes (exact: a trigonometric polynomial of degree L)
            W1 = trig_interp_matrix(nodes_rad, np.deg2rad([req.yaw_deg]), L)
            info1 = float(information_at(W1, lam_n, dlam_n, nuisance)[0])
            bound = float(cramer_rao_deg(req.photons * info1))
            crb = cramer_rao_deg(req.photons * self._curve)
            rms = float(np.sqrt(np.mean(crb ** 2)))
            n_rec = y.size
            flat = bool(depth < FLAT_MODULATION)
            if flat or float(np.max(self._curve)) < NO_INFORMATION * n_rec:
                status = "none"
            elif bound > INFORMATIVE_BOUND_DEG:
                status = "not_informative"
            else:
                status = "ok"
            # heading + 180: the Poisson discriminability of the two patterns (module docstring)
            W2 = trig_interp_matrix(nodes_rad, np.deg2rad([req.yaw_deg, req.yaw_deg + 180.0]), L)
            l1, l2 = req.photons * (W2 @ lam_n)
            diff, lbar = l1 - l2, 0.5 * (l1 + l2)
            ok = lbar > 0
            d2 = float(np.sum(diff[ok] ** 2 / lbar[ok]))
            if nuisance == "gain" and lbar.sum() > 0:
                d2 = max(d2 - float(diff.sum() ** 2 / lbar.sum()), 0.0)
            dprime = math.sqrt(d2)
            scan_bound = look_bound = float("nan")
            if req.scan_yaws:
                yaws = np.asarray(req.scan_yaws, float)
                Ws = trig_interp_matrix(nodes_rad, np.deg2rad(yaws), L)
                info_scan = float(np.sum(information_at(Ws, lam_n, dlam_n, nuisance)))
                centre = req.yaw_deg if req.scan_centre_deg is None else req.scan_centre_deg
                Wc = trig_interp_matrix(nodes_rad, np.deg2rad([centre]), L)
                info_c = float(information_at(Wc, lam_n, dlam_n, nuisance)[0])
                scan_bound = float(cramer_rao_deg(req.photons * info_scan))
                look_bound = float(cramer_rao_deg(req.photons * yaws.size * info_c))
            colours = None
            if req.display is not None:
                colours = self.colours(pat, req.display, req.eye, req.colour_limits)
            return PatternResult(request=req, pattern=pat, depth=depth, bound_deg=bound,
                                 rms_bound_deg=rms, yield_field_uT=F_yield, yield_note=note,
                                 seconds=time.perf_counter() - t0, curve_bound_deg=crb, status=status,
                                 ambiguous=bool(status != "none" and dprime < 1.0),
                                 mirror_dprime=dprime, flat=flat, scan_bound_deg=scan_bound,
                                 look_bound_deg=look_bound, colours=colours)

    def colours(self, pattern, display: str, eye: str, limits=None):
        """:func:`retina_viewer.views.pattern_colours` of a pattern, with the map's pixel index
        kept per scenario (pure numpy: no GL, safe on the worker thread).

        Parameters
        ----------
        pattern : retina.eye.pattern.Pattern
        display : {"modulation", "yields"}
        eye : {"both", "left", "right"}
        limits : tuple of float, optional
            Fixed colour-scale limits ``(lo, hi)``; default: the pattern's own.

        Returns
        -------
        retina_viewer.views.PatternColours
            Receptor colours ``(N, 4)`` and the map image ``(E, A, 4)``, float32 in [0, 1].
        """
        from types import SimpleNamespace

        from .views import map_index, pattern_colours

        if self._map_index is None or self._map_index[0] is not pattern.receptors:
            self._map_index = (pattern.receptors, map_index(pattern.receptors))
        return pattern_colours(SimpleNamespace(pattern=pattern), display, eye, limits,
                               self._map_index[1])

    def needs_new_yield(self, a: PatternRequest, b: PatternRequest) -> bool:
        """Whether request ``b`` needs another yield function than ``a`` (another scenario,
        intensity of a computed yield function, or RF tone).

        Parameters
        ----------
        a, b : PatternRequest

        Returns
        -------
        bool
        """
        return a.scenario is not b.scenario or \
            _same_yield_key(a.scenario, a.intensity_uT, getattr(a, "rf", None)) != \
            _same_yield_key(b.scenario, b.intensity_uT, getattr(b, "rf", None))


class LatestOnlyWorker:
    """One background thread that computes only the newest pending request.

    Parameters
    ----------
    compute : callable(request, cancel) -> result
        The work; ``cancel()`` tells it a newer request wants something else (see
        :meth:`PatternComputer.compute`).
    deliver : callable(result)
        Called with each result, on the worker thread (or the caller's with ``synchronous``).
    on_error : callable(request, exception), optional
        Called instead of ``deliver`` when ``compute`` raises (default: re-raise in synchronous
        mode, ignore in threaded mode).
    synchronous : bool
        Compute inside :meth:`submit` on the caller's thread.
    supersedes : callable(running, newer) -> bool, optional
        Whether a newer request cancels the running one (default: never).
    """

    def __init__(self, compute, deliver, *, on_error=None, synchronous: bool = False,
                 supersedes=None, name: str = "retina-viewer-worker"):
        self._compute = compute
        self._deliver = deliver
        self._on_error = on_error
        self._supersedes = supersedes
        self.synchronous = bool(synchronous)
        self._cond = threading.Condition()
        self._pending = None
        self._running = None
        self._closed = False
        self.computed: list = []   # serials of the requests computed, in order
        self.dropped = 0           # requests replaced before they were computed
        self.cancelled = 0         # requests abandoned while computing
        self._thread = None
        if not self.synchronous:
            self._thread = threading.Thread(target=self._loop, name=name, daemon=True)
            self._thread.start()

    @property
    def thread(self) -> threading.Thread | None:
        return self._thread

    def submit(self, request) -> None:
        """Queue ``request``, replacing any older pending one (computed at once in synchronous
        mode).

        Parameters
        ----------
        request : object
            Passed to the compute function (a :class:`PatternRequest` in the viewer).

        Raises
        ------
        retina.errors.InputError
            The worker is closed.
        """
        if self._closed:
            raise InputError("the worker is closed", key="worker")
        if self.synchronous:
            self._run_one(request)
            return
        with self._cond:
            if self._pending is not None:
                self.dropped += 1
            self._pending = request
            self._cond.notify_all()

    def _cancel_check(self, running):
        def cancel():
            p = self._pending
            return self._closed or (p is not None and self._supersedes is not None
                                    and self._supersedes(running, p))
        return cancel

    def _run_one(self, req):
        self._running = req
        try:
            try:
                res = self._compute(req, self._cancel_check(req))
            except Cancelled:
                self.cancelled += 1
                return
            except Exception as exc:  # noqa: BLE001 - reported to the GUI, never kills the thread
                if self._on_error is not None:
                    self._on_error(req, exc)
                elif self.synchronous:
                    raise
                return
            self.computed.append(getattr(req, "serial", None))
            if not self._closed:
                self._deliver(res)
        finally:
            self._running = None

    def _loop(self):
        while True:
            with self._cond:
                while self._pending is None and not self._closed:
                    self._cond.wait()
                if self._closed:
                    return
                req, self._pending = self._pending, None
                self._running = req
            self._run_one(req)
            with self._cond:
                self._cond.notify_all()

    def idle(self) -> bool:
        """Whether nothing is pending and nothing running.

        Returns
        -------
        bool
        """
        return self._pending is None and self._running is None

    def wait_idle(self, timeout: float = 30.0) -> bool:
        """Block until :meth:`idle` (threaded mode) or ``timeout`` seconds.

        Parameters
        ----------
        timeout : float, optional
            Seconds to wait at most.

        Returns
        -------
        bool
            :meth:`idle` at the end.
        """
        end = time.monotonic() + timeout
        with self._cond:
            while not self.idle():
                left = end - time.monotonic()
                if left <= 0:
                    break
                self._cond.wait(min(left, 0.05))
        return self.idle()

    def close(self, timeout: float = 30.0) -> None:
        """Stop the thread (a running computation finishes or is cancelled first) and join it.

        Parameters
        ----------
        timeout : float, optional
            Seconds to wait for the thread at most.
        """
        with self._cond:
            self._closed = True
            self._pending = None
            self._cond.notify_all()
        if self._thread is not None:
            self._thread.join(timeout)


try:  # the Qt signal bridge exists only where PyQt6 is installed
    from PyQt6.QtCore import QObject, pyqtSignal

    HAVE_QT = True
except ImportError:  # pragma: no cover - depends on the installation
    HAVE_QT = False


if HAVE_QT:
    class QtPatternWorker(QObject):
        """A :class:`LatestOnlyWorker` around a :class:`PatternComputer` whose results arrive as
        Qt signals (queued to the GUI thread).

        Signals
        -------
        finished(PatternResult)
        failed(PatternRequest, str)
            A one-line message (an :class:`~retina.errors.InputError` or an unexpected error).
        """

        finished = pyqtSignal(object)
        failed = pyqtSignal(object, str)

        def __init__(self, *, synchronous: bool = False, computer: PatternComputer | None = None,
                     parent=None):
            super().__init__(parent)
            self.computer = computer or PatternComputer()
            self.worker = LatestOnlyWorker(lambda r, c: self.computer.compute(r, cancel=c),
                                           self.finished.emit, on_error=self._error,
                                           synchronous=synchronous,
                                           supersedes=self.computer.needs_new_yield)

        def _error(self, req, exc):
            kind = "" if isinstance(exc, InputError) else f"{type(exc).__name__}: "
            text = " ".join(str(exc).split())
            self.failed.emit(req, f"{kind}{text}")

        def submit(self, request) -> None:
            """Queue a request (:meth:`LatestOnlyWorker.submit`); its result arrives as
            :attr:`finished` or :attr:`failed`.

            Parameters
            ----------
            request : PatternRequest
            """
            self.worker.submit(request)

        def close(self) -> None:
            """Stop the worker thread and join it (:meth:`LatestOnlyWorker.close`)."""
            self.worker.close()
else:  # pragma: no cover
    QtPatternWorker = None
