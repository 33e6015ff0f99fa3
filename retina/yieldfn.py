"""The yield function: a radical pair's reported yield as a function of the field direction.

A :class:`YieldFunction` holds the even-degree real spherical-harmonic coefficients of
``Phi(b)``, ``b`` a unit field direction in the molecular frame, in the layout of
:mod:`retina.sphere` (degrees ``0, 2, ..., L``).  It evaluates, differentiates (tangential
gradient), rotates (active, ``(R Phi)(b) = Phi(R^-1 b)``), finds its extremes, and carries a
provenance dictionary that travels with it into HDF5 files (:mod:`retina.io.hdf5`).

Conventions (owned here)
------------------------
- ``fit_error`` is the largest absolute difference, in yield units, between the fitted expansion
  and independently computed values: on the check grid for :meth:`YieldFunction.from_system`, on
  the data points for :meth:`YieldFunction.from_values` and the importers.
- Extreme directions (:class:`Anisotropy`) are axes: ``b`` and ``-b`` give the same yield.  They are
  reported on the upper hemisphere (z > 0; on the equator y > 0; then x > 0).
- ``relative`` anisotropy is ``(max - min) / mean``, ``mean`` the average over the sphere.
- Provenance is a flat or nested dict of str, int, float and bool values (nested dicts allowed).
  :meth:`YieldFunction.from_system` fills: ``kind``, ``spin_system_toml`` (the canonical document,
  :func:`retina.spin.io.dump_system`), ``spin_system_document_toml`` (the file's own parsed
  document, when there is one), ``system_name``, ``system_source``, ``reported_yield``,
  ``initial_state``, ``field_uT``, ``method``,
  ``degree``, ``grid`` / ``grid_order`` / ``grid_points`` / ``computed_points``, ``check_grid`` /
  ``check_points``, ``truncation_error_max`` / ``truncation_error_rms``, ``antipodal_points`` /
  ``antipodal_difference_max`` (see :meth:`YieldFunction.from_system`), ``compute_seconds``,
  ``versions`` (numpy, scipy, numba, h5py, retina), ``date_utc`` (ISO 8601), ``input_hash`` (the
  cache key, :mod:`retina.cache`) and ``content_hash`` (sha256 of the degree and the little-endian
  float64 coefficient bytes).
"""

from __future__ import annotations

import datetime as _dt
import logging
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
from scipy.optimize import minimize
from scipy.spatial.transform import Rotation

from retina import sphere
from retina.errors import InputError
from retina.io.hdf5 import BASIS, content_hash  # noqa: F401  (BASIS: public here too)

_log = logging.getLogger(__name__)

__all__ = ["YieldFunction", "Anisotropy", "default_check_points", "content_hash", "package_versions", "canonical_axis"]

DEFAULT_DEGREE = 16
#: Fewest check directions the default gives (see :func:`default_check_points`).
MIN_CHECK_POINTS = 16
#: Check directions whose antipodes are computed too, to confirm ``Phi(b) = Phi(-b)`` on every run.
ANTIPODAL_POINTS = 3
#: Largest accepted ``|Phi(b) - Phi(-b)|`` (yield units); the exact methods agree to ~1e-13.
ANTIPODAL_TOLERANCE = 1e-9


