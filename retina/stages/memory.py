"""How much memory each stage of a scenario needs, estimated before anything is allocated.

:func:`estimate_bytes` gives, for the build (receptors, retina model, sampled molecules) and each
stage, the peak working memory in bytes from the scenario's sizes alone (exact Python integers, so
no size can wrap or overflow).  :func:`check_memory` refuses a run whose largest estimate exceeds
the limit (``--max-memory-gb``, or by default 60 % of the machine's available memory, the same
default as the spin engine) with a :class:`~retina.errors.ResourceError` naming the stage, the
estimate, the limit and the scenario keys that drive it; the CLI prints it as one line, exit 2.

The models count the float64 arrays each stage holds at its peak (names as in the stage
docstrings): ``N`` receptors (both eyes), ``K`` coefficients of the yield function's degree ``L``,
``G = 360`` decoder-grid headings, ``H`` headings, ``F`` scan poses, ``M`` photon levels, ``R``
decode repeats, ``P`` scan poses per decode, ``T`` trials, ``n`` molecules per receptor; a factor
:data:`HEADROOM` covers temporaries.  ``benchmarks``-style measurements are not needed for a guard
whose job is to refuse sizes that are off by orders of magnitude (a 2 x 200,000-receptor retina,
ten million molecules per receptor), not to predict the last megabyte.
"""

from __future__ import annotations

from retina.errors import ResourceError

__all__ = ["estimate_bytes", "check_memory", "HEADROOM"]

HEADROOM = 2
"""Temporaries of numpy expressions roughly double the named arrays."""
_F8 = 8
_G = 360
_CHUNK = 64 * 2**20  # the batch budget of the retina model's molecule rotations (retina.eye.pattern)

_DRIVERS = {
    "build": "eyes.n_receptors, ordering.n_molecules (mode 'molecules'), yield.degree",
    "patterns": "eyes.n_receptors, pose.headings_deg",
    "scan": "eyes.n_receptors, scan.steps",
    "precision": "eyes.n_receptors, readout.decode_repeats, scan.steps",
    "disorder": "eyes.n_receptors, yield.degree",
    "trials": "eyes.n_receptors, trials.n_trials, trials.scan_steps",
}


def estimate_bytes(sc, stages=("patterns", "scan", "precision", "disorder", "trials")) -> dict[str, int]:
    """Peak working memory in bytes of the build and of each named stage of scenario ``sc``.

    Parameters
    ----------
    sc : Scenario
    stages : sequence of str

    Returns
    -------
    dict
        ``{"build": bytes, <stage>: bytes, ...}`` (exact integers).
    """
    N = sum(int(e["n_receptors"]) for e in sc["eyes"])
    L = int(sc["yield"]["degree"])
    K = (L + 1) * (L + 2) // 2
    o = sc["ordering"]
    out: dict[str, int] = {}
    build = N * (7 + 2 * K)
    if o["mode"] == "molecules":
        n = int(o["n_molecules"])
        build += 4 * N * n + 3 * _CHUNK // _F8  # the kept molecule rotations (quaternions) + batches
    out["build"] = build
    grid_model = 6 * _G * N + 2 * (2 * L + 1) * N  # counts, derivatives, decoder tables; Fourier nodes
    if "patterns" in stages:
        H = len(sc["pose"]["headings_deg"])
        out["patterns"] = H * (K + 3 * N)
    if "scan" in stages:
        F = int(sc["scan"]["steps"])
        out["scan"] = F * (K + 3 * N)
    if "precision" in stages:
        R, P = int(sc["readout"]["decode_repeats"]), int(sc["scan"]["steps"])
        out["precision"] = 2 * grid_model + 3 * R * P * N + 3 * R * N + 2 * R * _G
    if "disorder" in stages:
        out["disorder"] = N * K + 4 * 36 * N * 3 + 2 * (2 * L + 1) * N
    if "trials" in stages:
        T, P = int(sc["trials"]["n_trials"]), int(sc["trials"]["scan_steps"])
        out["trials"] = grid_model + 3 * T * P * N + 2 * T * _G
    return {k: HEADROOM * _F8 * v for k, v in out.items()}


def check_memory(sc, stages, max_bytes: int | None = None) -> dict[str, int]:
    """Refuse, before anything is allocated, a run whose build or a stage would not fit in memory.

    Parameters
    ----------
    sc : Scenario
        The scenario (its sizes set the estimates).
    stages : sequence of str
        The stages to run.
    max_bytes : int, optional
        Limit in bytes (default 60 % of the available memory).

    Returns
    -------
    dict of str to int
        The estimate of the build and of each stage, bytes.

    Raises
    ------
    ResourceError
        Naming the part over the limit and what to change.
    """
    from retina.spin.memory import available_bytes

    limit = int(0.6 * available_bytes()) if max_bytes is None else int(max_bytes)
    est = estimate_bytes(sc, stages)
    name, need = max(est.items(), key=lambda kv: kv[1])
    if need > limit:
        where = f"{sc.source}: " if getattr(sc, "source", None) else ""
        raise ResourceError(
            f"{where}the {name} {'step' if name == 'build' else 'stage'} needs about {need / 2**30:.3g} GiB, "
            f"more than the limit of {limit / 2**30:.3g} GiB; reduce {_DRIVERS[name]}, or raise the limit "
            "(--max-memory-gb)")
    return est
