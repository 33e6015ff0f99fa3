"""The TOML spin-system file: schema, validation, and writing it back.

The schema is documented by example in ``assets/example_pair.toml`` (every key is annotated there);
this docstring is the reference.  Units follow DEVELOPERS.md: couplings in millitesla, rates in
s^-1 (or lifetimes in microseconds), distances in nanometres, angles in degrees.

Tables and keys
---------------
``[pair]``
    ``name`` (str, required), ``initial_state`` ("singlet" default | "triplet"),
    ``reported_yield`` ("singlet" default | "triplet").
``[radical_a]``, ``[radical_b]`` (both required)
    ``label`` (str, default "A" / "B"); ``g`` (float, default the free-electron value) or
    ``g_tensor`` (3x3, not both); ``[[radical_x.nuclei]]`` (array of tables, may be empty).
``[[radical_x.nuclei]]``
    ``label`` (str, default "nucleus <i>"), ``spin`` (a positive multiple of 1/2, required), and the
    hyperfine tensor in exactly one of three forms:

    - ``hyperfine_mT = [[..], [..], [..]]``: the full real 3x3 tensor (symmetry not required);
    - ``hyperfine_mT = 1.2``: isotropic, ``A = a * I``;
    - ``principal_mT = [a1, a2, a3]`` with an optional ``orientation`` inline table holding either
      ``euler_zyz_deg = [alpha, beta, gamma]`` or ``axes = [[x..], [y..], [z..]]``.

    ``count = n`` (optional, a whole number >= 1, default 1) declares ``n`` magnetically
    equivalent nuclei with this one spin and tensor (a methyl group, say); they are read as ``n``
    nuclei labelled ``"<label> 1" .. "<label> n"`` and the canonical form lists them one by one.
    The fast separable method reduces such groups exactly by total spin
    (:mod:`retina.spin.equivalence`); the other methods treat them as separate nuclei.

    Principal-axis convention (owned here): with ``R`` the (3, 3) matrix whose *columns* are the
    principal axes written in the molecular frame, ``A = R diag(a1, a2, a3) R^T``.  ``axes`` gives
    the principal axes as *rows* (so ``R = axes^T``; rows must be orthonormal within 1e-6).
    ``euler_zyz_deg`` gives ``R = Rotation.from_euler("ZYZ", [alpha, beta, gamma], degrees=True)``
    (intrinsic z-y'-z''; scipy's upper-case sequence).  No orientation means ``R = I``.
``[coupling]`` (optional)
    ``exchange_mT`` (float, default 0; sign convention in :mod:`retina.spin.system`), and either
    ``dipolar_mT`` (3x3) or ``dipolar = { distance_nm = r, direction = [x, y, z] }`` (point dipole,
    ``D = (mu_0 / 4 pi) (g_e mu_B / r^3) (I - 3 n n^T)`` with ``n`` the normalised direction).
``[kinetics]`` (required)
    ``k_singlet_per_s`` and ``k_triplet_per_s`` (both >= 0, not both 0, and the reported channel
    > 0), or ``lifetime_us`` (``k_S = k_T = 1 / lifetime``), not both forms.
``[relaxation]`` (optional)
    ``random_field_per_s`` (one float for both electrons, or ``[k_A, k_B]``), ``st_dephasing_per_s``.

Physical ranges (:data:`~retina.spin.io.keys.LIMITS`; outside them the value is refused, naming the key)
--------------------------------------------------------------------------------------------------------
====================================================  ==========================================
key                                                   accepted range
====================================================  ==========================================
``nuclei[i].spin``                                    1/2 ... 8 (no known nucleus exceeds 7,
                                                      from memory)
``hyperfine_mT``, ``principal_mT``, ``exchange_mT``,  each entry within +/- 1e4 mT (10 T; organic
``dipolar_mT``                                        radicals couple below ~100 mT, common
                                                      practice, no source)
``g``; ``g_tensor`` entries (and its trace / 3)       0.1 ... 20; -20 ... 20 (and 0.1 ... 20)
``dipolar.distance_nm``                               0.1 ... 1000 nm
``dipolar.direction``, ``orientation.axes`` entries   within +/- 1e6 (the direction is normalised)
``orientation.euler_zyz_deg``                         -720 ... 720 degrees
``lifetime_us``                                       1e-6 ... 1e6 us (1 ps to 1 s)
``k_*_per_s``, ``random_field_per_s``,                0 ... 1e13 s^-1
``st_dephasing_per_s``
``name``, ``label`` (strings)                         at most 200 printable characters
``radical_x.nuclei``                                  at most 64 nuclei per radical
the file                                              a regular file of at most 1 MiB
====================================================  ==========================================

Every problem raises one :class:`retina.errors.InputError` naming the file, the dotted key (for
example ``radical_a.nuclei[1].spin``, counting from 0) and what was expected.  Unknown keys are
errors too, with a "did you mean" suggestion.

:func:`~retina.spin.io.writer.dump_system` writes the canonical form (full 3x3 tensors, explicit
rates), which :func:`~retina.spin.io.reader.loads_system` reads back to an equal system
(:func:`~retina.spin.io.writer.systems_equal`); the canonical text is also what provenance records
and the cache hashes.

Modules
-------
The reader and writer live in five modules, bottom up; every public name is importable from here:
:mod:`retina.spin.io.keys` (key tables, physical ranges, size caps), :mod:`retina.spin.io.values`
(typed reading of one value, the error wording), :mod:`retina.spin.io.tensors` (nuclei, radicals,
point dipole), :mod:`retina.spin.io.reader` (document, text and file to a system) and
:mod:`retina.spin.io.writer` (canonical document and text, equality).
"""

from __future__ import annotations

from retina.spin.io.keys import FREE_ELECTRON_G, LIMITS, MAX_FILE_BYTES, MAX_NAME_CHARS, MAX_NUCLEI
from retina.spin.io.reader import load_system, loads_system, read_text_capped, system_from_document
from retina.spin.io.tensors import point_dipole_mT
from retina.spin.io.writer import canonical_document, dump_system, systems_equal

__all__ = [
    "load_system",
    "loads_system",
    "system_from_document",
    "canonical_document",
    "dump_system",
    "systems_equal",
    "point_dipole_mT",
]
