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


# ---------------------------------------------------------------- abused configs through the CLI
# A valid single-run config (TOML text); each case below changes one thing and `kinetics run`
# must answer exit 2 with one line naming the key (no traceback).  TOML reads `nan` and `inf`
# as floats (TOML 1.0 spec), so they reach the validator as numbers.
_BASE = """\
[run]
folder = "spectra"
{run}
[time]
source = "header"
{time}
[processing]
phase = "none"
{processing}
[[signals]]
name = {name_a}
species = {species_a}
window_ppm = [0.95, 1.5]
nuclei = 3
[[signals]]
name = "B_CH2"
species = "B"
window_ppm = [3.5, 3.8]
nuclei = 2
[[signals]]
name = "standard"
species = "S"
window_ppm = [3.1, 3.4]
nuclei = 9
standard = true
concentration_mol_per_l = 0.05
[quantify]
{quantify}
[live]
{live}
[fit]
{fit}
"""

_LONG = "A" * 201  # names are limited to 200 characters

_ABUSES = {
    # id: (changes to the base text, the key the one-line error must name)
    "live.quiet_period_s=nan": ({"live": "quiet_period_s = nan"}, "live.quiet_period_s"),
    "live.quiet_period_s=inf": ({"live": "quiet_period_s = inf"}, "live.quiet_period_s"),
    "live.refresh_s=nan": ({"live": "refresh_s = nan"}, "live.refresh_s"),
    "live.refresh_s=-inf": ({"live": "refresh_s = -inf"}, "live.refresh_s"),
    "live.idle_minutes=nan": ({"live": "idle_minutes = nan"}, "live.idle_minutes"),
    "live.idle_minutes=inf": ({"live": "idle_minutes = inf"}, "live.idle_minutes"),
    "live.max_duration_s=nan": ({"live": "max_duration_s = nan"}, "live.max_duration_s"),
    "live.max_duration_s=inf": ({"live": "max_duration_s = inf"}, "live.max_duration_s"),
    "live.poll_interval_s=nan": ({"live": "poll_interval_s = nan"}, "live.poll_interval_s"),
    "live.target_conversion=nan": ({"live": "target_conversion = nan"}, "live.target_conversion"),
    "time.first_spectrum_offset_s=inf": ({"time": "first_spectrum_offset_s = inf"},
                                         "time.first_spectrum_offset_s"),
    "time.duration_s=nan": ({"time": "duration_s = nan"}, "time.duration_s"),
    "fit.initial_mol_per_l=nan": ({"fit": 'mechanism = "A -> B"\ninitial_mol_per_l = {A = nan}'},
                                  "fit.initial_mol_per_l"),
    "fit.initial_mol_per_l=inf": ({"fit": 'mechanism = "A -> B"\ninitial_mol_per_l = {A = inf}'},
                                  "fit.initial_mol_per_l"),
    "quantify.mass_balance_sigmas=nan": ({"quantify": "mass_balance_sigmas = nan"},
                                         "quantify.mass_balance_sigmas"),
    "quantify.reactant=list": ({"quantify": 'reactant = ["A", "B"]'}, "quantify.reactant"),
    "quantify.product=table": ({"quantify": 'reactant = "A"\nproduct = {name = "B"}'}, "quantify.product"),
    "quantify.reactant==product": ({"quantify": 'reactant = "A"\nproduct = "A"'}, "quantify.product"),
    "quantify.standard=list": ({"quantify": 'standard = ["standard"]'}, "quantify.standard"),
    "quantify.initial_species=list": ({"quantify": 'mode = "initial"\ninitial_species = ["A"]\n'
                                                   "initial_concentration_mol_per_l = 0.1"},
                                      "quantify.initial_species"),
    "fit.species=list": ({"fit": 'species = ["A"]'}, "fit.species"),
    "processing.reference.ppm=500": ({"processing": "reference = {ppm = 500.0}"},
                                     "processing.reference.ppm"),
    "processing.reference.target_ppm=-900": ({"processing": "reference = {ppm = 0.0, target_ppm = -900.0}"},
                                             "processing.reference.target_ppm"),
    "processing.reference.ppm=nan": ({"processing": "reference = {ppm = nan}"},
                                     "processing.reference.ppm"),
    "signals.name too long": ({"name_a": f'"{_LONG}"'}, "signals[0].name"),
    "signals.species too long": ({"species_a": f'"{_LONG}"'}, "signals[0].species"),
    "time.reaction_start year 1": ({"time": "reaction_start = 0001-01-01T00:00:00+05:00"},
                                   "time.reaction_start"),
    "time.reaction_start year 1 text": ({"time": 'reaction_start = "0001-01-01T00:00:00Z"'},
                                        "time.reaction_start"),
    "time.reaction_start year 9999": ({"time": "reaction_start = 9999-12-31T23:59:59-05:00"},
                                      "time.reaction_start"),
    "run.pattern with ..": ({"run": 'pattern = "../*.jdx"'}, "run.pattern"),
    "run.pattern with .. inside": ({"run": 'pattern = "sub/../../*.jdx"'}, "run.pattern"),
    "run.pattern absolute": ({"run": 'pattern = "/etc/*"'}, "run.pattern"),
    "run.pattern backslash ..": ({"run": 'pattern = "..\\\\*.jdx"'}, "run.pattern"),
    "run.pattern matches nothing": ({"run": 'pattern = "*.nothing"'}, "run.pattern"),
    "run.pattern list": ({"run": 'pattern = ["*.jdx"]'}, "run.pattern"),
    "run.order list": ({"run": 'order = ["name"]'}, "run.order"),
    "live.exclude numbers": ({"live": "exclude = [1]"}, "live.exclude"),
    "quantify.stoichiometry=nan": ({"quantify": 'mode = "standard"\nreactant = "A"\nstoichiometry = {A = nan}'},
                                   "quantify.stoichiometry.A"),
    "quantify.t1_s=inf": ({"quantify": 'mode = "standard"\nreactant = "A"\nt1_s = {A_CH3 = inf}'},
                          "quantify.t1_s.A_CH3"),
    "fit.observed_species nested": ({"fit": 'mechanism = "A -> B"\nobserved_species = [["A"]]'},
                                    "fit.observed_species"),
    "fit.mechanism too long": ({"fit": f'mechanism = "{" + ".join(["A"] * 2000)} -> B"'}, "fit.mechanism"),
    "fit.model list": ({"fit": 'model = ["first"]'}, "fit.model"),
    "time.reaction_start number": ({"time": "reaction_start = 1e300"}, "time.reaction_start"),
}


