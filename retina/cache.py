"""A content-hash cache of computed yield functions.

The key is the sha256 of a canonical JSON record of everything that determines the result: the
canonical spin-system document (:func:`retina.spin.io.dump_system`), the field strength (as the
shortest round-tripping decimal), the degree, the resolved engine method, the number of check points
and the retina version.  Entries are native HDF5 files ``<key>.h5`` (:mod:`retina.io.hdf5`) in the
cache folder: ``$RETINA_CACHE`` when set, else ``$XDG_CACHE_HOME/retina-compass`` (XDG Base
Directory specification), else ``~/.cache/retina-compass``.  Writes are atomic; an
unreadable entry, or one whose coefficients do not match the ``content_hash`` stored with them,
counts as a miss and is removed.

The cache stores and returns plain :class:`retina.io.hdf5.YieldRecord` contents and never imports
:mod:`retina.yieldfn` (which uses it).
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

__all__ = ["default_cache_dir", "cache_key", "YieldCache"]


def default_cache_dir() -> Path:
    """The cache folder.

    ``$RETINA_CACHE`` if set and non-empty; else ``$XDG_CACHE_HOME/retina-compass`` if
    ``XDG_CACHE_HOME`` is set to an absolute path; else ``~/.cache/retina-compass``.  The XDG Base
    Directory specification says a relative ``XDG_CACHE_HOME`` is invalid and is to be ignored.

    Returns
    -------
    Path
    """
    env = os.environ.get("RETINA_CACHE")
    if env:
        return Path(env).expanduser()
    xdg = os.environ.get("XDG_CACHE_HOME")
    if xdg and Path(xdg).is_absolute():
        return Path(xdg) / "retina-compass"
    return Path.home() / ".cache" / "retina-compass"


def cache_key(system, field_uT: float, degree: int, method: str, *, check_points: int,
              accuracy: float | None = None) -> str:
    """The key identifying one :meth:`YieldFunction.from_system` result.

    Parameters
    ----------
    system : SpinSystem
        The pair (its canonical TOML text enters the key).
    field_uT : float
        Field strength, microtesla.
    degree : int
        Degree of the yield function.
    method : str
        The spin method.
    check_points : int
        Number of independent check directions.
    accuracy : float, optional
        The sampled method's requested standard error per yield; enters the key only when given.
        The sampled method's control variate, basis of the random phases, draw schedule and
        precision (:data:`retina.spin.sampling.DEFAULT_CONTROL`, ``DEFAULT_BASIS``,
        ``DEFAULT_TAIL_SPLIT``, ``TAIL_STATES`` and ``DEFAULT_PRECISION``) enter the key too, so results of another estimator are never served
        from the cache.

    Returns
    -------
    str
        sha256 hex digest of these and the package version.
    """
    import retina
    from retina.spin.io import dump_system

    record = {
        "system": dump_system(system),
        "field_uT": repr(float(field_uT)),
        "degree": int(degree),
        "method": str(method),
        "check_points": int(check_points),
        "retina": retina.__version__,
    }
    if accuracy is not None:
        record["accuracy"] = repr(float(accuracy))
    if method == "sampled":                  # these options change the numbers it returns
        from retina.spin.sampling import (DEFAULT_BASIS, DEFAULT_CONTROL, DEFAULT_PRECISION, DEFAULT_TAIL_SPLIT,
                                           TAIL_STATES)
        record["sampling_control"] = DEFAULT_CONTROL
        record["sampling_basis"] = DEFAULT_BASIS
        record["sampling_precision"] = DEFAULT_PRECISION
        record["sampling_tail"] = (None if DEFAULT_TAIL_SPLIT is None else
                                    [DEFAULT_TAIL_SPLIT if isinstance(DEFAULT_TAIL_SPLIT, str)
                                     else repr(float(DEFAULT_TAIL_SPLIT)), TAIL_STATES])
    return hashlib.sha256(json.dumps(record, sort_keys=True).encode("utf-8")).hexdigest()


class YieldCache:
    """A folder of cached yield functions keyed by :func:`cache_key`.

    Parameters
    ----------
    folder : str or Path, optional
        Default :func:`default_cache_dir`. Created on the first :meth:`put`.
    """

    def __init__(self, folder: str | Path | None = None):
        self.folder = Path(folder).expanduser() if folder is not None else default_cache_dir()

    def path_for(self, key: str) -> Path:
        """Where the entry of ``key`` lives (whether or not it exists).

        Parameters
        ----------
        key : str
            A cache key: 64 lower-case hex digits (:func:`cache_key`).

        Returns
        -------
        Path
            ``<folder>/<key>.h5``.

        Raises
        ------
        ValueError
            For anything but a cache key (no path outside the folder can be named).
        """
        if len(key) != 64 or any(c not in "0123456789abcdef" for c in key):
            raise ValueError(f"not a cache key: {key!r}")
        return self.folder / f"{key}.h5"

    def get(self, key: str):
        """The cached yield function for ``key`` as a :class:`retina.io.hdf5.YieldRecord`, or None.

        :meth:`retina.yieldfn.YieldFunction.from_record` turns it into a yield function.

        Parameters
        ----------
        key : str
            A cache key: 64 lower-case hex digits (:func:`cache_key`).

        Returns
        -------
        retina.io.hdf5.YieldRecord or None
            None on a miss: no entry, an entry written for another key, or a damaged entry (an
            unreadable file or coefficients that no longer match their content hash are deleted).
        """
        from retina.errors import InputError
        from retina.io.hdf5 import content_hash, read_yield_function

        path = self.path_for(key)
        if not path.exists():
            return None
        try:
            rec = read_yield_function(path)
        except (InputError, OSError, KeyError, ValueError):
            self._discard(path)
            return None
        if rec.provenance.get("input_hash") != key:
            return None
        if rec.provenance.get("content_hash") != content_hash(rec.coeffs, rec.degree):
            # the coefficients no longer match the hash written with them: a damaged entry
            self._discard(path)
            return None
        return rec

    @staticmethod
    def _discard(path: Path) -> None:
        try:
            path.unlink(missing_ok=True)
        except OSError:  # e.g. a folder in the way: leave it, it stays a miss
            pass

    def put(self, key: str, yf) -> Path:
        """Store a yield function under ``key`` (atomically, replacing any older entry).

        Parameters
        ----------
        key : str
            A cache key: 64 lower-case hex digits (:func:`cache_key`).
        yf : retina.yieldfn.YieldFunction
            Its provenance should carry ``input_hash = key`` (else :meth:`get` treats it as a miss).

        Returns
        -------
        Path
            The entry's file.

        Raises
        ------
        OSError
            When the folder or the file cannot be written.
        """
        from retina.io.hdf5 import save_yield_function

        self.folder.mkdir(parents=True, exist_ok=True)
        return save_yield_function(yf, self.path_for(key), force=True)

    def clear(self) -> int:
        """Remove every entry.

        Returns
        -------
        int
            How many entries were removed.
        """
        n = 0
        if self.folder.is_dir():
            for p in self.folder.glob("*.h5"):
                p.unlink(missing_ok=True)
                n += 1
        return n
