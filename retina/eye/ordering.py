"""Molecular ordering inside a receptor: the orientation distribution of the molecular frame.

Conventions (owned here)
------------------------
An ordering model describes random rotations ``Q`` (molecule-to-receptor: ``v_receptor = Q
v_molecule``).  A molecule with yield function ``f`` (molecular frame) contributes ``f(Q^-1 b)``
for a field direction ``b`` in the receptor frame, i.e. the active rotation ``Q f`` of
:func:`retina.sphere.rotate`.  Each model offers two views of the same distribution:

- ``ensemble(coeffs)``: the receptor response ``E_Q[Q f]`` (annealed average), computed exactly on
  the even real-harmonic coefficients (``(K,)`` or ``(..., K)`` in, same shape out);
- ``sample(n, rng)``: ``n`` draws of ``Q`` (a scipy ``Rotation`` of length ``n``) from a
  ``numpy.random.Generator`` (an integer seeds a new generator), for finite-molecule (quenched)
  receptors.

Models:

- :class:`Aligned`: one fixed rotation (every molecule identical).
- :class:`FreeRotation`: ``Q = Rz(alpha) R0`` with ``alpha`` uniform on ``[0, 2 pi)`` (free rotation
  about the receptor axis); ``R0 = Ry(tilt) Rz(twist)`` puts the molecular ``z`` axis at the angle
  ``tilt`` to the receptor axis.  Ensemble: the m = 0 projection of ``R0 f`` (exact).
- :class:`Cone`: a chosen molecular direction ``u`` in a von Mises-Fisher cone about the receptor
  axis, with the twist about ``u`` tied to the tilt (default), free, restrained by its own von
  Mises concentration, or fixed.  Its exact ensemble average is the average Wigner matrix, a
  diagonal matrix (in the real basis) times the rotation to the mean orientation.  With the
  default tied twist ``kappa = 0`` is isotropic and ``kappa = inf`` aligned.
- :class:`Planar`: a molecular direction restrained to the plane normal to the receptor axis
  (a membrane whose normal is the receptor axis), free in azimuth, softened by a Watson girdle
  law of concentration ``kappa``, with the twist about it free (default), restrained or fixed.
  Exactly in the plane with a free twist, the molecule is restrained in one dimension and free in
  two; the response is always axially symmetric about the receptor axis.
- :class:`ConeNoTwist`: the swing of the ``z`` axis of the frame it acts in, ``Q = Rz(alpha)
  Ry(beta) Rz(-alpha)`` with ``alpha`` uniform and ``cos beta`` von Mises-Fisher distributed
  (density ``kappa exp(kappa (t - 1)) / (1 - exp(-2 kappa))`` on ``t = cos beta``), with no
  twist about the swung axis.  Kept for comparison: for a yield function that is not axially
  symmetric about ``z``, ``kappa = 0`` is *not* isotropic.  Given either the concentration
  ``kappa`` or the order parameter ``<P2> = E[P_2(cos beta)]``, solved for ``kappa`` (``<P2> =
  I_{5/2}(kappa) / I_{1/2}(kappa)``).  Ensemble: the full rotation average by quadrature (``2 L +
  1`` equally spaced ``alpha``, exact for band-limited functions, times the ``cos beta`` rule
  :func:`vmf_cos_rule`, Gauss-Legendre or for large ``kappa`` Gauss-Laguerre with the vMF
  weight, converged to rounding at degree 16).  On the m = 0 part (functions axially symmetric
  about the cone axis) it equals the Funk-Hecke convolution with the vMF kernel, ``lambda_l =
  I_{l+1/2}(kappa) / I_{1/2}(kappa)`` (:meth:`ConeNoTwist.ensemble_axial`).  Until this module
  gained :class:`Cone` with a twist, this law was called ``Cone``.
- :class:`Isotropic`: uniformly random rotations (Haar); the response is the constant mean (no
  compass).  It is the limit of :class:`Cone` and :class:`Planar` when every concentration goes
  to 0, and they return exactly its result there.
- :class:`Composite`: independent steps applied in order (the first acts first on the molecule):
  ``Q = Q_last ... Q_first``.  ``Composite(ConeNoTwist(...), Aligned(...))`` spreads the
  molecular ``z`` axis around its mean direction and then places the molecule;
  ``Composite(Aligned(...), ConeNoTwist(...))`` jitters the whole placed molecule about the
  receptor axis.

How much order a compass needs: count the rotation angles left free.  ``Aligned`` leaves none;
``FreeRotation`` (or ``Cone(kappa=inf, twist="free")``, or ``Planar(twist="fixed")``) leaves one
and restrains two; ``Planar(kappa=inf, twist="free")`` leaves two and restrains one;
``Isotropic`` leaves all three.

The work lives in four modules, bottom up: :mod:`retina.eye.order_rules` (exact averages:
order parameters, quadrature rules, twist factors, swing diagonal) and
:mod:`retina.eye.order_samplers` (seeded draws), :mod:`retina.eye.order_laws` (the models and
:func:`from_settings`), :mod:`retina.eye.order_cases` (the order study's cases).  This module
re-exports their public names.
"""

from __future__ import annotations

from retina.eye.order_cases import StudyCase, concentration_curves, restraint_classes
from retina.eye.order_laws import (MODELS, TWISTS, Aligned, Composite, Cone, ConeNoTwist, FreeRotation, Isotropic,
                                   Ordering, Planar, from_settings)
from retina.eye.order_rules import (girdle_cos_rule, girdle_order_parameter, kappa_from_order_parameter,
                                    order_parameter_from_kappa, swing_diagonal, twist_factors, vmf_cos_rule)
from retina.eye.order_samplers import as_generator

__all__ = ["Ordering", "Aligned", "FreeRotation", "Cone", "ConeNoTwist", "Planar", "Isotropic",
           "Composite", "kappa_from_order_parameter", "order_parameter_from_kappa",
           "girdle_order_parameter", "vmf_cos_rule", "girdle_cos_rule", "swing_diagonal",
           "twist_factors", "as_generator", "from_settings", "MODELS", "TWISTS",
           "StudyCase", "restraint_classes", "concentration_curves"]
