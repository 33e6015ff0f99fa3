"""Maximum-likelihood heading decoding from Poisson counts, with ambiguity detection.

Conventions (owned here)
------------------------
- Log-likelihood of counts ``n (N,)`` at heading ``psi`` (constants dropped):
  known gain ``l(psi) = sum_i n_i log lam_i(psi) - sum_i lam_i(psi)``; unknown gain, profiled out
  (``g_hat = sum n / sum lam``): ``l(psi) = sum_i n_i log lam_i(psi) - n_tot log sum_i lam_i(psi)``.
  Over a heading grid, for many count vectors at once, both are one matrix product
  ``counts @ log(lam).T`` plus a per-heading term.
- Grid: ``G`` equally spaced headings covering the circle (step ``h = 360 / G`` degrees).
  The best grid heading is refined locally:
  ``"parabolic"``: vertex of the parabola through the three grid values around the peak;
  ``"hermite"`` (default when derivatives are known): the maximum of the cubic Hermite interpolant
  of the log-likelihood on the grid cell holding the peak, from the grid values and the exact
  derivatives ``l'(psi_j) = sum_i n_i dlam_ij / lam_ij - sum_i dlam_ij`` (unknown gain:
  ``... - n_tot sum dlam_ij / sum lam_ij``) at the grid nodes (interpolation error O(h^4));
  ``"brent"``: bounded Brent minimisation (``scipy.optimize.minimize_scalar``) of the exact
  negative log-likelihood through the forward model, one decode at a time (slow; a cross-check);
  ``"none"``: the grid heading.
- Ambiguity: the grid log-likelihood's circular local maxima are found; the best peak and the best
  other peak at least ``min_separation_deg`` away are the candidates.  The estimate is
  *ambiguous* when the second peak's likelihood is within a factor ``ambiguity_ratio`` of the best
  (``l_1 - l_2 < ln ambiguity_ratio``).  The candidates are reported, never averaged.  A
  horizontal field makes ``psi`` and ``psi + 180`` exactly equally likely (the yield is even in
  the field direction), so such decodes are flagged.
- Errors are signed circular differences ``estimate - truth`` in ``(-180, 180]`` degrees
  (``retina.readout.circstats``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from retina.errors import InputError
from retina.readout import circstats

__all__ = ["counts_product", "SPARSE_DENSITY", "rms_standard_error", "HeadingEstimate", "DecodeResult", "HeadingDecoder", "MonteCarloResult", "monte_carlo",
           "error_summary"]

_TINY = 1e-300
_CHUNK_ELEMENTS = 4_000_000   # samples x receptors per block in the refinement


SPARSE_DENSITY = 0.05
"""Count matrices with fewer non-zero entries than this fraction are multiplied as sparse matrices
(:func:`counts_product`)."""


def counts_product(counts: np.ndarray, m: np.ndarray) -> np.ndarray:
    """``counts @ m``, skipping the zero counts when most counts are zero (dim light).

    In dim light, or when a head scan shares its photon budget over many poses, nearly every count
    is zero; the product then only needs the non-zero counts (a compressed sparse row matrix
    times ``m``), the same sums without their zero terms (equal up to rounding).

    Parameters
    ----------
    counts : ndarray, shape (S, N)
    m : ndarray, shape (N, G)

    Returns
    -------
    ndarray, shape (S, G)
    """
    if counts.size and np.count_nonzero(counts) < SPARSE_DENSITY * counts.size:
        from scipy.sparse import csr_matrix

        return np.asarray(csr_matrix(counts) @ m)
    return counts @ m


@dataclass(frozen=True)
class HeadingEstimate:
    """One decoded heading.

    Attributes
    ----------
    heading_deg : float
        Maximum-likelihood heading, degrees in [0, 360).
    ambiguous : bool
        A second likelihood peak is within the ambiguity ratio.
    candidates_deg : tuple of float
        Peak headings, best first (one or two).
    candidates_loglik : tuple of float
        Their log-likelihoods (same order).
    """

    heading_deg: float
    ambiguous: bool
    candidates_deg: tuple
    candidates_loglik: tuple


@dataclass(frozen=True)
class DecodeResult:
    """Decoded headings of ``S`` count vectors.

    Attributes
    ----------
    heading_deg : ndarray, shape (S,)
        Refined maximum-likelihood headings, degrees in [0, 360).
    loglik : ndarray, shape (S,)
        Grid log-likelihood at the best grid heading.
    second_deg : ndarray, shape (S,)
        Heading of the best other peak (NaN if none), parabolically refined.
    delta_loglik : ndarray, shape (S,)
        ``l_best - l_second`` (inf if no second peak).
    ambiguous : ndarray of bool, shape (S,)
    """

    heading_deg: np.ndarray
    loglik: np.ndarray
    second_deg: np.ndarray
    delta_loglik: np.ndarray
    ambiguous: np.ndarray

    def __len__(self) -> int:
        return self.heading_deg.shape[0]

    def __getitem__(self, i: int) -> HeadingEstimate:
        cands = [float(self.heading_deg[i])]
        lls = [float(self.loglik[i])]
        if np.isfinite(self.second_deg[i]):
            cands.append(float(self.second_deg[i]))
            lls.append(float(self.loglik[i] - self.delta_loglik[i]))
        return HeadingEstimate(cands[0], bool(self.ambiguous[i]), tuple(cands), tuple(lls))


class HeadingDecoder:
    """Grid maximum-likelihood heading decoder with local refinement.

    Parameters
    ----------
    headings_deg : array_like, shape (G,)
        Equally spaced grid over the full circle (any start).
    lam : array_like, shape (G, N)
        Expected counts at the grid headings.
    dlam : array_like, shape (G, N), optional
        Their heading derivatives, per radian (needed for ``refine="hermite"``).
    gain : {"known", "free"}
        Whether the overall light level is known or profiled out.
    refine : {"hermite", "parabolic", "brent", "none"}, optional
        Default "hermite" when ``dlam`` is given, else "parabolic".
    forward : callable, optional
        ``forward(headings_deg (P,)) -> lam (P, N)``; needed for ``refine="brent"``.
    ambiguity_ratio : float
        Likelihood ratio below which a second peak makes the estimate ambiguous (> 1).
    min_separation_deg : float
        Minimum distance of a second peak from the best one.
    """

    def __init__(self, headings_deg, lam, dlam=None, *, gain: str = "known", refine: str | None = None,
                 forward=None, ambiguity_ratio: float = 10.0, min_separation_deg: float = 30.0):
        h = np.asarray(headings_deg, dtype=float)
        lam = np.asarray(lam, dtype=float)
        if h.ndim != 1 or h.size < 3 or lam.shape[0] != h.size or lam.ndim != 2:
            raise InputError(f"expected headings (G,) with G >= 3 and lam (G, N), got {h.shape} and "
                             f"{lam.shape}", key="decoder.grid")
        step = 360.0 / h.size
        if not np.allclose(np.diff(h), step, atol=1e-9 * 360):
            raise InputError("expected equally spaced headings covering 360 degrees", key="decoder.grid")
        if np.any(lam < 0) or not np.all(np.isfinite(lam)):
            raise InputError("expected finite non-negative expected counts", key="decoder.lam")
        if gain not in ("known", "free"):
            raise InputError(f"expected gain 'known' or 'free', got {gain!r}", key="decoder.gain")
        if refine is None:
            refine = "hermite" if dlam is not None else "parabolic"
        if refine not in ("hermite", "parabolic", "brent", "none"):
            raise InputError(f"unknown refinement {refine!r}", key="decoder.refine")
        if refine == "hermite" and dlam is None:
            raise InputError("hermite refinement needs dlam", key="decoder.refine")
        if refine == "brent" and forward is None:
            raise InputError("brent refinement needs a forward model", key="decoder.refine")
        if not ambiguity_ratio > 1.0:
            raise InputError(f"expected ambiguity_ratio > 1, got {ambiguity_ratio}", key="ambiguity_ratio")
        self.headings_deg = h
        self.step_deg = step
        self._lam = lam
        self._dlam = None if dlam is None else np.asarray(dlam, dtype=float)
        self._scale_of = None                # (decoder, factor) of a scaled decoder: lam, dlam on demand
        self.gain = gain
        self.refine = refine
        self.forward = forward
        self.ambiguity_ratio = float(ambiguity_ratio)
        self.min_separation_deg = float(min_separation_deg)
        self._loglam_T = np.log(np.maximum(lam, _TINY)).T.copy()   # (N, G)
        self._lam_tot = lam.sum(axis=1)                              # (G,)
        self._dlam_tot = None if self.dlam is None else self.dlam.sum(axis=1)
        self._ratio = None
        if self.dlam is not None:                                    # dlam / lam, (G, N)
            self._ratio = np.zeros_like(lam)
            np.divide(self.dlam, lam, out=self._ratio, where=lam > 0)

    def scaled(self, factor: float) -> "HeadingDecoder":
        """The same decoder for expected counts ``factor * lam`` (another light level, same headings).

        Cheaper than building it: ``log(f lam) = log f + log lam`` and ``dlam / lam`` is unchanged,
        so no logarithm or division over the ``(G, N)`` grid is recomputed.  The decodes equal
        those of ``HeadingDecoder(headings, factor * lam, factor * dlam, ...)`` up to rounding.

        Parameters
        ----------
        factor : float
            Positive, finite.

        Returns
        -------
        HeadingDecoder
            Sharing this decoder's ``dlam / lam``; no forward model (``refine="brent"`` refused).

        Raises
        ------
        InputError
            Key ``decoder.scale`` for a factor that is not positive and finite, or with
            ``refine="brent"`` (its forward model is not scaled).
        """
        import copy

        f = float(factor)
        if not (np.isfinite(f) and f > 0):
            raise InputError(f"expected a positive finite scale factor, got {factor!r}", key="decoder.scale")
        if self.refine == "brent":
            raise InputError("a scaled decoder cannot refine with brent (no forward model)", key="decoder.scale")
        new = copy.copy(self)
        new._lam = new._dlam = None          # f * lam and f * dlam only when asked for (decoding needs neither)
        new._scale_of = (self, f)
        new.forward = None
        new._loglam_T = np.maximum(self._loglam_T + np.log(f), np.log(_TINY))
        new._lam_tot = f * self._lam_tot
        new._dlam_tot = None if self._dlam_tot is None else f * self._dlam_tot
        return new

    @property
    def lam(self) -> np.ndarray:
        """Expected counts at the grid headings, ``(G, N)``."""
        if self._lam is None:
            parent, f = self._scale_of
            self._lam = f * parent.lam
        return self._lam

    @property
    def dlam(self) -> np.ndarray | None:
        """Their heading derivatives, per radian, ``(G, N)`` (None when not given)."""
        if self._dlam is None and self._scale_of is not None and self._dlam_tot is not None:
            parent, f = self._scale_of
            self._dlam = f * parent.dlam
        return self._dlam

    @property
    def n_receptors(self) -> int:
        """The number ``N`` of receptors the decoder reads."""
        return self._loglam_T.shape[0]

    @classmethod
    def from_signal(cls, signal, n_grid: int = 360, *, gain: str = "known", refine: str | None = None,
                    degree: int | None = None, **kwargs) -> "HeadingDecoder":
        """A decoder whose model is ``signal`` (a ``SignalModel``) on ``n_grid`` headings from 0.

        ``degree`` uses the exact trigonometric interpolation of the signal model (faster).

        Parameters
        ----------
        signal : retina.signal.noise.SignalModel
            The forward model (also used as ``forward`` for ``refine="brent"``).
        n_grid : int
            Grid headings, >= 8, equally spaced from 0.
        gain : {"known", "free"}
            Whether the overall light level is known or profiled out.
        refine : {"hermite", "parabolic", "brent", "none"}, optional
            As for the class; "parabolic" with a world-fixed texture (no derivatives).
        degree : int, optional
            Harmonic degree of the yield function, for the exact interpolation.
        **kwargs
            ``ambiguity_ratio``, ``min_separation_deg``.

        Returns
        -------
        HeadingDecoder

        Raises
        ------
        InputError
            Key ``n_grid``, for fewer than 8 or a fractional number of headings.
        """
        if int(n_grid) != n_grid or n_grid < 8:
            raise InputError(f"expected a heading grid of at least 8 points, got {n_grid}", key="n_grid")
        h = np.arange(int(n_grid)) * 360.0 / int(n_grid)
        if signal.texture is not None and signal.texture.attached == "world":
            lam, dlam = signal.expected(h), None
            refine = refine or "parabolic"
        elif degree is not None:
            lam, dlam = signal.expected_and_derivative_fourier(h, degree)
        else:
            lam, dlam = signal.expected_and_derivative(h)
        return cls(h, lam, dlam, gain=gain, refine=refine, forward=signal.expected, **kwargs)

    # -- likelihood ------------------------------------------------------------------------------
    def _counts(self, counts) -> np.ndarray:
        c = np.asarray(counts, dtype=float)
        if c.ndim == 1:
            c = c[None, :]
        if c.ndim != 2 or c.shape[1] != self.n_receptors:
            raise InputError(f"expected counts (S, {self.n_receptors}), got {np.shape(counts)}",
                             key="counts")
        if np.any(c < 0) or not np.all(np.isfinite(c)):
            raise InputError("expected finite non-negative counts", key="counts")
        return c

    def loglik(self, counts) -> np.ndarray:
        """Grid log-likelihood of counts (module docstring), constants dropped.

        Parameters
        ----------
        counts : array_like (S, N) or (N,)
            Finite non-negative counts of the ``N`` receptors (one vector counts as ``S = 1``).

        Returns
        -------
        ndarray (S, G)
            Log-likelihood at each grid heading.

        Raises
        ------
        InputError
            Key ``counts``, for another shape or negative or non-finite counts.
        """
        c = self._counts(counts)
        ll = counts_product(c, self._loglam_T)
        if self.gain == "known":
            ll -= self._lam_tot[None, :]
        else:
            ll -= c.sum(axis=1, keepdims=True) * np.log(np.maximum(self._lam_tot, _TINY))[None, :]
        return ll

    def loglik_at(self, counts, headings_deg) -> np.ndarray:
        """Exact log-likelihood through the forward model at arbitrary headings.

        Parameters
        ----------
        counts : array_like (S, N) or (N,)
            Finite non-negative counts of the ``N`` receptors (one vector counts as ``S = 1``).
        headings_deg : float or array_like (P,)
            Headings, degrees.

        Returns
        -------
        ndarray (S, P)
            Log-likelihood, constants dropped as in :meth:`loglik`.

        Raises
        ------
        InputError
            Key ``decoder.forward`` when the decoder has no forward model; key ``counts`` for bad
            counts.
        """
        if self.forward is None:
            raise InputError("this decoder has no forward model", key="decoder.forward")
        c = self._counts(counts)
        lam = np.asarray(self.forward(np.atleast_1d(headings_deg)), dtype=float)
        ll = c @ np.log(np.maximum(lam, _TINY)).T
        tot = lam.sum(axis=1)
        if self.gain == "known":
            return ll - tot[None, :]
        return ll - c.sum(axis=1, keepdims=True) * np.log(tot)[None, :]

    # -- decoding --------------------------------------------------------------------------------
    def decode(self, counts, *, chunk: int = 2000, progress=None) -> DecodeResult:
        """Decode count vectors.

        Parameters
        ----------
        counts : array_like (S, N) or (N,)
            Finite non-negative counts of the ``N`` receptors (one vector counts as ``S = 1``).
        chunk : int
            Count vectors decoded per block (bounds the memory of the ``(chunk, G)`` likelihood).
        progress : callable(done, total), optional
            Called after each block with the vectors decoded so far.

        Returns
        -------
        DecodeResult
            ``S`` estimates with their ambiguity.

        Raises
        ------
        InputError
            Key ``counts``, for another shape or negative or non-finite counts.
        """
        c = self._counts(counts)
        parts = []
        for s in range(0, c.shape[0], chunk):
            parts.append(self._decode_block(c[s:s + chunk]))
            if progress is not None:
                progress(min(s + chunk, c.shape[0]), c.shape[0])
        return DecodeResult(*(np.concatenate([p[k] for p in parts]) for k in range(5)))

    def decode_one(self, counts) -> HeadingEstimate:
        """Decode one count vector.

        Parameters
        ----------
        counts : array_like (N,)
            Finite non-negative counts.

        Returns
        -------
        HeadingEstimate
            The heading, degrees in [0, 360), with its candidates and ambiguity.
        """
        return self.decode(np.asarray(counts)[None, :] if np.ndim(counts) == 1 else counts)[0]

    def _decode_block(self, c):
        ll = self.loglik(c)
        return self._from_loglik(ll, c, self.refine)

    def _from_loglik(self, ll, c, refine):
        S, G = ll.shape
        rows = np.arange(S)
        j1 = np.argmax(ll, axis=1)
        l1 = ll[rows, j1]
        # Circular local maxima, excluding the neighbourhood of the best peak.
        left, right = np.roll(ll, 1, axis=1), np.roll(ll, -1, axis=1)
        peaks = (ll >= left) & (ll >= right)
        sep = np.abs(circstats.wrap180(self.headings_deg[None, :] - self.headings_deg[j1][:, None]))
        cand = np.where(peaks & (sep >= self.min_separation_deg), ll, -np.inf)
        j2 = np.argmax(cand, axis=1)
        l2 = cand[rows, j2]
        has2 = np.isfinite(l2)
        delta = np.where(has2, l1 - l2, np.inf)
        ambiguous = delta < np.log(self.ambiguity_ratio)
        off1 = self._parabolic(ll, j1)
        off2 = self._parabolic(ll, j2)
        second = np.where(has2, circstats.wrap360(self.headings_deg[j2] + off2), np.nan)
        if refine == "none":
            best = self.headings_deg[j1]
        elif refine == "parabolic":
            best = self.headings_deg[j1] + off1
        elif refine == "hermite":
            best = self._hermite(c, ll, j1, off1)
        else:
            best = self._brent(c, j1)
        return circstats.wrap360(best), l1, second, delta, ambiguous

    def decode_scan(self, counts, offsets_deg, *, scale: float | None = None, chunk: int = 500) -> DecodeResult:
        """Decode the heading from counts collected over a head scan.

        Parameters
        ----------
        counts : array_like, shape (S, P, N) or (P, N)
            Counts at each of ``P`` scan poses.
        offsets_deg : array_like, shape (P,)
            Known yaw offsets of the poses from the unknown heading; multiples of the grid step.
        scale : float, optional
            Expected counts at each pose relative to the decoder's grid model; default ``1 / P``
            (a photon budget split over the scan, ``retina.readout.scans``).
        chunk : int
            Count vectors decoded per block.

        Returns
        -------
        DecodeResult
            ``S`` estimates, degrees in [0, 360).

        Raises
        ------
        InputError
            Key ``counts`` for another shape; key ``scan.offsets_deg`` for offsets off the grid.

        Notes
        -----
        ``l(psi) = sum_p [n_p . log lam(psi + o_p) - scale sum lam(psi + o_p)]`` (known gain) or,
        with one unknown gain for the scan, ``sum_p n_p . log lam(psi + o_p) - n_tot log sum_p
        sum lam(psi + o_p)``, both on the grid by shifting columns; refined parabolically.
        """
        c = np.asarray(counts, dtype=float)
        if c.ndim == 2:
            c = c[None]
        off = np.atleast_1d(np.asarray(offsets_deg, dtype=float))
        if c.ndim != 3 or c.shape[1] != off.size or c.shape[2] != self.n_receptors:
            raise InputError(f"expected counts (S, {off.size}, {self.n_receptors}), got {np.shape(counts)}",
                             key="counts")
        shifts = off / self.step_deg
        if not np.allclose(shifts, np.round(shifts), atol=1e-6):
            raise InputError(f"scan offsets must be multiples of the grid step {self.step_deg} deg",
                             key="scan.offsets_deg")
        shifts = np.round(shifts).astype(int)
        P = off.size
        G = self.headings_deg.size
        sc = 1.0 / P if scale is None else float(scale)
        # column j of pose p's row of products is heading psi_j + o_p
        cols = (np.arange(G)[None, :] + shifts[:, None]) % G                      # (P, G)
        tot = (sc * self._lam_tot)[cols].sum(axis=0)                              # (G,)
        # One matrix product for all poses of a block (far faster than one per pose); blocks hold
        # at most about _CHUNK_ELEMENTS products.
        chunk = max(1, min(int(chunk), _CHUNK_ELEMENTS // max(1, P * G)))
        parts = []
        for s in range(0, c.shape[0], chunk):
            cc = c[s:s + chunk]
            S = cc.shape[0]
            X = counts_product(self._counts(cc.reshape(S * P, -1)), self._loglam_T).reshape(S, P, G)
            ll = np.take_along_axis(X, np.broadcast_to(cols[None], (S, P, G)), axis=2).sum(axis=1)
            if self.gain == "known":
                ll -= tot[None, :]
            else:
                ll -= cc.sum(axis=(1, 2))[:, None] * np.log(np.maximum(tot, _TINY))[None, :]
            parts.append(self._from_loglik(ll, None, "parabolic" if self.refine != "none" else "none"))
        return DecodeResult(*(np.concatenate([p[k] for p in parts]) for k in range(5)))

    def _parabolic(self, ll, j):
        G = ll.shape[1]
        rows = np.arange(ll.shape[0])
        lm, l0, lp = ll[rows, (j - 1) % G], ll[rows, j], ll[rows, (j + 1) % G]
        den = lm - 2.0 * l0 + lp
        with np.errstate(invalid="ignore", divide="ignore"):
            off = np.where(den < 0, 0.5 * (lm - lp) / den, 0.0)
        return np.clip(off, -0.5, 0.5) * self.step_deg

    def _hermite(self, c, ll, j1, off_deg):
        """Maximum of the cubic Hermite interpolant of the log-likelihood on the grid cell that
        holds the peak, from grid values and analytic grid derivatives (module docstring)."""
        G, N = self._ratio.shape
        h = np.deg2rad(self.step_deg)
        S = c.shape[0]
        rows = np.arange(S)
        jm, jp = (j1 - 1) % G, (j1 + 1) % G
        dl = np.empty((3, S))
        block = max(1, _CHUNK_ELEMENTS // N)
        n_tot = c.sum(axis=1)
        for k, jj in enumerate((jm, j1, jp)):
            for s in range(0, S, block):
                sl = slice(s, s + block)
                dl[k, sl] = np.einsum("sn,sn->s", c[sl], self._ratio[jj[sl]])
            if self.gain == "known":
                dl[k] -= self._dlam_tot[jj]
            else:
                dl[k] -= n_tot * self._dlam_tot[jj] / np.maximum(self._lam_tot[jj], _TINY)
        right = dl[1] >= 0.0                      # the maximum lies in [j, j+1], else [j-1, j]
        la = np.where(right, ll[rows, j1], ll[rows, jm])
        lb = np.where(right, ll[rows, jp], ll[rows, j1])
        ma = np.where(right, dl[1], dl[0]) * h
        mb = np.where(right, dl[2], dl[1]) * h
        # p'(t) = A t^2 + B t + C for the Hermite cubic on [0, 1]
        A = 6.0 * (la - lb) + 3.0 * (ma + mb)
        B = -6.0 * (la - lb) - 4.0 * ma - 2.0 * mb
        C = ma
        with np.errstate(invalid="ignore", divide="ignore"):
            disc = np.sqrt(np.maximum(B * B - 4.0 * A * C, 0.0))
            t1 = (-B + disc) / (2.0 * A)
            t2 = (-B - disc) / (2.0 * A)
            lin = -C / B
        tol = 1e-9
        ok1 = (t1 >= -tol) & (t1 <= 1 + tol) & (2 * A * t1 + B <= 0)
        ok2 = (t2 >= -tol) & (t2 <= 1 + tol) & (2 * A * t2 + B <= 0)
        small = np.abs(A) <= 1e-12 * (np.abs(B) + np.abs(C) + 1e-300)
        t = np.where(small, lin, np.where(ok1, t1, np.where(ok2, t2, np.nan)))
        good = np.isfinite(t) & (t >= -tol) & (t <= 1 + tol)
        start = np.where(right, j1, jm)
        est = self.headings_deg[start] + np.clip(t, 0.0, 1.0) * self.step_deg
        return np.where(good, est, self.headings_deg[j1] + off_deg)

    def _brent(self, c, j1):
        from scipy.optimize import minimize_scalar

        out = np.empty(c.shape[0])
        for k in range(c.shape[0]):
            centre = self.headings_deg[j1[k]]
            res = minimize_scalar(lambda x: -self.loglik_at(c[k], [x])[0, 0],
                                  bounds=(centre - self.step_deg, centre + self.step_deg),
                                  method="bounded", options={"xatol": 1e-6})
            out[k] = res.x
        return out


def error_summary(errors_deg, *, axial: bool = False) -> dict:
    """Circular error measures of signed errors (degrees).

    Parameters
    ----------
    errors_deg : array_like, shape (S,)
        Signed errors, degrees.
    axial : bool
        Fold the errors to (-90, 90] first (psi and psi + 180 counted equal).

    Returns
    -------
    dict
        ``bias_deg`` (circular mean error, in (-180, 180]), ``rms_deg`` (root mean square of the
        wrapped errors), ``circ_std_deg`` (Zar's circular standard deviation), ``median_abs_deg``,
        ``p95_abs_deg``, ``reversal_fraction`` (``|error| > 90`` deg) and ``rms_se_deg``, the
        Monte Carlo standard error of ``rms_deg`` (:func:`rms_standard_error`).
    """
    e = np.asarray(errors_deg, dtype=float).ravel()
    e = circstats.circular_difference(e, 0.0, axial=axial)
    mv = circstats.mean_vector(e, axial=axial)
    bias = mv.mean_deg
    bias = float(circstats.wrap180(bias)) if not axial else float(circstats.circular_difference(bias, 0.0, axial=True))
    return {
        "n": int(e.size),
        "bias_deg": bias,
        "rms_deg": float(np.sqrt(np.mean(e ** 2))),
        "circ_std_deg": circstats.circular_std(e, axial=axial),
        "median_abs_deg": float(np.median(np.abs(e))),
        "p95_abs_deg": float(np.percentile(np.abs(e), 95)),
        "reversal_fraction": float(np.mean(np.abs(e) > 90.0)),
        "rms_se_deg": rms_standard_error(e),
    }


def rms_standard_error(errors_deg) -> float:
    """Monte Carlo standard error of the rms of independent errors.

    Derived (delta method): the mean square ``m = mean(e**2)`` of ``n`` independent errors has
    standard error ``s / sqrt(n)``, ``s`` the sample standard deviation of ``e**2``; the rms
    ``sqrt(m)`` then has standard error ``s / (2 sqrt(m n))``.  For Gaussian errors of standard
    deviation ``sigma`` this is about ``sigma / sqrt(2 n)`` (6.5 % of the rms at ``n = 120``, 9 % at
    ``n = 60``); uniformly spread errors give about ``0.45 / sqrt(n)`` of the rms.

    Parameters
    ----------
    errors_deg : array_like (n,)
        Wrapped errors in degrees.

    Returns
    -------
    float
        Degrees; nan for fewer than two errors, 0 when every error is 0.
    """
    e2 = np.asarray(errors_deg, dtype=float).ravel() ** 2
    n = e2.size
    if n < 2:
        return float("nan")
    m = float(np.mean(e2))
    if m == 0.0:
        return 0.0
    return float(np.std(e2, ddof=1) / (2.0 * np.sqrt(m * n)))


@dataclass(frozen=True)
class MonteCarloResult:
    """Errors of repeated noisy decodes at one true heading.

    Attributes
    ----------
    true_deg : float
    estimates : DecodeResult
    errors_deg : ndarray, shape (S,)
        ``estimate - truth`` wrapped to (-180, 180].
    summary : dict
        :func:`error_summary` of the errors.
    ambiguous_fraction : float
    """

    true_deg: float
    estimates: DecodeResult
    errors_deg: np.ndarray
    summary: dict = field(default_factory=dict)
    ambiguous_fraction: float = 0.0


def monte_carlo(truth, decoder: HeadingDecoder, true_deg: float, n: int, rng=None) -> MonteCarloResult:
    """Sample count vectors from a model at one heading and decode them.

    ``truth`` may differ from the decoder's model (a scene texture, another gain): that is how
    model mismatch is studied.

    Parameters
    ----------
    truth : retina.signal.noise.SignalModel
        The world the counts are drawn from.
    decoder : HeadingDecoder
        The decoder (its own model).
    true_deg : float
        True heading, degrees.
    n : int
        Number of noisy decodes.
    rng : numpy.random.Generator or int, optional
        Source of the Poisson draws.

    Returns
    -------
    MonteCarloResult
        The estimates, wrapped errors and :func:`error_summary`.
    """
    from retina.signal.poisson import make_rng, sample_counts

    if int(n) != n or n < 1:
        raise InputError(f"expected a positive number of repeats, got {n}", key="decode_repeats")
    lam = truth.expected([true_deg])[0]
    counts = sample_counts(lam, make_rng(rng), size=int(n))
    est = decoder.decode(counts)
    err = circstats.circular_difference(est.heading_deg, true_deg)
    return MonteCarloResult(float(true_deg), est, err, error_summary(err), float(np.mean(est.ambiguous)))