def default_check_points(degree: int) -> int:
    """Default number of independent check directions for a degree-``degree`` fit.

    Half the fit's own directions (one hemisphere of the smallest Lebedev rule exact to
    ``2 degree``), at least :data:`MIN_CHECK_POINTS`: the truncation error is then measured on
    enough fresh directions for its rms to be stable, while the checks cost at most a third of the
    run (they cost more than the fit itself with a fixed 200 at degree 8: 200 against 55).

    Parameters
    ----------
    degree : int
        Even maximum degree of the fit.

    Returns
    -------
    int
        Number of check directions, >= ``MIN_CHECK_POINTS``.
    """
    return max(MIN_CHECK_POINTS, len(sphere.grid_for_degree(int(degree))) // 4)


@dataclass(frozen=True)
class Anisotropy:
    """Extremes of a yield function.

    Attributes
    ----------
    max, min, mean : float
        Largest, smallest and sphere-average yield (dimensionless yield units).
    delta : float
        ``max - min``.
    relative : float
        ``delta / mean`` (a fraction; multiply by 100 for percent). ``inf`` when ``mean == 0``.
    argmax, argmin : ndarray (3,)
        Unit field directions (molecular frame) of the maximum and the minimum, on the upper
        hemisphere (see the module docstring).
    """

    max: float
    min: float
    mean: float
    delta: float
    relative: float
    argmax: np.ndarray
    argmin: np.ndarray


def canonical_axis(v) -> np.ndarray:
    """The representative of the axis ``{v, -v}`` on the upper hemisphere.

    Parameters
    ----------
    v : array_like, shape (3,)
        A non-zero vector.

    Returns
    -------
    ndarray, shape (3,)
        Unit length, with the last non-zero component (z first, then y, then x) positive.
    """
    v = np.asarray(v, dtype=float)
    v = v / np.linalg.norm(v)
    for c in (v[2], v[1], v[0]):
        if abs(c) > 1e-12:
            return v if c > 0 else -v
    return v


def package_versions() -> dict[str, str]:
    """Versions of the packages that shape a computed yield function.

    Returns
    -------
    dict of str to str
        Package name to version (recorded in the provenance).
    """
    import h5py
    import numba
    import scipy

    import retina

    return {"numpy": np.__version__, "scipy": scipy.__version__, "numba": numba.__version__,
            "h5py": h5py.__version__, "retina": retina.__version__}


class YieldFunction:
    """An even function on the unit sphere stored as real spherical-harmonic coefficients.

    Parameters
    ----------
    coeffs : array_like, shape (K,)
        Even-degree coefficients, ``K = (L + 1)(L + 2) / 2`` (layout of :mod:`retina.sphere`).
    degree : int
        The maximum degree ``L`` (even); must match ``K``.
    provenance : dict, optional
        Where the function came from (see the module docstring). Copied.
    fit_error : float, optional
        Largest absolute fit error (yield units), see the module docstring.
    """

    __slots__ = ("_coeffs", "_degree", "provenance", "fit_error", "from_cache", "_anisotropy")

    def __init__(self, coeffs, degree: int, provenance: dict | None = None, fit_error: float | None = None):
        c = np.array(coeffs, dtype=float).reshape(-1)
        if not np.all(np.isfinite(c)):
            raise ValueError("yield-function coefficients must be finite")
        expected = sphere.n_coeffs(degree)
        if c.shape[0] != expected:
            raise ValueError(f"degree {degree} needs {expected} coefficients, got {c.shape[0]}")
        c.flags.writeable = False
        self._coeffs = c
        self._degree = int(degree)
        self.provenance = dict(provenance or {})
        self.fit_error = None if fit_error is None else float(fit_error)
        self.from_cache = False  # set by from_system when the result came from the cache
        self._anisotropy: Anisotropy | None = None  # memo of anisotropy() with the default search

    # ------------------------------------------------------------------ basic properties

    @property
    def coeffs(self) -> np.ndarray:
        """Read-only coefficient vector, shape (K,)."""
        return self._coeffs

    @property
    def degree(self) -> int:
        """The largest (even) harmonic degree ``L``."""
        return self._degree

    @property
    def mean(self) -> float:
        """Average over the sphere: ``coeffs[0] / sqrt(4 pi)``."""
        return float(self._coeffs[0] / np.sqrt(4 * np.pi))

    def __repr__(self) -> str:
        name = self.provenance.get("system_name", "")
        return f"YieldFunction(degree={self._degree}, mean={self.mean:.6g}{', ' + repr(name) if name else ''})"

    # ------------------------------------------------------------------ evaluation

    def __call__(self, dirs) -> np.ndarray:
        """Yield at unit field directions.

        Parameters
        ----------
        dirs : array_like, shape (..., 3)
            Field directions (normalised here).

        Returns
        -------
        ndarray, shape (...)
        """
        d = np.asarray(dirs, dtype=float)
        return sphere.evaluate(self._coeffs, d.reshape(-1, 3)).reshape(d.shape[:-1])

    def gradient(self, dirs) -> np.ndarray:
        """Tangential gradient of the yield at unit directions, shape (..., 3), per radian.

        The derivative of ``Phi(b(t))`` along a curve on the sphere is ``gradient(b) . db/dt``;
        the gradient is perpendicular to ``b``.

        Parameters
        ----------
        dirs : array_like (..., 3)
            Unit field directions (molecular frame).

        Returns
        -------
        ndarray (..., 3)
            Surface gradient of the yield, per radian, tangent to the sphere at each direction.
        """
        d = np.asarray(dirs, dtype=float)
        _, g = sphere.evaluate_grad(self._coeffs, d.reshape(-1, 3))
        return g.reshape(d.shape)

    def rotate(self, rotation: Rotation) -> "YieldFunction":
        """The actively rotated function ``Phi'(b) = Phi(R^-1 b)`` (exact in the coefficients).

        ``rotation`` is a single :class:`scipy.spatial.transform.Rotation`.  Provenance is kept,
        with the rotation appended (as a quaternion, scalar last) under ``rotations``.

        Parameters
        ----------
        rotation : scipy.spatial.transform.Rotation
            One rotation ``R``.

        Returns
        -------
        YieldFunction
            Same degree and fit error, a new ``content_hash``.

        Raises
        ------
        ValueError
            For anything but a single rotation.
        """
        if not isinstance(rotation, Rotation) or not rotation.single:
            raise ValueError("rotate takes one scipy Rotation; rotate many with retina.sphere.rotate")
        c = sphere.rotate(self._coeffs, rotation)
        prov = dict(self.provenance)
        q = " ".join(f"{x:.17g}" for x in rotation.as_quat())
        prov["rotations"] = (prov.get("rotations", "") + "; " if prov.get("rotations") else "") + q
        prov["content_hash"] = content_hash(c, self._degree)
        return YieldFunction(c, self._degree, prov, self.fit_error)

    # ------------------------------------------------------------------ extremes

    def anisotropy(self, *, n_search: int | None = None) -> Anisotropy:
        """Maximum, minimum and their directions.

        A dense Fibonacci lattice on the upper hemisphere (``n_search`` points, default
        ``max(2000, 30 (L + 1)^2)``) gives candidates, refined by L-BFGS-B on the sphere
        (tangent-plane coordinates around each candidate, analytic gradient).  At degree 2
        (without ``n_search``) the extremes are exact and need no search: the function is the
        quadratic form ``b^T M b`` on the unit sphere (:meth:`_quadratic_form`), whose largest and
        smallest values are the extreme eigenvalues of ``M``, taken at their eigenvectors.
        When two eigenvalues are equal (an axially symmetric function) the direction of that
        extreme is any unit vector of their eigenplane; one of them is returned.

        Parameters
        ----------
        n_search : int, optional
            Lattice points of the search; with the default the result is computed once and kept.

        Returns
        -------
        Anisotropy
            Extremes, mean, ``delta`` and ``relative`` (``delta / mean``), and the directions of the
            extremes; for degree 0 both directions are ``z`` and the anisotropy is 0.
        """
        if n_search is None and self._anisotropy is not None:
            return self._anisotropy
        L = self._degree
        if L == 0:
            m = self.mean
            z = np.array([0.0, 0.0, 1.0])
            return Anisotropy(m, m, m, 0.0, 0.0, z.copy(), z.copy())
        if L == 2 and n_search is None:
            w, V = np.linalg.eigh(self._quadratic_form())
            mean = self.mean
            mx, mn = float(w[2]), float(w[0])
            amax, amin = canonical_axis(V[:, 2]), canonical_axis(V[:, 0])
            amax.flags.writeable = False
            amin.flags.writeable = False
            rel = (mx - mn) / mean if mean != 0 else float("inf")
            self._anisotropy = Anisotropy(mx, mn, mean, mx - mn, rel, amax, amin)
            return self._anisotropy
        n = int(n_search or max(2000, 30 * (L + 1) ** 2))
        pts = sphere.fibonacci(n, hemisphere=True).points
        vals = self(pts)
        best = {}
        for sign, label in ((-1.0, "max"), (1.0, "min")):
            order = np.argsort(sign * vals)
            starts = _distinct_axes(pts[order[:64]], 4)
            cands = [self._refine(p, sign) for p in starts]
            b, v = min(cands, key=lambda bv: sign * bv[1])
            best[label] = (canonical_axis(b), float(v))
        mx, mn = best["max"][1], best["min"][1]
        mean = self.mean
        rel = (mx - mn) / mean if mean != 0 else float("inf")
        for axis, _ in best.values():
            axis.flags.writeable = False  # the result is memoised: keep it immutable
        result = Anisotropy(mx, mn, mean, mx - mn, rel, best["max"][0], best["min"][0])
        if n_search is None:
            self._anisotropy = result
        return result

    def _quadratic_form(self) -> np.ndarray:
        """The symmetric ``M (3, 3)`` with ``Phi(b) = b^T M b`` on the unit sphere (degree <= 2).

        Derivation: on the unit sphere ``Y_00`` is a constant times ``|b|^2`` and the five
        degree-2 real harmonics are traceless quadratic forms in ``b``, so an even function of
        degree 2 is ``b^T M b``.  ``M_kk = Phi(e_k)`` and, from ``Phi((e_j + e_k)/sqrt 2) =
        (M_jj + M_kk)/2 + M_jk``, the off-diagonal terms follow from three more values.
        """
        if self._degree > 2:
            raise ValueError("a quadratic form exists only up to degree 2")
        r = np.sqrt(0.5)
        pts = np.array([[1, 0, 0], [0, 1, 0], [0, 0, 1], [r, r, 0], [r, 0, r], [0, r, r]], float)
        v = self(pts)
        M = np.diag(v[:3])
        for k, (i, j) in enumerate(((0, 1), (0, 2), (1, 2))):
            M[i, j] = M[j, i] = v[3 + k] - 0.5 * (v[i] + v[j])
        return M

    def _refine(self, b0: np.ndarray, sign: float) -> tuple[np.ndarray, float]:
        """Minimise ``sign * Phi`` starting at ``b0`` in tangent coordinates ``b = norm(b0 + u1 e1 + u2 e2)``."""
        b0 = b0 / np.linalg.norm(b0)
        e1 = np.cross(b0, [1.0, 0.0, 0.0] if abs(b0[0]) < 0.9 else [0.0, 1.0, 0.0])
        e1 /= np.linalg.norm(e1)
        e2 = np.cross(b0, e1)
        E = np.stack([e1, e2], axis=1)  # (3, 2)

        def fun(u):
            v = b0 + E @ u
            r = np.linalg.norm(v)
            b = v / r
            val, grad = sphere.evaluate_grad(self._coeffs, b[None, :])
            # db/du = (I - b b^T) E / r ; the tangential gradient already lies in the tangent plane
            return sign * val[0], sign * (grad[0] @ E) / r

        res = minimize(fun, np.zeros(2), jac=True, method="L-BFGS-B",
                       bounds=[(-0.5, 0.5), (-0.5, 0.5)], options={"gtol": 1e-12, "ftol": 1e-15, "maxiter": 200})
        v = b0 + E @ res.x
        b = v / np.linalg.norm(v)
        return b, float(self(b[None, :])[0])

    # ------------------------------------------------------------------ files

    def save(self, path: str | Path, force: bool = False) -> Path:
        """Write the native HDF5 file (atomically; see :mod:`retina.io.hdf5`).

        Parameters
        ----------
        path : str or Path
            The file to write.
        force : bool
            Replace an existing file.

        Returns
        -------
        Path
            The file written.

        Raises
        ------
        InputError
            When ``path`` exists and ``force`` is false, or its folder does not exist.
        """
        from retina.io.hdf5 import save_yield_function

        return save_yield_function(self, path, force=force)

    @classmethod
    def load(cls, path: str | Path) -> "YieldFunction":
        """Read a native HDF5 file written by :meth:`save`.

        Parameters
        ----------
        path : str or Path
            The file.

        Returns
        -------
        YieldFunction
            With the file's degree, coefficients, fit error and provenance.

        Raises
        ------
        InputError
            When the file is missing, not HDF5 or not a yield-function file (:mod:`retina.io.hdf5`).
        """
        from retina.io.hdf5 import read_yield_function

        rec = read_yield_function(path)
        try:
            return cls.from_record(rec)
        except ValueError as exc:
            raise InputError(str(exc), source=path, key="/yield_function/coeffs") from None

    @classmethod
    def from_record(cls, rec) -> "YieldFunction":
        """The yield function of a :class:`retina.io.hdf5.YieldRecord` (a file's or the cache's content).

        Parameters
        ----------
        rec : retina.io.hdf5.YieldRecord
            Coefficients ``(K,)``, degree, provenance and fit error.

        Returns
        -------
        YieldFunction

        Raises
        ------
        ValueError
            When the coefficients do not fit the degree or are not finite.
        """
        return cls(rec.coeffs, rec.degree, rec.provenance, rec.fit_error)

    # ------------------------------------------------------------------ constructors

    @classmethod
    def from_values(cls, values, grid: "sphere.SphereGrid", degree: int, provenance: dict | None = None
                    ) -> "YieldFunction":
        """Fit even degrees ``0..L`` to values on a quadrature grid by projection.

        Parameters
        ----------
        values : array_like, shape (N,)
            Yield at ``grid.points``.
        grid : retina.sphere.SphereGrid
            A quadrature rule exact to ``2 L`` (for example ``sphere.grid_for_degree(L)``).
        degree : int
            Even ``L``.
        provenance : dict, optional

        Notes
        -----
        ``fit_error`` is the largest ``|fit - values|`` on the grid nodes (this measures the
        truncation, not the error between nodes).
        """
        v = np.asarray(values, dtype=float).reshape(-1)
        coeffs = sphere.fit_even(v, grid, degree)
        resid = sphere.evaluate(coeffs, grid.points) - v
        prov = dict(provenance or {})
        prov.setdefault("kind", "from_values")
        prov.update(degree=int(degree), grid=grid.name, grid_points=len(grid),
                    node_residual_max=float(np.max(np.abs(resid))),
                    node_residual_rms=float(np.sqrt(np.mean(resid**2))),
                    content_hash=content_hash(coeffs, degree))
        return cls(coeffs, degree, prov, float(np.max(np.abs(resid))))

    @classmethod
    def from_system(cls, system, field_uT: float, degree: int = DEFAULT_DEGREE, *, method: str = "auto",
                    progress: Callable[[int, int], None] | None = None, cache: bool = False,
                    cache_dir: str | Path | None = None, check_points: int | None = None,
                    max_bytes: int | None = None, accuracy: float | None = None) -> "YieldFunction":
        """Compute the yield function of a spin system through the engine.

        The engine (:func:`retina.spin.engine.compute_yields`) runs on one hemisphere of the
        smallest Lebedev rule exact to ``2 L`` (using ``Phi(b) = Phi(-b)``) plus ``check_points``
        Fibonacci points on the upper hemisphere, which are no nodes of the rule.  The degree-``L``
        fit is then compared with the engine at the check points: the largest and rms differences
        are the truncation error (``fit_error``, and ``truncation_error_max/rms`` in provenance).

        Why one hemisphere suffices (derived here).  Let ``T`` be time reversal (antiunitary,
        ``T S T^-1 = -S`` for every electron and nuclear spin).  Every term of the Hamiltonian of
        :mod:`retina.spin.system` is bilinear in spins with real tensors except the Zeeman term,
        linear in ``S``, so ``T H(B) T^-1 = H(-B)``, with any (even non-symmetric) g and hyperfine
        tensors, exchange and dipolar coupling.  ``P_S``, ``P_T``, the Haberkorn operator
        ``k_S P_S + k_T P_T`` and the relaxation dissipators (Hermitian Lindblad operators ``S_a``
        and ``P_S``, which ``T`` maps to ``+-`` themselves) are invariant.  Hence, for the
        Liouvillian, ``T L(B) T^-1 = L(-B)^+`` (Hilbert-Schmidt adjoint: the dissipative part is
        self-adjoint, the commutator changes sign).  The yield ``k Tr(P (-L(B))^-1 rho0)`` then
        equals ``k Tr(rho0 (-L(-B))^-1 P)``: observable and initial state swap.  With the start
        ``rho0`` proportional to the observed projector (singlet-singlet, triplet-triplet) the
        yield is even in ``B``; the two mixed cases follow from ``Phi_S + Phi_T = 1`` (every
        state decays, relaxation preserves the trace).  So ``Phi(b) = Phi(-b)`` holds exactly for
        every system the engine accepts, and each run confirms it on ``ANTIPODAL_POINTS``
        antipodal pairs (``antipodal_difference_max`` in provenance); a larger difference than
        ``ANTIPODAL_TOLERANCE`` raises RuntimeError instead of fitting.

        Parameters
        ----------
        system : retina.spin.system.SpinSystem
        field_uT : float
            Field strength, microtesla (> 0).
        degree : int
            Even maximum degree ``L`` (default 16).
        method : str
            "auto" (the engine chooses) or an engine method name.
        progress : callable(done, total), optional
            Called by the engine; ``total`` counts grid and check directions together.
        cache : bool
            Look the result up in, and store it into, the content-hash cache (:mod:`retina.cache`).
        cache_dir : str or Path, optional
            Cache folder (default: :func:`retina.cache.default_cache_dir`: ``$RETINA_CACHE``, else
            ``$XDG_CACHE_HOME/retina-compass``, else ``~/.cache/retina-compass``).
        check_points : int, optional
            Number of independent check directions (>= 1; default
            :func:`default_check_points` of the degree: half the fit's directions, at least 16).
        max_bytes : int, optional
            Memory limit passed to the engine (it raises ResourceError beyond it).
        accuracy : float, optional
            Standard error per yield the caller accepts; lets ``"auto"`` choose the approximate
            ``"sampled"`` method when it is cheaper, and sizes its random states
            (:func:`retina.spin.engine.choose_method`).  Part of the cache key when given.

        Raises
        ------
        InputError
            Bad field, degree or method, or a system outside the chosen method's scope.
        retina.errors.ResourceError
            When the engine estimates the job would not fit in memory.
        """
        from retina.spin import engine

        field_uT = _check_field(field_uT)
        degree = _check_degree(degree)
        if check_points is None:
            check_points = default_check_points(degree)
        if int(check_points) < 1:
            raise InputError(f"expected check_points >= 1, got {check_points!r}", key="check_points")
        if method != "auto":
            resolved = method
        else:
            resolved = engine.choose_method(system) if accuracy is None else engine.choose_method(system, accuracy=accuracy)

        store = key = None
        if cache:
            from retina.cache import YieldCache, cache_key

            store = YieldCache(cache_dir)
            key = cache_key(system, field_uT, degree, resolved, check_points=int(check_points),
                            accuracy=accuracy if resolved == "sampled" else None)
            rec = store.get(key)
            if rec is not None:
                hit = cls.from_record(rec)
                hit.from_cache = True
                _log.info("yield function of %r at %g uT, degree %d: taken from the cache %s", system.name,
                          field_uT, degree, store.path_for(key))
                return hit

        grid = sphere.grid_for_degree(degree)
        half, full_from_half = grid.hemisphere()
        check = sphere.fibonacci(int(check_points), hemisphere=True)
        n_anti = min(ANTIPODAL_POINTS, len(check))
        dirs = np.concatenate([grid.points[half], check.points, -check.points[:n_anti]], axis=0)
        _log.info("yield function of %r at %g uT, degree %d: method %s, %d field directions", system.name,
                  field_uT, degree, resolved, dirs.shape[0])
        t0 = time.perf_counter()
        # an approximate method reports its approximation and error bars through ``info``
        info: dict = {}
        extra = {"info": info} if resolved in ("sampled", "fast-separable") else {}
        if accuracy is not None:
            extra["accuracy"] = accuracy
        values = np.asarray(engine.compute_yields(system, field_uT, dirs, method=resolved, progress=progress,
                                                  max_bytes=max_bytes, **extra), dtype=float)
        seconds = time.perf_counter() - t0
        if values.shape != (dirs.shape[0],):
            raise RuntimeError(f"engine returned shape {values.shape} for {dirs.shape[0]} directions")
        h = half.size
        n_check = len(check)
        anti_err = float(np.max(np.abs(values[h + n_check:] - values[h:h + n_anti])))
        if not anti_err <= ANTIPODAL_TOLERANCE:
            raise RuntimeError(
                f"the engine's yields of {system.name!r} differ by {anti_err:.3g} between field directions b "
                f"and -b, but Phi(b) = Phi(-b) holds exactly for every system it accepts (see "
                f"YieldFunction.from_system); the hemisphere fit would be wrong, so nothing was fitted "
                f"(method {resolved!r})")
        coeffs = sphere.fit_even(values[:h][full_from_half], grid, degree)
        err = sphere.evaluate(coeffs, check.points) - values[h:h + n_check]
        err_max = float(np.max(np.abs(err)))
        err_rms = float(np.sqrt(np.mean(err**2)))
        _log.info("yield function of %r: computed in %.1f s, truncation error %.2e (max), %.2e (rms)",
                  system.name, seconds, err_max, err_rms)

        from retina.spin.io import dump_system

        prov = {
            "kind": "from_system",
            "spin_system_toml": dump_system(system),
            "system_name": system.name,
            "system_source": system.source or "",
            "reported_yield": system.reported_yield,
            "initial_state": system.initial_state,
            "field_uT": field_uT,
            "method": resolved,
            "degree": degree,
            "grid": grid.name,
            "grid_order": int(grid.degree),
            "grid_points": len(grid),
            "computed_points": int(h),
            "check_grid": check.name,
            "check_points": len(check),
            "truncation_error_max": err_max,
            "truncation_error_rms": err_rms,
            "antipodal_points": int(n_anti),
            "antipodal_difference_max": anti_err,
            "compute_seconds": float(seconds),
            **info,
            "versions": package_versions(),
            "date_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "content_hash": content_hash(coeffs, degree),
        }
        if system.document:
            try:
                import tomli_w

                prov["spin_system_document_toml"] = tomli_w.dumps(system.document)
            except (TypeError, ValueError):  # a document built in Python may hold non-TOML values
                pass
        if key is not None:
            prov["input_hash"] = key
        yf = cls(coeffs, degree, prov, err_max)
        if store is not None:
            try:
                store.put(key, yf)
            except (OSError, InputError) as exc:  # the result stands; only the cache entry is lost
                import warnings

                warnings.warn(f"could not write the yield cache entry {store.path_for(key)}: {exc}",
                              stacklevel=2)
        return yf


def _distinct_axes(points: np.ndarray, k: int, min_angle_deg: float = 10.0) -> list[np.ndarray]:
    """Up to ``k`` of ``points`` (best first) whose axes are at least ``min_angle_deg`` apart."""
    cos_lim = np.cos(np.radians(min_angle_deg))
    out: list[np.ndarray] = []
    for p in points:
        if all(abs(p @ q) < cos_lim for q in out):
            out.append(p)
            if len(out) == k:
                break
    return out


def _check_field(field_uT) -> float:
    try:
        f = float(field_uT)
    except (TypeError, ValueError):
        raise InputError(f"expected a field strength in microtesla, got {field_uT!r}", key="field_uT") from None
    if not np.isfinite(f) or f <= 0:
        raise InputError(f"expected a field strength > 0 microtesla, got {field_uT!r}", key="field_uT")
    return f


def _check_degree(degree) -> int:
    largest = (max(sphere.lebedev_orders()) // 2) // 2 * 2
    try:
        whole = int(degree) == degree
    except (TypeError, ValueError):
        whole = False
    if isinstance(degree, bool) or not whole or degree < 2 or degree % 2 or degree > largest:
        raise InputError(f"expected an even degree between 2 and {largest}, got {degree!r}", key="degree")
    return int(degree)
