"""Reading a spin-system TOML file: the document's tables into a :class:`~retina.spin.system.SpinSystem`.

The schema is the docstring of :mod:`retina.spin.io`.  Files are read with a size cap before
parsing; every problem is one :class:`~retina.errors.InputError` naming the file and the key.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np

from retina.errors import InputError
from retina.spin.io.keys import (_COUPLING_KEYS, _DIPOLAR_KEYS, _KINETICS_KEYS, _PAIR_KEYS, _RELAXATION_KEYS,
                                 _STATES, _TOP_KEYS, MAX_FILE_BYTES)
from retina.spin.io.tensors import _radical, point_dipole_mT
from retina.spin.io.values import _check_keys, _Ctx, _matrix, _number, _readonly, _string, _table, _vector
from retina.spin.system import Relaxation, SpinSystem

__all__ = ["system_from_document", "loads_system", "read_text_capped", "load_system"]


def system_from_document(doc: dict, source: str | Path | None = None) -> SpinSystem:
    """Validate a parsed spin-system document and build the :class:`SpinSystem`.

    Parameters
    ----------
    doc : dict
        The parsed TOML content (as from ``tomllib``).
    source : str or Path, optional
        File name used in error messages and stored as ``SpinSystem.source``.

    Returns
    -------
    SpinSystem
        Immutable, in SI units (module docstring, ``LIMITS``).

    Raises
    ------
    InputError
        On the first wrong, missing or unknown value, naming the dotted key.
    """
    src = str(source) if source is not None else None
    ctx = _Ctx(src)
    if not isinstance(doc, dict):
        raise ctx.fail("", "expected a TOML document (a table at the top level)")
    _check_keys(ctx, doc, _TOP_KEYS, "")

    pair = _table(ctx, doc, "pair", "", required=True)
    _check_keys(ctx, pair, _PAIR_KEYS, "pair")
    if "name" not in pair:
        raise ctx.fail("pair.name", "missing; expected a name for the radical pair (a string)")
    name = _string(ctx, pair["name"], "pair.name")
    initial = _string(ctx, pair.get("initial_state", "singlet"), "pair.initial_state", _STATES)
    reported = _string(ctx, pair.get("reported_yield", "singlet"), "pair.reported_yield", _STATES)

    rad_a = _radical(ctx, doc, "radical_a", "A")
    rad_b = _radical(ctx, doc, "radical_b", "B")

    exchange, dipolar = 0.0, None
    coupling = _table(ctx, doc, "coupling", "", required=False)
    if coupling is not None:
        _check_keys(ctx, coupling, _COUPLING_KEYS, "coupling")
        if "exchange_mT" in coupling:
            exchange = _number(ctx, coupling["exchange_mT"], "coupling.exchange_mT", limit="coupling_mT",
                               what="a coupling in mT")
        if "dipolar_mT" in coupling and "dipolar" in coupling:
            raise ctx.fail("coupling.dipolar", "give either dipolar_mT or dipolar, not both")
        if "dipolar_mT" in coupling:
            dipolar = _matrix(ctx, coupling["dipolar_mT"], "coupling.dipolar_mT", limit="coupling_mT",
                              what="a coupling in mT")
        elif "dipolar" in coupling:
            dip = _table(ctx, coupling, "dipolar", "coupling", required=True)
            _check_keys(ctx, dip, _DIPOLAR_KEYS, "coupling.dipolar")
            for k in _DIPOLAR_KEYS:
                if k not in dip:
                    raise ctx.fail(f"coupling.dipolar.{k}", "missing; the point dipole needs distance_nm and direction")
            r = _number(ctx, dip["distance_nm"], "coupling.dipolar.distance_nm", what="a distance in nm",
                        limit="distance_nm")
            n = _vector(ctx, dip["direction"], "coupling.dipolar.direction", limit="axes",
                        what="a direction component")
            if not np.max(np.abs(n)) > 0:
                raise ctx.fail("coupling.dipolar.direction", "expected a non-zero direction vector")
            dipolar = point_dipole_mT(r, n)
        if dipolar is not None:
            dipolar = _readonly(dipolar)

    kin = _table(ctx, doc, "kinetics", "", required=True)
    _check_keys(ctx, kin, _KINETICS_KEYS, "kinetics")
    if "lifetime_us" in kin:
        for k in ("k_singlet_per_s", "k_triplet_per_s"):
            if k in kin:
                raise ctx.fail(f"kinetics.{k}", "give either lifetime_us or k_singlet_per_s/k_triplet_per_s, not both")
        tau = _number(ctx, kin["lifetime_us"], "kinetics.lifetime_us", minimum=0.0, strict=True,
                      what="a lifetime in microseconds")
        _number(ctx, tau, "kinetics.lifetime_us", what="a lifetime in microseconds", limit="lifetime_us")
        k_s = k_t = 1.0 / (tau * 1e-6)
    else:
        for k in ("k_singlet_per_s", "k_triplet_per_s"):
            if k not in kin:
                raise ctx.fail(f"kinetics.{k}", "missing; give lifetime_us, or both k_singlet_per_s and k_triplet_per_s")
        k_s = _number(ctx, kin["k_singlet_per_s"], "kinetics.k_singlet_per_s", minimum=0.0, what="a rate in s^-1",
                      limit="rate_per_s")
        k_t = _number(ctx, kin["k_triplet_per_s"], "kinetics.k_triplet_per_s", minimum=0.0, what="a rate in s^-1",
                      limit="rate_per_s")
        reported_key = f"k_{reported}_per_s"
        if (k_s if reported == "singlet" else k_t) == 0.0:
            raise ctx.fail(f"kinetics.{reported_key}",
                           f"expected a rate > 0: the reported {reported} yield would be zero everywhere")

    relaxation = Relaxation()
    rel = _table(ctx, doc, "relaxation", "", required=False)
    if rel is not None:
        _check_keys(ctx, rel, _RELAXATION_KEYS, "relaxation")
        rf = (0.0, 0.0)
        if "random_field_per_s" in rel:
            value = rel["random_field_per_s"]
            if isinstance(value, list):
                vec = _vector(ctx, value, "relaxation.random_field_per_s", n=2)
                for i, v in enumerate(vec):
                    if v < 0:
                        raise ctx.fail(f"relaxation.random_field_per_s[{i}]", f"expected a rate >= 0 in s^-1, got {v:g}")
                    _number(ctx, float(v), f"relaxation.random_field_per_s[{i}]", what="a rate in s^-1",
                            limit="rate_per_s")
                rf = (float(vec[0]), float(vec[1]))
            else:
                k = _number(ctx, value, "relaxation.random_field_per_s", minimum=0.0,
                            what="a rate in s^-1 (or [k_A, k_B])", limit="rate_per_s")
                rf = (k, k)
        std = 0.0
        if "st_dephasing_per_s" in rel:
            std = _number(ctx, rel["st_dephasing_per_s"], "relaxation.st_dephasing_per_s", minimum=0.0,
                          what="a rate in s^-1", limit="rate_per_s")
        relaxation = Relaxation(random_field=rf, st_dephasing=std)

    return SpinSystem(
        name=name,
        radicals=(rad_a, rad_b),
        exchange_mT=exchange,
        dipolar_mT=dipolar,
        k_singlet=k_s,
        k_triplet=k_t,
        relaxation=relaxation,
        initial_state=initial,
        reported_yield=reported,
        source=src,
        document=doc,
    )


def loads_system(text: str, source: str | Path | None = None) -> SpinSystem:
    """Parse TOML text into a :class:`SpinSystem`.

    Parameters
    ----------
    text : str
        The TOML document (schema in the module docstring).
    source : str or Path, optional
        Name used in error messages and stored as ``SpinSystem.source``.

    Returns
    -------
    SpinSystem

    Raises
    ------
    InputError
        When the text is not TOML or any value is wrong.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"TOML syntax error: {exc}", source=source) from None
    except RecursionError:
        raise InputError("arrays or tables nested too deeply; expected a spin-system TOML file",
                         source=source) from None
    return system_from_document(doc, source)


