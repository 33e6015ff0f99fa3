"""Malformed inputs for every reader, generated from a valid file, through the command line
(in-process): each must give exit status 2 and one line on stderr naming the file and the key.

Readers: spin-system TOML (``retina yields``), scenario TOML (``retina patterns``), imported yield
tables (``[yield] import``), yield-function HDF5 files (``[yield] file``) and results files
(``retina report``).  The generators walk every leaf of a valid document (or every item of a
file's schema) and replace it with values that no reader may accept: wrong types, NaN and
infinities, numbers far outside any physical range, control characters, missing required entries,
wrong shapes.  Expectation (issue 9, "Done when"): exit 2, exactly one line, the file named, the
key named, no traceback, no output file.  Common practice, no source.
"""

from __future__ import annotations

import copy
import math
import shutil
import tomllib
from pathlib import Path

import h5py
import numpy as np
import pytest
import tomli_w

from retina.cli import main

ASSETS = Path(__file__).resolve().parents[1] / "assets"

# ------------------------------------------------------------------------------ helpers


@pytest.fixture(autouse=True)
def _one_parser(monkeypatch):
    """Build the argument parser once per test (it is most of the cost of an in-process call)."""
    import functools

    import retina.cli

    monkeypatch.setattr(retina.cli, "build_parser", functools.lru_cache(maxsize=1)(retina.cli.build_parser))


def _leaves(doc, prefix=""):
    """(dotted path with [i] indices, container, key) for every scalar leaf of a TOML document."""
    items = doc.items() if isinstance(doc, dict) else enumerate(doc)
    for k, v in items:
        path = (f"{prefix}.{k}" if prefix else k) if isinstance(doc, dict) else f"{prefix}[{k}]"
        if isinstance(v, (dict, list)) and v:
            yield from _leaves(v, path)
        else:
            yield path, doc, k


def _named_prefix(path: str) -> str:
    """The dotted path up to its last named key (the error must name at least this)."""
    return path.split("[")[0] if path.endswith("]") and "[" in path.rsplit(".", 1)[-1] else path


def _mutations(doc):
    """(description, path, mutated document) for every leaf and bad value."""
    numeric_bad = ["text", True, {"a": 1}, math.nan, math.inf, -math.inf, 1e300, -1e300]
    string_bad = [1.5, "a\x00b", ["x"], "x" * 20000]
    for path, _, _ in list(_leaves(doc)):
        for bad in None, *numeric_bad, *string_bad:
            d = copy.deepcopy(doc)
            # find the container again in the copy
            cont, key = _locate(d, path)
            old = cont[key]
            if bad is None:
                continue
            if isinstance(old, bool):
                continue  # flags: any non-bool is bad, but booleans are not generated here
            if isinstance(old, (int, float)) and bad in string_bad and not isinstance(bad, (int, float)):
                pass
            if isinstance(old, (int, float)) and isinstance(bad, (int, float)) and not isinstance(bad, bool) \
                    and math.isfinite(bad) and abs(bad) < 1e300:
                continue  # a finite number where a number belongs may be valid
            if isinstance(old, str) and (isinstance(bad, str) and "\x00" not in bad and len(bad) < 10000):
                continue
            if isinstance(old, str) and isinstance(bad, float) and not math.isfinite(bad):
                pass
            cont[key] = bad
            yield f"{path} = {bad!r:.40}", path, d


def _locate(doc, path):
    cont = doc
    parts = []
    for seg in path.split("."):
        name, *idx = seg.replace("]", "").split("[")
        parts.append(name)
        parts.extend(int(i) for i in idx)
    for p in parts[:-1]:
        cont = cont[p]
    return cont, parts[-1]


def _one_line_exit_2(capsys, argv, source, key):
    status = main(argv)
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    ok = (status == 2 and len(lines) == 1 and "Traceback" not in err and str(source) in lines[0]
          and (key is None or key in lines[0]))
    return ok, status, err.strip()


_EVERY = pytest.mark.parametrize("every", [pytest.param(7, id="every-7th"),
                                            pytest.param(1, id="all", marks=pytest.mark.slow)])
"""Each generator runs twice: every 7th case in the quick loop, every case under the slow mark
(which CI runs too)."""


def _run_cases(capsys, cases, every: int = 1):
    """Run every ``every``-th of the (label, argv, source, key) cases; return the failures."""
    failures = []
    for label, argv, source, key in cases[::every]:
        ok, status, err = _one_line_exit_2(capsys, argv, source, key)
        if not ok:
            failures.append(f"{label}: exit {status}: {err[:300]}")
    return failures


