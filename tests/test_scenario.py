"""Scenario files: schema, defaults, relative paths, round trip and clear errors."""

from __future__ import annotations

import datetime as dt
import tomllib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from retina.errors import InputError
from retina.scenario import dump_scenario, load_scenario, save_scenario, scenario_from_dict

ASSETS = Path(__file__).resolve().parent.parent / "assets"
DEMO = ASSETS / "demo_scenario.toml"

MINIMAL = """
[yield]
system = "pair.toml"

[field]
intensity_uT = 48.0
inclination_deg = 64.0
declination_deg = -2.0
"""


@pytest.fixture()
def folder(tmp_path):
    (tmp_path / "pair.toml").write_text("# placeholder; the scenario only checks that it exists\n")
    return tmp_path


def write(folder: Path, text: str, name: str = "s.toml") -> Path:
    p = folder / name
    p.write_text(text)
    return p


def test_demo_scenario_loads_and_names_its_pair():
    sc = load_scenario(DEMO)
    kind, path = sc.yield_source
    assert kind == "system" and path == (ASSETS / "demo_pair.toml").resolve()
    assert [e["side"] for e in sc["eyes"]] == ["left", "right"]
    assert sc["light"]["names"] == ["dim", "bright"]
    assert sc.text == DEMO.read_text()  # provenance keeps the file verbatim


def test_round_trip_load_dump_load_is_equal(folder, tmp_path_factory):
    sc = load_scenario(DEMO)
    other = tmp_path_factory.mktemp("elsewhere")
    p = save_scenario(sc, other / "copy.toml")
    again = load_scenario(p)
    assert again == sc
    # and once more through the text, to check the dump is a fixed point
    assert dump_scenario(again) == dump_scenario(sc)


def test_defaults_are_filled_and_relative_paths_resolve_from_the_file(folder):
    sc = load_scenario(write(folder, MINIMAL))
    assert sc["yield"]["system"] == (folder / "pair.toml").resolve()
    assert sc["output"]["dir"] == (folder / "retina-results").resolve()
    assert sc["yield"]["degree"] == 12 and sc["ordering"]["model"] == "cone"
    assert len(sc["eyes"]) == 2 and sc["eyes"][0]["azimuth_deg"] == -60.0


def test_ordering_keys_old_cone_inf_and_the_model_built(folder):
    # An old file's model = "cone" still loads and now means the cone with the twist tied to the
    # tilt (isotropic at kappa = 0); kappa = inf (TOML) survives the round trip.
    from retina.eye import ordering as om

    sc = load_scenario(write(folder, MINIMAL + "\n[ordering]\nmodel = 'cone'\nkappa = 5.0\n"))
    o = sc["ordering"]
    assert (o["model"], o["twist"], o["kappa"]) == ("cone", "tied", 5.0)
    m = om.from_settings(o["model"], kappa=o["kappa"], twist=o["twist"],
                         twist_kappa=o["twist_kappa"], orientation_deg=o["orientation_deg"])
    assert isinstance(m, om.Cone) and m.twist_kappa == 5.0
    sc2 = load_scenario(write(folder, MINIMAL + "\n[ordering]\nmodel = 'plane'\nkappa = inf\n"
                                      "twist = 'restrained'\ntwist_kappa = 2.0\n", "p.toml"))
    assert sc2["ordering"]["kappa"] == float("inf")
    assert tomllib.loads(dump_scenario(sc2))["ordering"]["kappa"] == float("inf")
    o = sc2["ordering"]
    m = om.from_settings(o["model"], kappa=o["kappa"], twist=o["twist"], twist_kappa=o["twist_kappa"])
    assert isinstance(m, om.Planar) and m.twist_kappa == 2.0 and m.p2 == -0.5
    # ordering.axis: any molecular direction, restrained by the cone (on the receptor axis) or
    # held in the plane (along the receptor x axis).
    from retina.build import build_ordering

    sc3 = load_scenario(write(folder, MINIMAL + "\n[ordering]\naxis = [1.0, 1.0, 0.0]\n", "a.toml"))
    u = [2 ** -0.5, 2 ** -0.5, 0.0]
    assert build_ordering(sc3).mean.apply(u) == pytest.approx([0, 0, 1.0], abs=1e-14)
    assert build_ordering(sc3, model="plane").mean.apply(u) == pytest.approx([1.0, 0, 0], abs=1e-14)


def test_location_and_native_toml_date(folder):
    text = MINIMAL.split("[field]")[0] + "[field]\nlatitude_deg = 47.5\nlongitude_deg = 8.2\ndate = 2026-04-01\n"
    sc = load_scenario(write(folder, text))
    assert sc.field_uses_location and sc["field"]["date"] == dt.date(2026, 4, 1)
    text2 = text.replace("date = 2026-04-01", 'date = "2026-04-01"')
    assert load_scenario(write(folder, text2, "t.toml"))["field"]["date"] == dt.date(2026, 4, 1)
    assert load_scenario(write(folder, text2, "t.toml")) == sc