def read_text_capped(path: Path, max_bytes: int) -> bytes:
    """The bytes of a regular file of at most ``max_bytes``.

    A device such as /dev/zero, a FIFO or a larger file is refused before it is read into memory.

    Parameters
    ----------
    path : Path
        The file.
    max_bytes : int
        Largest size accepted.

    Returns
    -------
    bytes

    Raises
    ------
    InputError
        When the path is neither a regular file nor a folder (a device, a FIFO), or the file is
        too large.
    OSError
        From ``stat`` or ``open`` (a missing or unreadable file; a folder): the caller words it.
    """
    import stat

    st = path.stat()
    if not stat.S_ISREG(st.st_mode) and not stat.S_ISDIR(st.st_mode):
        raise InputError("not a regular file; expected a TOML text file", source=path)
    with path.open("rb") as fh:
        data = fh.read(max_bytes + 1)
    if len(data) > max_bytes:
        raise InputError(f"larger than {max_bytes // 1024} KiB; expected a TOML text file", source=path)
    return data


def load_system(path: str | Path) -> SpinSystem:
    """Read and validate a spin-system TOML file.

    Parameters
    ----------
    path : str or Path
        The file (schema in the module docstring).

    Returns
    -------
    SpinSystem
        With ``source`` set to the file name.

    Raises
    ------
    InputError
        When the file is missing or unreadable, is not TOML, or any value is wrong.
    """
    path = Path(path)
    try:
        text = read_text_capped(path, MAX_FILE_BYTES).decode("utf-8-sig")  # a byte-order mark is not TOML
    except InputError:
        raise
    except FileNotFoundError:
        raise InputError("file not found; expected a spin-system TOML file", source=path) from None
    except IsADirectoryError:
        raise InputError("is a folder; expected a spin-system TOML file", source=path) from None
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start}); expected a TOML file", source=path) from None
    except OSError as exc:
        raise InputError(f"cannot read: {exc.strerror}", source=path) from None
    return loads_system(text, source=path)