def _assert_all_refused(capsys, cases, every: int, at_least: int, never: Path, shown: int = 20):
    """Every ``every``-th case exits 2 with one line naming file and key; no output is written."""
    assert len(cases) > at_least
    failures = _run_cases(capsys, cases, every)
    assert not failures, f"{len(failures)} of {len(cases)} cases misbehaved:\n" + "\n".join(failures[:shown])
    assert not never.exists()


def _through_scenario(tmp: Path, kind: str, files, prefix: str):
    """(label, argv, file, key) cases that run ``retina patterns`` on a scenario whose ``[yield]``
    names each file under ``kind`` ("import" or "file")."""
    return [(label, ["patterns", str(_scenario_with(tmp, kind, f, f"{prefix}{j}")), "-o", str(tmp / "never"), "-q"],
             f, key) for j, (label, f, key) in enumerate(files)]


def _h5_variant(valid: Path, f: Path, fn) -> Path:
    """A copy of the HDF5 file ``valid`` at ``f``, changed in place by ``fn(h5py.File)``."""
    shutil.copy(valid, f)
    with h5py.File(f, "r+") as h:
        fn(h)
    return f


def _not_hdf5(f: Path):
    """A text file with an HDF5 name: (label, file, key) with no key to name."""
    f.write_text("hello")
    return "not HDF5", f, None


# ------------------------------------------------------------------------------ spin files


def spin_cases(tmp: Path):
    doc = tomllib.loads((ASSETS / "demo_pair.toml").read_text())
    doc["coupling"] = {"exchange_mT": 0.0, "dipolar": {"distance_nm": 2.0, "direction": [0.0, 0.0, 1.0]}}
    doc["relaxation"] = {"random_field_per_s": [1e5, 2e5], "st_dephasing_per_s": 1e4}
    out = tmp / "never.h5"
    i = 0
    for label, path, bad in _mutations(doc):
        i += 1
        f = tmp / f"spin{i}.toml"
        f.write_text(tomli_w.dumps(bad))
        yield label, ["yields", str(f), "-o", str(out), "-q", "--no-cache"], f, _named_prefix(path)
    # structural faults
    for j, (label, text, key) in enumerate([
        ("missing pair", tomli_w.dumps({k: v for k, v in doc.items() if k != "pair"}), "pair"),
        ("missing kinetics", tomli_w.dumps({k: v for k, v in doc.items() if k != "kinetics"}), "kinetics"),
        ("unknown section", tomli_w.dumps({**doc, "extra": {"a": 1}}), "extra"),
        ("unknown key", tomli_w.dumps({**doc, "pair": {**doc["pair"], "colour": "red"}}), "pair.colour"),
        ("65 nuclei", tomli_w.dumps({**doc, "radical_a": {"nuclei": [{"spin": 0.5, "hyperfine_mT": 0.1}] * 65}}),
         "radical_a.nuclei"),
        ("deep nesting", "a = " + "[" * 5000 + "]" * 5000 + "\n", None),
        ("not TOML", "[pair\nname = ", None),
        ("binary", "\udcff".encode("utf-8", "surrogateescape").decode("latin-1") * 10, None),
    ]):
        f = tmp / f"spin_s{j}.toml"
        f.write_text(text, encoding="latin-1" if label == "binary" else "utf-8")
        yield label, ["yields", str(f), "-o", str(out), "-q", "--no-cache"], f, key
    yield "a device", ["yields", "/dev/zero", "-o", str(out), "-q"], "/dev/zero", None
    big = tmp / "big.toml"
    big.write_text("# " + "x" * (2 << 20) + "\n")
    yield "2 MiB file", ["yields", str(big), "-o", str(out), "-q"], big, None


@_EVERY
def test_malformed_spin_files(tmp_path, capsys, every):
    _assert_all_refused(capsys, list(spin_cases(tmp_path)), every, 150, tmp_path / "never.h5")


# ------------------------------------------------------------------------------ scenarios