def _abused_text(changes: dict) -> str:
    fields = {"run": "", "time": "", "processing": "", "quantify": 'mode = "standard"\nreactant = "A"', "live": "",
              "fit": "", "name_a": '"A_CH3"', "species_a": '"A"'}
    fields.update(changes)
    return _BASE.format(**fields)


def test_the_base_of_the_abused_configs_is_valid(tmp_path):
    path = tmp_path / "run.toml"
    path.write_text(_abused_text({}))
    config = load_run_config(path)  # the cases below fail by their one change only
    assert config.quantify.reactant == "A" and len(config.signals) == 3


@pytest.mark.parametrize("changes,key", list(_ABUSES.values()), ids=list(_ABUSES))
def test_abused_config_exits_2_naming_the_key(tmp_path, capsys, changes, key):
    from kinetics.cli import main

    (tmp_path / "spectra").mkdir()
    (tmp_path / "spectra" / "notes.txt").write_text("not a spectrum")
    (tmp_path / "outside.jdx").write_text("##TITLE= outside the run folder\n##END=\n")
    path = tmp_path / "run.toml"
    path.write_text(_abused_text(changes))
    code = main(["run", str(path), "--out", str(tmp_path / "out"), "--no-report"])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert key in lines[0]


@pytest.mark.parametrize("changes", [
    {"run": 'pattern = "sub/*.jdx"'},  # a sub-folder of the run folder stays inside it
    {"run": 'pattern = "**/*.jdx"'},
    {"run": 'pattern = "run_[0-9]*.dx"'},
    {"name_a": f'"{"A" * 200}"'},  # the limit itself is allowed
    {"processing": 'reference = "tms"'},
    {"processing": "reference = {ppm = 3.3, target_ppm = 3.35}"},
    {"time": "reaction_start = 2026-01-01T09:00:00+01:00"},
], ids=["subfolder", "recursive", "brackets", "200 chars", "tms", "reference table", "offset"])
def test_the_neighbours_of_the_abuses_are_accepted(tmp_path, changes):
    path = tmp_path / "run.toml"
    path.write_text(_abused_text(changes))
    load_run_config(path)


def test_a_19f_reference_beside_19f_windows_is_accepted():
    # 19F shifts on the CCl3F scale: PhCF3 near -63.7 ppm, C6F6 near -164.9 ppm (from memory)
    raw = _raw(processing={"reference": {"ppm": -63.72}})
    raw["signals"] = [
        {"name": "ArF", "window_ppm": [-110.0, -116.0], "nuclei": 1},
        {"name": "C6F6", "window_ppm": [-163.0, -167.0], "nuclei": 6, "standard": True,
         "concentration_mol_per_l": 0.01},
    ]
    assert run_config_from_dict(raw).pipeline.reference["ppm"] == -63.72
    raw["processing"] = {"reference": "tms"}  # TMS is the zero of 1H/13C, not of these windows
    _bad(raw, "processing.reference.ppm")
