"""The small scenario the RF stage tests share: two eyes of 150 receptors, two light levels, 50 uT."""

from __future__ import annotations

from pathlib import Path

from retina.scenario import scenario_from_dict


def small_rf_scenario(tmp_path: Path, rf: dict, pair: str, *, name: str, seed: int):
    """A scenario around ``pair`` (spin-system TOML text, written to ``tmp_path``) with ``[rf]`` = ``rf``."""
    (tmp_path / "pair.toml").write_text(pair)
    doc = {"scenario": {"name": name, "seed": seed},
           "yield": {"system": "pair.toml", "degree": 4},
           "eyes": [{"side": "left", "azimuth_deg": -60.0, "n_receptors": 150},
                    {"side": "right", "azimuth_deg": 60.0, "n_receptors": 150}],
           "light": {"photons": [300.0, 3000.0], "names": ["dim", "bright"]},
           "field": {"intensity_uT": 50.0, "inclination_deg": 60.0, "declination_deg": 0.0},
           "pose": {"headings_deg": [0.0, 90.0]},
           "scan": {"steps": 5},
           "trials": {"n_trials": 20, "scan_steps": 3},
           "rf": rf}
    return scenario_from_dict(doc, base_dir=tmp_path)
