"""Run config: the example loads; bad definitions name the key."""

from __future__ import annotations

from pathlib import Path

import pytest

from kinetics.config import load_run_config, run_config_from_dict
from kinetics.errors import ConfigError
from kinetics.signals import validate_signals

ROOT = Path(__file__).parent.parent


def _raw(**changes):
    raw = {
        "run": {"folder": "spectra"},
        "signals": [
            {"name": "A", "window_ppm": [1.0, 1.4], "nuclei": 3},
            {"name": "B", "window_ppm": [3.5, 3.8], "nuclei": 2},
            {"name": "S", "window_ppm": [0.0, 0.2], "nuclei": 9, "standard": True, "concentration_mol_per_l": 0.01},
        ],
    }
    raw.update(changes)
    return raw


def test_example_config_loads_with_its_keys():
    config = load_run_config(ROOT / "configs" / "run_example.toml")
    assert [s.name for s in config.signals] == ["A_CH3", "B_CH2", "standard"]
    assert config.signal("A_CH3").lineshape.n_lines == 3
    assert config.signal("B_CH2").lineshape.coupling_hz == 7.0
    assert config.quantify.mode == "standard" and config.quantify.standard == "standard"
    assert config.integration.noise_region_ppm == ((8.0, 10.5),)
    assert config.folder == ROOT / "configs" / ".." / "demo_series" / "run_25c"


def test_defaults():
    config = run_config_from_dict(_raw())
    assert config.time.source == "header" and config.integration.baseline == "edges"
    assert config.quantify.mode == "standard" and config.quantify.standard == "S"
    assert config.signal("A").method == "integral" and config.signal("A").species == "A"


def _bad(raw, key):
    with pytest.raises(ConfigError) as info:
        run_config_from_dict(raw)
    assert info.value.key == key
    assert key in str(info.value)


def test_overlapping_windows_name_the_second_signal():
    raw = _raw()
    raw["signals"][1]["window_ppm"] = [1.3, 1.6]
    _bad(raw, "signals[1].window_ppm")


def test_overlap_allowed_inside_one_fit_group():
    raw = _raw()
    shape = {"multiplicity": "triplet", "j_hz": 7.0}
    raw["signals"][0].update(method="fit", group="g", lineshape=shape)
    raw["signals"][1].update(window_ppm=[1.1, 1.5], method="fit", group="g", lineshape=shape)
    run_config_from_dict(raw)


def test_zero_nuclei():
    raw = _raw()
    raw["signals"][2]["nuclei"] = 0
    _bad(raw, "signals[2].nuclei")


def test_standard_without_concentration():
    raw = _raw()
    del raw["signals"][2]["concentration_mol_per_l"]
    _bad(raw, "signals[2].concentration_mol_per_l")
    raw = _raw(quantify={"mode": "standard", "standard": "A"})
    _bad(raw, "signals[0].concentration_mol_per_l")


def test_window_outside_the_axis():
    config = run_config_from_dict(_raw())
    with pytest.raises(ConfigError) as info:
        validate_signals(config.signals, ppm_range=(12.0, 0.5))  # the standard at 0-0.2 ppm is off the axis
    assert info.value.key == "signals[2].window_ppm"


@pytest.mark.parametrize("section,key,value,named", [
    ("signals", None, None, "signals"),
    ("time", "source", "clock", "time.source"),
    ("time", "filename_pattern", "(?P<when>x)", "time.filename_pattern"),
    ("integration", "edge_fraction", 0.7, "integration.edge_fraction"),
    ("quantify", "mode", "absolute", "quantify.mode"),
    ("quantify", "t1_s", {"nope": 1.0}, "quantify.t1_s.nope"),
    ("quantify", "reactant", "Z", "quantify.reactant"),
])
def test_other_bad_values_name_their_key(section, key, value, named):
    raw = _raw()
    if key is None:
        raw[section] = []
    else:
        raw[section] = {key: value}
    _bad(raw, named)


def test_bad_signal_fields():
    raw = _raw()
    raw["signals"][0]["method"] = "fit"
    _bad(raw, "signals[0].lineshape")
    raw["signals"][0]["lineshape"] = {"multiplicity": "triplet"}
    _bad(raw, "signals[0].lineshape.j_hz")
    raw = _raw()
    raw["signals"][1]["window_ppm"] = [2.0]
    _bad(raw, "signals[1].window_ppm")


def test_toml_syntax_error_names_the_file(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text("[run\nfolder = 1\n")
    with pytest.raises(ConfigError) as info:
        load_run_config(path)
    assert str(path) in str(info.value)
