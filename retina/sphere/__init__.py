"""Functions on the unit sphere: the conventions, and one import for the four modules below.

The work lives in four modules, bottom up:

- :mod:`retina.sphere.harmonics`: the coefficient layout, real spherical harmonics and their
  surface gradients, evaluation of coefficient vectors;
- :mod:`retina.sphere.grids`: quadrature grids (Lebedev) and lattices (Fibonacci), projection of
  sampled values onto the harmonics;
- :mod:`retina.sphere.rotation`: exact rotation of coefficient vectors;
- :mod:`retina.sphere.zonal`: axially symmetric operations (Funk-Hecke, von Mises-Fisher moments,
  axial average, Legendre series).

Every public name of those modules is importable from here (``from retina import sphere``).

Conventions (owned here)
------------------------
Real spherical harmonics, orthonormal on the unit sphere (``int Y_lm^2 dOmega = 1``), without the
Condon-Shortley phase. With ``z = cos(theta)`` and ``phi`` the azimuth of ``(x, y)``::

    Y_l0  = N_l0 P_l(z)
    Y_lm  = sqrt(2) N_lm P_l^m(z) cos(m phi)      (m > 0)
    Y_l-m = sqrt(2) N_lm P_l^m(z) sin(m phi)      (m > 0)
    N_lm  = sqrt((2l + 1) / (4 pi) (l - m)! / (l + m)!)

with ``P_l^m(z) = (1 - z^2)^(m/2) d^m P_l / dz^m`` (no ``(-1)^m``).  They are evaluated from
Cartesian components (``sin^m(theta) cos(m phi) = Re (x + i y)^m``), so there is no singularity at
the poles.

Yield functions are even, ``Phi(b) = Phi(-b)``, so coefficient vectors hold even degrees only:
``l = 0, 2, ..., L`` and inside each degree ``m = -l, ..., l``.  The index of ``(l, m)`` is
``l (l - 1) / 2 + m + l`` and a degree-``L`` vector has ``(L + 1)(L + 2) / 2`` entries
(:func:`~retina.sphere.harmonics.n_coeffs`).  ``L`` must be even.

Rotations are active: rotating a function ``f`` by ``R`` gives ``(R f)(b) = f(R^-1 b)``, and
:func:`~retina.sphere.rotation.rotate` maps coefficients of ``f`` to those of ``R f`` exactly
(block-diagonal real Wigner matrices, built through the z-y-z Euler factorisation
``D(R) = Z(alpha) J Z(beta) J^T Z(gamma)`` where ``J`` is the Wigner block of the fixed rotation
taking the z axis to the y axis, computed once per degree by exact quadrature).

Quadrature: Lebedev rules from :func:`scipy.integrate.lebedev_rule` (weights sum to 4 pi), exact for
polynomials up to the rule's order.  Projecting a degree-``L`` function needs a rule exact to
``2 L`` (:func:`~retina.sphere.grids.grid_for_degree`).
"""

from __future__ import annotations

from retina.sphere.grids import (LEBEDEV_ORDERS, SphereGrid, fibonacci, fit_even, grid_for_degree, lebedev,
                                 lebedev_orders)
from retina.sphere.harmonics import (degree_from_n, evaluate, evaluate_grad, lm_index, n_coeffs, normalize,
                                     real_sh, real_sh_grad)
from retina.sphere.rotation import rotate
from retina.sphere.zonal import VMF_CLOSED_FORM_FROM, axial_average, funk_hecke, vmf_moments, zonal_to_legendre

__all__ = [
    "SphereGrid",
    "n_coeffs",
    "degree_from_n",
    "lm_index",
    "real_sh",
    "real_sh_grad",
    "lebedev",
    "lebedev_orders",
    "grid_for_degree",
    "fibonacci",
    "fit_even",
    "evaluate",
    "evaluate_grad",
    "rotate",
    "funk_hecke",
    "vmf_moments",
    "axial_average",
    "zonal_to_legendre",
    "normalize",
]