@pytest.mark.parametrize("text, key, expect", [
    (MINIMAL + "\n[ordering]\nkapa = 3.0\n", "ordering.kapa", "did you mean 'kappa'"),
    (MINIMAL.replace("inclination_deg", "inclinaton_deg"), "field.inclinaton_deg", "did you mean 'inclination_deg'"),
    (MINIMAL + "\n[readuot]\nphotons = [1.0]\n", "readuot", "did you mean 'readout'"),
    (MINIMAL.replace('system = "pair.toml"', 'system = "pair.toml"\ndegree = "12"'), "yield.degree", "integer"),
    (MINIMAL.replace('system = "pair.toml"', 'system = "pair.toml"\ndegree = 7'), "yield.degree", "even"),
    (MINIMAL + "\n[scenario]\nseed = -1\n", "scenario.seed", ">= 0"),
    (MINIMAL + "\n[scenario]\nseed = true\n", "scenario.seed", "integer"),
    (MINIMAL + "\n[light]\nphotons = [10.0, -3.0]\nnames = ['a', 'b']\n", "light.photons", "> 0"),
    (MINIMAL + "\n[light]\nphotons = [10.0, 30.0]\nnames = ['a']\n", "light.names", "as many names"),
    (MINIMAL + "\n[ordering]\nmodel = 'conical'\n", "ordering.model", "did you mean 'cone'"),
    (MINIMAL + "\n[output]\nformats = ['png', 'jpg']\n", "output.formats", "expected entries among"),
    (MINIMAL + "\n[ordering]\ntwist = 'loose'\n", "ordering.twist", '"tied", "free", "fixed", "restrained"'),
    (MINIMAL + "\n[ordering]\nkappa = -inf\n", "ordering.kappa", "a number or inf"),
    (MINIMAL + "\n[ordering]\nkappa = -0.5\n", "ordering.kappa", ">= 0"),
    (MINIMAL + "\n[ordering]\nstudy_kappas = [0.0, -1.0]\n", "ordering.study_kappas", ">= 0"),
    (MINIMAL + "\n[pose]\npitch_deg = inf\n", "pose.pitch_deg", "a finite number"),
    (MINIMAL + "\n[ordering]\naxis = [0.0, 0.0, 0.0]\n", "ordering.axis", "a non-zero direction"),
    (MINIMAL + "\n[ordering]\nmodel = 'axial'\naxis = [1.0, 0.0, 0.0]\n", "ordering.axis", "not 'axial'"),
    (MINIMAL + "\n[ordering]\naxis = [1.0, 0.0, 0.0]\norientation_deg = [0.0, 10.0, 0.0]\n", "ordering.axis",
     "not both"),
    (MINIMAL.replace("pair.toml", "nowhere.toml"), "yield.system", "file not found"),
    (MINIMAL.replace('system = "pair.toml"', 'system = "pair.toml"\nfile = "pair.toml"'), "yield", "exactly one"),
    (MINIMAL.replace("declination_deg = -2.0", ""), "field.declination_deg", "missing declination_deg"),
    (MINIMAL + "\n[[eyes]]\nside = 'left'\nazimuth_deg = -50.0\n[[eyes]]\nside = 'left'\nazimuth_deg = 50.0\n",
     "eyes", "one left and one right"),
    (MINIMAL + "\n[[eyes]]\nside = 'right'\n", "eyes[0].azimuth_deg", "missing required key"),
    (MINIMAL + "\n[pose]\nheadings_deg = [0.0, nan]\n", "pose.headings_deg", "finite"),
    (MINIMAL + "\n[readout]\ncompare_nuisance = 'texture'\n", "readout.compare_nuisance", "receptor_gain"),
    (MINIMAL.replace("inclination_deg = 64.0", "inclination_deg = 120.0"), "field.inclination_deg", "<= 90"),
    (MINIMAL + "\n[[eyes]]\nside = 'right'\nazimuth_deg = 60.0\nextent_deg = 0.0\n", "eyes[0].extent_deg", ">= 1"),
])
def test_bad_scenarios_name_file_key_and_expectation(folder, text, key, expect):
    p = write(folder, text)
    with pytest.raises(InputError) as info:
        load_scenario(p)
    err = info.value
    assert err.source == str(p.resolve()) and err.key == key
    assert expect in str(err) and str(p.resolve()) in str(err)


def test_not_toml_and_missing_file(folder):
    with pytest.raises(InputError, match="not valid TOML"):
        load_scenario(write(folder, "[yield\nsystem = 1"))
    with pytest.raises(InputError, match="scenario file not found"):
        load_scenario(folder / "absent.toml")


def test_replace_revalidates(folder):
    sc = load_scenario(write(folder, MINIMAL))
    assert sc.replace(trials={"n_trials": 5})["trials"]["n_trials"] == 5
    with pytest.raises(InputError, match="trials.n_trials"):
        sc.replace(trials={"n_trials": 0})
    with pytest.raises(InputError, match="did you mean 'trials'"):
        sc.replace(trails={"n_trials": 5})


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**63 - 1),
       inc=st.floats(-90, 90, allow_nan=False),
       photons=st.lists(st.floats(1e-3, 1e9, allow_nan=False), min_size=1, max_size=5),
       degree=st.sampled_from([2, 4, 8, 16, 40]),
       # printable text: the schema refuses control characters (they break HDF5 attributes)
       name=st.text(alphabet=st.characters(blacklist_categories=("Cc", "Cs")), max_size=20))
def test_round_trip_property(seed, inc, photons, degree, name):
    # Derived: dump writes every value exactly (TOML floats round-trip through repr), so any valid
    # document loads back to an equal scenario.
    here = ASSETS
    doc = {"scenario": {"seed": seed, "name": name},
           "yield": {"system": "demo_pair.toml", "degree": degree},
           "field": {"intensity_uT": 50.0, "inclination_deg": inc, "declination_deg": 0.0},
           "light": {"photons": photons, "names": [f"level {i}" for i in range(len(photons))]}}
    sc = scenario_from_dict(doc, base_dir=here)
    again = scenario_from_dict(tomllib.loads(dump_scenario(sc)), base_dir=Path("/"))
    assert again == sc