_SCENARIO = {
    "scenario": {"name": "hardening", "seed": 3},
    "yield": {"system": str(ASSETS / "demo_pair.toml"), "degree": 4, "field_uT": 50.0},
    "ordering": {"model": "cone", "kappa": 5.0, "orientation_deg": [0.0, 10.0, 0.0], "n_molecules": 10,
                 "disorder_kappas": [1.0, 10.0]},
    "eyes": [{"side": "left", "azimuth_deg": -60.0, "n_receptors": 10, "extent_deg": 80.0},
             {"side": "right", "azimuth_deg": 60.0, "n_receptors": 10}],
    "light": {"photons": [10.0, 1000.0], "names": ["dim", "bright"], "ground_ratio": 0.3},
    "field": {"intensity_uT": 50.0, "inclination_deg": 60.0, "declination_deg": 2.0},
    "pose": {"headings_deg": [0.0, 90.0], "pitch_deg": 5.0},
    "scan": {"heading_deg": 10.0, "amplitude_deg": 30.0, "steps": 5},
    "readout": {"photons": [100.0, 1e4], "decode_repeats": 5},
    "trials": {"n_trials": 5, "goal_deg": 15.0, "scan_steps": 3},
    "output": {"formats": ["png"], "dpi": 100, "animation": False},
}


def scenario_cases(tmp: Path):
    out = tmp / "never"
    i = 0
    from retina.scenario import SCHEMA

    # Keys whose schema admits inf (a concentration with no disorder): inf is a valid value there.
    inf_ok = {f"{sec}.{k}" for sec, keys in SCHEMA.items() for k, spec in keys.items() if spec.allow_inf}
    for label, path, bad in _mutations(_SCENARIO):
        if path in inf_ok and label.endswith("= inf"):
            continue
        i += 1
        f = tmp / f"sc{i}.toml"
        f.write_text(tomli_w.dumps(bad))
        yield label, ["patterns", str(f), "-o", str(out), "-q"], f, _named_prefix(path)
    for j, (label, changes, key) in enumerate([
        ("empty level name", {"light": {"photons": [1.0], "names": [""]}}, "light.names"),
        ("dot level name", {"light": {"photons": [1.0], "names": ["."]}}, "light.names"),
        ("slash level name", {"light": {"photons": [1.0], "names": ["a/b"]}}, "light.names"),
        ("photons 1e300", {"light": {"photons": [1e300, 1.0]}}, "light.photons"),
        ("readout photons 1e20", {"readout": {"photons": [1e20]}}, "readout.photons"),
        ("three eyes", {"eyes": [_SCENARIO["eyes"][0]] * 3}, "eyes"),
        ("missing yield file", {"yield": {"file": str(tmp / "absent.h5"), "degree": 4}}, "yield"),
        ("unknown section", {"colour": {"a": 1}}, "colour"),
        ("no degree", {"yield": {"system": str(ASSETS / "demo_pair.toml"), "degree": 7}}, "yield.degree"),
    ]):
        d = copy.deepcopy(_SCENARIO)
        for k, v in changes.items():
            d[k] = v if k in ("eyes", "colour") or k == "yield" else {**d[k], **v}
        f = tmp / f"sc_s{j}.toml"
        f.write_text(tomli_w.dumps(d))
        yield label, ["patterns", str(f), "-o", str(out), "-q"], f, key
    deep = tmp / "deep.toml"
    deep.write_text("a = " + "[" * 5000 + "]" * 5000 + "\n")
    yield "deep nesting", ["patterns", str(deep), "-o", str(out), "-q"], deep, None
    yield "a device", ["patterns", "/dev/zero", "-o", str(out), "-q"], "/dev/zero", None


@_EVERY
def test_malformed_scenarios(tmp_path, capsys, every):
    _assert_all_refused(capsys, list(scenario_cases(tmp_path)), every, 200, tmp_path / "never")


def _scenario_with(tmp: Path, kind: str, target: Path, name: str) -> Path:
    d = copy.deepcopy(_SCENARIO)
    d["yield"] = {kind: str(target), "degree": 4}
    f = tmp / f"{name}.toml"
    f.write_text(tomli_w.dumps(d))
    return f


# ------------------------------------------------------------------------------ import tables


def _dirs(n=60, seed=1):
    v = np.random.default_rng(seed).normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1, keepdims=True)


def import_cases(tmp: Path):
    d = _dirs()
    v = 0.3 + 0.05 * d[:, 2] ** 2
    rows = "\n".join(f"{a!r},{b!r},{c!r},{x!r}" for (a, b, c), x in zip(d.tolist(), v.tolist()))
    csv_cases = [
        ("no header", "0,0,1,0.5\n", None),
        ("bad header", "a,b,c\n1,2,3\n", None),
        ("text cell", "x,y,z,value\n0,0,1,abc\n", "value"),
        ("nan value", "x,y,z,value\n0,0,1,nan\n", "value"),
        ("inf direction", "x,y,z,value\ninf,0,1,0.5\n", "x"),
        ("zero direction", "x,y,z,value\n0,0,0,0.5\n", "x,y,z"),
        ("short row", "x,y,z,value\n0,0,1\n", None),
        ("only header", "x,y,z,value\n", None),
        ("empty", "", None),
        ("all zero yields", "x,y,z,value\n" + "\n".join(f"{a!r},{b!r},{c!r},0" for a, b, c in d.tolist()), "value"),
        ("yield above 1", "x,y,z,value\n" + rows + "\n0,0,1,1.5\n", "value"),
        ("negative yield", "x,y,z,value\n" + rows + "\n0,0,1,-0.2\n", "value"),
        ("huge yield", "x,y,z,value\n" + rows + "\n0,0,1,1e308\n", "value"),
        ("angles out of text", "theta_deg,phi_deg,value\n10,x,0.5\n", "phi_deg"),
    ]
    for j, (label, text, key) in enumerate(csv_cases):
        t = tmp / f"table{j}.csv"
        t.write_text(text)
        yield label, t, key
    good = tmp / "good.npz"
    np.savez(good, directions=d, values=v)
    raw = good.read_bytes()
    trunc = tmp / "trunc.npz"
    trunc.write_bytes(raw[: len(raw) // 2])
    yield "truncated npz", trunc, None
    for label, arrays, key in [
        ("npz missing values", {"directions": d}, "values"),
        ("npz empty", {"directions": np.zeros((0, 3)), "values": np.zeros(0)}, "values"),
        ("npz string values", {"directions": d, "values": np.array(["a"] * len(d))}, "values"),
        ("npz wrong shape", {"directions": d[:, :2], "values": v}, "directions"),
        ("npz length mismatch", {"directions": d, "values": v[:-1]}, "values"),
        ("npz zero yields", {"directions": d, "values": np.zeros(len(d))}, "values"),
        ("npz near float limit", {"directions": d, "values": np.full(len(d), 1.7e308)}, "values"),
        ("npz nan", {"directions": d, "values": np.where(np.arange(len(d)) == 3, np.nan, v)}, "values"),
    ]:
        t = tmp / f"{label.replace(' ', '_')}.npz"
        np.savez(t, **arrays)
        yield label, t, key
    for label, build, key in [
        ("h5 missing values", lambda f: f.create_dataset("directions", data=d), "values"),
        ("h5 values a group", lambda f: (f.create_dataset("directions", data=d), f.create_group("values")), "values"),
        ("h5 string values", lambda f: (f.create_dataset("directions", data=d),
                                        f.create_dataset("values", data=np.array([b"a"] * len(d)))), "values"),
        ("h5 scalar values", lambda f: (f.create_dataset("directions", data=d), f.create_dataset("values", data=0.5)),
         "values"),
    ]:
        t = tmp / f"{label.replace(' ', '_')}.h5"
        with h5py.File(t, "w") as f:
            build(f)
        yield label, t, key
    fake = tmp / "fake.h5"
    fake.write_text("x,y,z,value\n")
    yield "extension without content", fake, None


@_EVERY
def test_malformed_import_tables(tmp_path, capsys, every):
    cases = _through_scenario(tmp_path, "import", import_cases(tmp_path), "imp")
    _assert_all_refused(capsys, cases, every, 25, tmp_path / "never", shown=len(cases))


# ------------------------------------------------------------------------------ yield files


def _valid_yield_file(path: Path) -> Path:
    from retina import sphere
    from retina.yieldfn import YieldFunction

    g = sphere.grid_for_degree(4)
    coeffs = sphere.fit_even(0.3 + 0.05 * g.points[:, 2] ** 2, g, 4)
    YieldFunction(coeffs, 4, {"kind": "invented", "note": "for hardening tests"}, 1e-12).save(path)
    return path


def _out_of_range(it):
    """(label, file tag, value) beyond a numeric schema item's bounds, far enough to be refused."""
    if it.kind not in ("float", "int"):
        return []
    out = [] if it.high is None else [("too large", "hi", it.high * 10 + 1000)]
    return out + ([] if it.low is None else [("too small", "lo", it.low - 1000)])


def _h5_mutations(valid: Path, tmp: Path, schema, prefix: str):
    """(label, file, key) for every item of ``schema``: deleted, a string, a wrong shape, NaN,
    out of range; and every group replaced by a dataset."""
    def variant(name, fn):
        return _h5_variant(valid, tmp / f"{prefix}_{name}.h5", fn)

    with h5py.File(valid, "r") as h:
        members = {}
        for grp in schema.groups:
            if grp.path.endswith("/*"):
                parent = grp.path[:-2]
                members[grp.path] = [f"{parent}/{n}" for n in h[parent]] if parent in h else []
            else:
                members[grp.path] = [grp.path] if grp.path in h else []
    n = 0
    for grp in schema.groups:
        for gpath in members[grp.path]:
            n += 1
            if grp.required:
                yield f"/{gpath} deleted", variant(f"g{n}del", lambda h, g=gpath: h.__delitem__(g)), f"/{gpath}"

            def to_dataset(h, g=gpath):
                del h[g]
                h.create_dataset(g, data=np.zeros(3))
            yield f"/{gpath} a dataset", variant(f"g{n}ds", to_dataset), f"/{gpath}"
            for it in grp.items:
                n += 1
                if it.attr:
                    holder_path, aname = (f"{gpath}/{it.name.split('@')[0]}", it.name.split("@")[1]) \
                        if "@" in it.name else (gpath, it.name)
                    key = f"/{gpath}/{it.name}" if "@" in it.name else f"/{gpath}@{it.name}"

                    def set_attr(h, value, hp=holder_path, a=aname):
                        if value is None:
                            del h[hp].attrs[a]
                        else:
                            h[hp].attrs[a] = value
                    if it.required:
                        yield f"{key} deleted", variant(f"i{n}del", lambda h: set_attr(h, None)), key
                    if it.kind in ("float", "int", "bool"):
                        yield f"{key} text", variant(f"i{n}txt", lambda h: set_attr(h, "text")), key
                        yield f"{key} array", variant(f"i{n}arr", lambda h: set_attr(h, np.zeros(2))), key
                    else:
                        yield f"{key} number", variant(f"i{n}num", lambda h: set_attr(h, 1.5)), key
                        if it.choices or it.kind == "json":
                            yield f"{key} wrong text", variant(f"i{n}bad", lambda h: set_attr(h, "{not json")), key
                    if it.kind == "float" and it.finite:
                        yield f"{key} NaN", variant(f"i{n}nan", lambda h: set_attr(h, np.nan)), key
                    for word, tag, value in _out_of_range(it):
                        yield f"{key} {word}", variant(f"i{n}{tag}", lambda h, v=value: set_attr(h, v)), key
                else:
                    dpath = f"{gpath}/{it.name}"
                    key = f"/{dpath}"

                    def replace(h, value, p=dpath):
                        del h[p]
                        if value is not None:
                            h.create_dataset(p, data=value)
                    with h5py.File(valid, "r") as h:
                        if dpath not in h:
                            continue
                        shape = h[dpath].shape
                        orig = h[dpath][()]
                    if it.required:
                        yield f"{key} deleted", variant(f"d{n}del", lambda h: replace(h, None)), key
                    yield f"{key} text", variant(f"d{n}txt", lambda h: replace(h, np.array([b"a"] * max(1, orig.size)))), key
                    yield f"{key} extra axis", variant(f"d{n}ax", lambda h: replace(h, np.zeros(shape + (2,)))), key
                    if not orig.size:
                        continue
                    bad_values = [("NaN", "nan", np.nan)] if it.kind == "float" and it.finite else []
                    for word, tag, value in bad_values + _out_of_range(it):
                        bad = np.array(orig, dtype=np.int64 if it.kind == "int" and word != "NaN" else float)
                        bad.flat[0] = value
                        yield f"{key} {word}", variant(f"d{n}{tag}", lambda h, b=bad: replace(h, b)), key


def yield_file_cases(tmp: Path):
    from retina.io.hdf5 import YIELD_SCHEMA

    valid = _valid_yield_file(tmp / "valid_yf.h5")
    yield from _h5_mutations(valid, tmp, YIELD_SCHEMA, "yf")

    def extra(name, fn, key):
        return name, _h5_variant(valid, tmp / f"yf_x_{name}.h5", fn), key

    def coeffs_to(value):
        def fn(h):
            attrs = dict(h["yield_function/coeffs"].attrs)
            del h["yield_function/coeffs"]
            ds = h.create_dataset("yield_function/coeffs", data=value)
            for k, v in attrs.items():
                ds.attrs[k] = v
        return fn

    yield extra("all-zero coefficients", coeffs_to(np.zeros(15)), "/yield_function/coeffs")
    yield extra("degree 200", lambda h: h["yield_function/coeffs"].attrs.__setitem__("degree", 200),
                "/yield_function/coeffs@degree")
    yield extra("odd degree", lambda h: h["yield_function/coeffs"].attrs.__setitem__("degree", 3),
                "/yield_function/coeffs@degree")
    yield extra("degree as text", lambda h: h["yield_function/coeffs"].attrs.__setitem__("degree", "4"),
                "/yield_function/coeffs@degree")

    def prov_dataset(h):
        del h["provenance"]
        h.create_dataset("provenance", data=np.zeros(3))
    yield extra("provenance a dataset", prov_dataset, "/provenance")
    yield extra("wrong format", lambda h: h.attrs.__setitem__("format", "something else"), "/@format")
    yield _not_hdf5(tmp / "notes.h5")


@_EVERY
def test_malformed_yield_files(tmp_path, capsys, every):
    cases = _through_scenario(tmp_path, "file", yield_file_cases(tmp_path), "yfs")
    _assert_all_refused(capsys, cases, every, 25, tmp_path / "never", shown=len(cases))


# ------------------------------------------------------------------------------ results files


def synthetic_results(path: Path) -> Path:
    """A small valid results file generated from RESULTS_SCHEMA itself (every item, in range)."""
    from retina.results import RESULTS_SCHEMA, Results, save_results

    sizes = {"N": 6, "H": 2, "F": 3, "M": 2, "G": 360, "K": 2, "P": 3, "Q": 2, "T": 4, "V": 2, "C": 15, "S": 3, "R": 6, "W": 2, "Z": 3, "L": 2}
    groups: dict = {}
    prov: dict = {}
    for grp in RESULTS_SCHEMA.groups:
        names = ["dim", "bright"] if grp.path.endswith("/*") else [None]
        for name in names:
            target = {}
            for it in grp.items:
                lo = it.low if it.low is not None else 0.0
                hi = it.high if it.high is not None else lo + 1.0
                mid = 0.5 * (lo + hi)
                if it.kind == "str":
                    val = "text"
                elif it.kind == "json":
                    # provenance dicts are encoded by the writer; stage groups store JSON text themselves
                    val = {"a": 1} if grp.path == "provenance" else '{"a": 1}'
                elif it.kind == "bool":
                    val = True
                elif it.kind == "int":
                    val = int(math.ceil(lo)) if not it.shape else np.zeros([sizes.get(s, s) for s in it.shape], np.int8)
                else:
                    val = float(mid) if not it.shape else np.full([sizes.get(s, s) for s in it.shape], float(mid))
                target[it.name] = val
            if grp.path == "yield_function":
                target["degree"] = 4
                c = np.zeros(15)
                c[0] = 0.3 * math.sqrt(4 * math.pi)
                target["coeffs"], target["mean"] = c, 0.3
            if grp.path == "provenance":
                target["scenario_toml"] = tomli_w.dumps(_SCENARIO)
                prov = target
            else:
                *parents, last = grp.path.split("/")
                node = groups
                for part in parents:
                    node = node.setdefault(part, {})
                if name is None:
                    node.setdefault(last, {}).update(target)
                else:
                    node[name] = target
    save_results(Results(groups, prov), path)
    return path


def results_cases(tmp: Path):
    from retina.results import RESULTS_SCHEMA

    valid = synthetic_results(tmp / "valid_results.h5")
    yield from _h5_mutations(valid, tmp, RESULTS_SCHEMA, "res")
    yield _not_hdf5(tmp / "res_notes.h5")


def test_synthetic_results_file_is_valid(tmp_path):
    # The generator's base file must itself pass the schema (else every case below is vacuous).
    from retina.io.schema import validate_file
    from retina.results import RESULTS_SCHEMA

    validate_file(synthetic_results(tmp_path / "r.h5"), RESULTS_SCHEMA)


@_EVERY
def test_malformed_results_files(tmp_path, capsys, every):
    cases = [(label, ["report", str(f), "-o", str(tmp_path / "never"), "-q"], f, key)
             for label, f, key in results_cases(tmp_path)]
    _assert_all_refused(capsys, cases, every, 150, tmp_path / "never", shown=30)


# ------------------------------------------------------------------------------ numeric CLI options


@pytest.mark.parametrize("argv, key", [
    (["yields", "{pair}", "-o", "{out}", "--max-memory-gb", "inf"], "--max-memory-gb"),
    (["yields", "{pair}", "-o", "{out}", "--max-memory-gb", "nan"], "--max-memory-gb"),
    (["yields", "{pair}", "-o", "{out}", "--max-memory-gb", "-2"], "--max-memory-gb"),
    (["yields", "{pair}", "-o", "{out}", "--field-uT", "inf"], "--field-uT"),
    (["yields", "{pair}", "-o", "{out}", "--field-uT", "0"], "--field-uT"),
    (["yields", "{pair}", "-o", "{out}", "--check-points", "1000000000"], "--check-points"),
    (["yields", "{pair}", "-o", "{out}", "--degree", "-4"], "--degree"),
    (["rf", "{pair}", "-o", "{out}", "--rf-MHz", "nan", "--rf-nT", "10"], "--rf-MHz"),
    (["rf", "{pair}", "-o", "{out}", "--rf-MHz", "1.3", "--rf-nT", "-1"], "--rf-nT"),
    (["rf", "{pair}", "-o", "{out}", "--rf-MHz", "1.3", "--rf-nT", "10", "--tol", "0"], "--tol"),
    (["patterns", "{pair}", "-o", "{out}", "--dpi", "0"], "--dpi"),
    (["patterns", "{pair}", "-o", "{out}", "--seed", "-1"], "--seed"),
    (["patterns", "{pair}", "-o", "{out}", "--max-memory-gb", "inf"], "--max-memory-gb"),
    (["report", "{pair}", "-o", "{out}", "--dpi", "nan"], "--dpi"),
])
def test_numeric_options_refuse_nan_inf_negative_zero(tmp_path, capsys, argv, key):
    argv = [a.format(pair=ASSETS / "demo_pair.toml", out=tmp_path / "o") for a in argv]
    status = main(argv)
    err = capsys.readouterr().err.strip()
    assert status == 2 and len(err.splitlines()) == 1 and key in err and "Traceback" not in err


def test_unwritable_output_is_refused_before_any_work(tmp_path, capsys):
    # /proc accepts no new files, even from root (common practice, no source): the check must
    # create a file, not read permission bits.
    status = main(["yields", str(ASSETS / "demo_pair.toml"), "-o", "/proc/retina-x.h5", "-q", "--no-cache"])
    err = capsys.readouterr().err.strip()
    assert status == 2 and "cannot write here" in err and "/proc" in err and len(err.splitlines()) == 1
    status = main(["patterns", str(ASSETS / "demo_scenario.toml"), "-o", "/proc/retina-out", "-q"])
    err = capsys.readouterr().err.strip()
    assert status == 2 and "cannot write here" in err and len(err.splitlines()) == 1


def test_memory_guard_refuses_oversized_scenarios(tmp_path, capsys):
    # Derived: 2 x 200,000 receptors x 200 decodes x 25 scan poses of float64 counts alone are
    # 8 * 400,000 * 5,000 B = 16 GB; the guard must refuse under a 1 GiB limit, naming the stage.
    d = copy.deepcopy(_SCENARIO)
    for e in d["eyes"]:
        e["n_receptors"] = 200_000
    d["readout"]["decode_repeats"], d["scan"]["steps"] = 200, 25
    f = tmp_path / "big.toml"
    f.write_text(tomli_w.dumps(d))
    status = main(["precision", str(f), "-o", str(tmp_path / "o"), "-q", "--max-memory-gb", "1"])
    err = capsys.readouterr().err.strip()
    assert status == 2 and "precision stage" in err and str(f) in err and len(err.splitlines()) == 1
    assert not (tmp_path / "o").exists()


# ------------------------------------------------------------------------------ folders published whole


def test_publish_folder_is_one_rename_and_keeps_other_files(tmp_path):
    from retina.io.atomic import make_stage_folder, publish_folder

    out = tmp_path / "report"
    stage = make_stage_folder(out)
    (stage / "a.txt").write_text("new a")
    publish_folder(stage, out)
    assert sorted(p.name for p in out.iterdir()) == ["a.txt"] and not stage.exists()
    (out / "mine.txt").write_text("kept")
    stage = make_stage_folder(out)
    (stage / "a.txt").write_text("newer a")
    publish_folder(stage, out)
    # common practice, no source: --force replaces files of the same names and keeps the others
    assert (out / "a.txt").read_text() == "newer a" and (out / "mine.txt").read_text() == "kept"
    assert [p.name for p in tmp_path.iterdir()] == ["report"]  # nothing left beside it


def test_stale_folders_of_a_killed_run_are_replaced(tmp_path):
    import subprocess
    import sys

    from retina.io.atomic import clean_stale_folders

    out = tmp_path / "report"
    # a dead process's staging folder (a pid that has exited) and a superseded folder whose
    # replacement never arrived (killed between the two renames of publish_folder)
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                          text=True).stdout.strip()
    stale = tmp_path / ".report.abc.partial"
    stale.mkdir()
    (stale / "index.html").write_text("half")
    (stale / ".owner-pid").write_text(dead)
    aside = tmp_path / ".report.def.old"
    aside.mkdir()
    (aside / "index.html").write_text("the previous complete report")
    (aside / ".owner-pid").write_text(dead)
    removed = clean_stale_folders(out)
    assert removed == [stale] and not stale.exists()
    assert (out / "index.html").read_text() == "the previous complete report"
    # a live process's staging folder is left alone
    live = tmp_path / ".report.ghi.partial"
    live.mkdir()
    (live / ".owner-pid").write_text(str(__import__("os").getppid()))
    assert clean_stale_folders(out) == [] and live.exists()


def test_report_killed_while_publishing_leaves_old_or_new_folder(tmp_path):
    # A SIGKILL at any point of write_outputs leaves either no folder or a complete one: the
    # staging folder is renamed once.  Simulated by failing the rename-aside step of a --force
    # rerun; the old report must be intact and a rerun must succeed.
    import os

    from retina.io import atomic

    out = tmp_path / "rep"
    out.mkdir()
    (out / "index.html").write_text("old")
    stage = atomic.make_stage_folder(out)
    (stage / "index.html").write_text("new")
    real_rename = os.rename
    calls = []

    def killed(src, dst):
        calls.append((src, dst))
        if len(calls) == 2:  # after moving the old folder aside, before the new one arrives
            raise KeyboardInterrupt
        return real_rename(src, dst)

    atomic.os.rename = killed
    try:
        with pytest.raises(KeyboardInterrupt):
            atomic.publish_folder(stage, out)
    finally:
        atomic.os.rename = real_rename
    assert not out.exists()  # the window between the two renames
    (next(tmp_path.glob(".rep.*.old")) / ".owner-pid").write_text("999999999")  # its process is gone
    atomic.clean_stale_folders(out)
    assert (out / "index.html").read_text() == "old"


# ------------------------------------------------------------------------------ exact dimensions


@pytest.mark.parametrize("n", [63, 64])
def test_hilbert_dimension_is_exact_and_the_engine_refuses(n):
    from retina.errors import ResourceError
    from retina.spin import engine
    from retina.spin.io import loads_system

    nuclei = "".join("[[radical_a.nuclei]]\nspin = 0.5\nhyperfine_mT = 0.5\n" for _ in range(n))
    system = loads_system(f'[pair]\nname = "wide"\n[radical_a]\n{nuclei}[radical_b]\n[kinetics]\nlifetime_us = 1.0\n',
                          source="wide.toml")
    # Derived: 2 electrons x n spin-1/2 nuclei span 2 * 2 * 2^n states (a 64-bit product wraps at n = 62).
    assert system.dimension == 4 * 2**n
    cost = engine.estimate_cost(system, 100)
    assert cost.bytes >= 16 * (4 * 2**n) ** 2 and not math.isfinite(cost.seconds)
    with pytest.raises(ResourceError, match=f"Hilbert dimension {4 * 2**n}"):
        engine.compute_yields(system, 50.0, np.eye(3), max_bytes=2**40)


def test_stage_memory_estimates_follow_the_scenario_sizes():
    from retina.scenario import scenario_from_dict
    from retina.stages.memory import HEADROOM, estimate_bytes

    d = copy.deepcopy(_SCENARIO)
    d["ordering"].update(mode="molecules", n_molecules=1000)
    est = estimate_bytes(scenario_from_dict(d, base_dir=ASSETS))
    N, K, L, G = 20, 15, 4, 360
    # Derived (the models in retina/stages/memory.py, float64): the build keeps N x n molecule
    # quaternions (4 numbers each) beside the receptors' 7 + 2K numbers and three 64 MiB batches;
    # the precision stage holds 2 grid models of 6 G N + 2 (2L + 1) N numbers and the Poisson draws
    # of R = 5 decodes x P = 5 poses x N receptors, three times.
    assert est["build"] == HEADROOM * 8 * (N * (7 + 2 * K) + 4 * N * 1000 + 3 * 64 * 2**20 // 8)
    grid = 6 * G * N + 2 * (2 * L + 1) * N
    assert est["precision"] == HEADROOM * 8 * (2 * grid + 3 * 5 * 5 * N + 3 * 5 * N + 2 * 5 * G)
    assert set(est) == {"build", "patterns", "scan", "precision", "disorder", "trials"}
