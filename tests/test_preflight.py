"""Config values checked against the run's first spectrum (kinetics.run.preflight).

The folder is simulated (kinetics.simulate; the truth is set here): an invented ester (CH2
quartet at 4.12 ppm, CH3 triplet at 1.25 ppm, J = 7 Hz), an acid singlet at 2.05 ppm, a
TMS line at 0 ppm (the internal standard) and an undeclared solvent line at 7.26 ppm, on
a 60 MHz axis from -1 to 11 ppm (carrier 5 ppm, width 12 ppm).  A config that does not
fit that axis must end `kinetics run` and `kinetics watch` with exit 2 and one line naming
the key, before any file is taken (nothing quarantined), never a traceback.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from kinetics import simulate
from kinetics.cli import main
from kinetics.config import load_run_config
from kinetics.errors import ConfigError
from kinetics.run import preflight
from kinetics.series import process_record
from kinetics.spectra import read
from kinetics.store import Ledger

J_HZ = 7.0
ESTER = simulate.SpeciesSignals("ester", (simulate.Multiplet(4.12, 2, J_HZ, 4),
                                          simulate.Multiplet(1.25, 3, J_HZ, 3)))
ACID = simulate.SpeciesSignals("acid", (simulate.Multiplet(2.05, 3),))
TMS = simulate.SpeciesSignals("tms", (simulate.Multiplet(0.0, 12),))
SOLVENT = simulate.Multiplet(7.26, 1, width_hz=1.0)

BASE = """\
[run]
folder = "{folder}"
[time]
source = "header"
[processing]
phase = "none"
{processing}
[[signals]]
name = "ester_CH3"
species = "ester"
window_ppm = [1.05, 1.45]
nuclei = 3
[[signals]]
name = "acid_CH3"
species = "acid"
window_ppm = {acid_window}
nuclei = 3
[[signals]]
name = "tms"
species = "tms"
window_ppm = [-0.1, 0.1]
nuclei = 12
standard = true
concentration_mol_per_l = 0.01
[quantify]
mode = "standard"
reactant = "ester"
product = "acid"
{alignment}
[integration]
{integration}
"""


def _text(folder, **changes) -> str:
    fields = {"folder": str(folder), "processing": "", "acid_window": "[1.95, 2.15]", "alignment": "",
              "integration": "noise_region_ppm = [9.0, 10.5]"}
    fields.update(changes)
    return BASE.format(**fields)


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("preflight") / "spectra"
    times = np.arange(4) * 300.0
    conc = {"ester": 0.5 * np.exp(-1e-3 * times), "acid": 0.5 * (1 - np.exp(-1e-3 * times)),
            "tms": np.full(times.size, 0.01)}
    simulate.write_series(folder, times, conc, [ESTER, ACID, TMS], np.random.default_rng(3), snr=150.0,
                          solvent=SOLVENT, acquisition=simulate.Acquisition(observe_mhz=60.0, n_points=8192))
    return folder


def _first(folder, tmp_path, **changes):
    path = tmp_path / "run.toml"
    path.write_text(_text(folder, **changes))
    config = load_run_config(path)
    processed = process_record(read(sorted(folder.glob("*.jdx"))[0]), config)
    return config, processed


# variant -> (changes, key the one error line must name)
VARIANTS = {
    "signal window above the axis": ({"acid_window": "[11.5, 12.5]"}, "signals[1].window_ppm"),
    "signal window across the low end": ({"acid_window": "[-1.5, -0.5]"}, "signals[1].window_ppm"),
    "alignment window off the axis": ({"alignment": "[alignment]\nwindow_ppm = [12.0, 11.5]"},
                                      "alignment.window_ppm"),
    "noise region off the axis": ({"integration": "noise_region_ppm = [12.0, 14.0]"},
                                  "integration.noise_region_ppm"),
    "noise region overlaps a window": ({"integration": "noise_region_ppm = [1.3, 1.6]"},
                                       "integration.noise_region_ppm"),
    "noise region over the solvent line": ({"integration": "noise_region_ppm = [6.9, 7.6]"},
                                           "integration.noise_region_ppm"),
    "noise region over the quartet": ({"integration": "noise_region_ppm = [3.9, 4.4]"},
                                      "integration.noise_region_ppm"),
    "second noise range over a line": ({"integration": "noise_region_ppm = [[9.0, 10.5], [6.9, 7.6]]"},
                                       "integration.noise_region_ppm[1]"),
    "noise region of 5 points": ({"integration": "noise_region_ppm = [9.0, 9.006]"},
                                 "integration.noise_region_ppm"),
    "processing noise region over a window": ({"processing": "noise_region_ppm = [2.2, 1.9]"},
                                              "processing.noise_region_ppm"),
    "reference searched off the axis": ({"processing": "reference = {ppm = 10.9, window_ppm = 0.3}"},
                                        "processing.reference.ppm"),
    "reference target off the axis": ({"processing": "reference = {ppm = 0.0, target_ppm = 15.0}"},
                                      "processing.reference.target_ppm"),
    "reference at 500 ppm": ({"processing": "reference = {ppm = 500.0}"}, "processing.reference.ppm"),
}


def test_the_base_config_fits_the_first_spectrum(folder, tmp_path):
    config, processed = _first(folder, tmp_path)
    assert preflight.first_spectrum_problems(config, processed.spectrum, processed.reference_shift_ppm) == []


@pytest.mark.parametrize("changes,key", list(VARIANTS.values()), ids=list(VARIANTS))
def test_a_config_off_the_first_spectrum_exits_2_naming_the_key(folder, tmp_path, capsys, changes, key):
    path = tmp_path / "run.toml"
    path.write_text(_text(folder, **changes))
    code = main(["run", str(path), "--out", str(tmp_path / "out"), "--no-report"])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert f"'{key}'" in lines[0]
    ledger = tmp_path / "out" / "ledger.sqlite"
    if ledger.exists():  # the run stopped before taking any file: nothing quarantined
        with Ledger(ledger) as opened:
            assert sum(opened.counts().values()) == 0, opened.counts()


def test_the_line_found_is_the_solvent_line_the_simulation_put_there(folder, tmp_path):
    config, processed = _first(folder, tmp_path, integration="noise_region_ppm = [6.9, 7.6]")
    problems = preflight.first_spectrum_problems(config, processed.spectrum)
    assert [p.key for p in problems] == ["integration.noise_region_ppm"]
    assert "7.26" in problems[0].problem  # the simulated line's shift, set above
    assert "move the noise region" in problems[0].hint


@pytest.mark.parametrize("region", ["[9.0, 10.5]", "[5.0, 6.5]", "[-0.9, -0.3]", "[2.6, 3.6]"])
def test_signal_free_noise_regions_are_accepted(folder, tmp_path, region):
    # pure noise in each (no simulated line within 0.3 ppm): 10 sigma is never reached by noise
    config, processed = _first(folder, tmp_path, integration=f"noise_region_ppm = {region}")
    assert preflight.first_spectrum_problems(config, processed.spectrum) == []


def test_several_problems_are_named_in_one_message(folder, tmp_path):
    config, processed = _first(folder, tmp_path, acid_window="[11.5, 12.5]",
                               integration="noise_region_ppm = [1.3, 1.6]")
    with pytest.raises(ConfigError) as info:
        preflight.check_first_spectrum(config, processed.spectrum)
    assert info.value.key == "signals[1].window_ppm"
    assert "integration.noise_region_ppm" in str(info.value)


def test_live_run_exits_2_on_the_first_spectrum(folder, tmp_path, capsys):
    path = tmp_path / "watch.toml"
    path.write_text(_text(tmp_path / "incoming", integration="noise_region_ppm = [3.9, 4.4]"))
    code = main(["watch", str(path), "--replay", str(folder), "--interval", "0.01", "--quiet-period", "0.1",
                 "--poll", "--out", str(tmp_path / "live")])
    err = capsys.readouterr().err
    assert code == 2, err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "'integration.noise_region_ppm'" in lines[0], err
    with Ledger(tmp_path / "live" / "ledger.sqlite") as opened:
        assert opened.counts().get("quarantined", 0) == 0


@pytest.mark.parametrize("folder_text", ["y" * 10_000, "a/" + "b" * 300 + "/c"],
                         ids=["10,000 characters", "a 300-byte part"])
def test_a_run_folder_the_file_system_cannot_take_is_a_config_error(tmp_path, capsys, folder_text):
    # Linux file systems take at most 255 bytes per name and 4096 per path (NAME_MAX, PATH_MAX; from memory)
    path = tmp_path / "run.toml"
    path.write_text(_text(folder_text))
    code = main(["run", str(path), "--out", str(tmp_path / "out"), "--no-report"])
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err, err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "'run.folder'" in lines[0] and len(lines[0]) < 600, err


@pytest.mark.parametrize("region, line_ppm", [("[1.45, 1.75]", None), ("[-0.15, 0.15]", 0.0),
                                              ("[12.0, 14.0]", "clean"), ("[9.0, 11.0]", "clean")])
def test_real_600_mhz_spectrum_noise_regions(tmp_path, region, line_ppm):
    # A real spectrum, not made by the project's simulator: butyl acrylate at 600.13 MHz in
    # CDCl3 with TMS (tests/data/butyl-acrylate.1h.dx, assignments in tests/data/README.md:
    # O-CH2-CH2 multiplet 1.52-1.66 ppm, TMS at 0 ppm; no line above 9 ppm).  Only the
    # O-CH2 and CH3 signals are declared, so a noise region over the undeclared CH2
    # multiplet or the TMS line must be refused, and the empty regions accepted.
    import shutil

    from kinetics.spectra import read

    (tmp_path / "run").mkdir()
    shutil.copy(Path(__file__).parent / "data" / "butyl-acrylate.1h.dx", tmp_path / "run" / "s.dx")
    (tmp_path / "run.toml").write_text(f"""[run]
folder = "run"
pattern = "*.dx"
[integration]
noise_region_ppm = {region}
[quantify]
mode = "relative"
reactant = "ester"
[[signals]]
name = "och2"
species = "ester"
window_ppm = [4.02, 4.16]
nuclei = 2
[[signals]]
name = "ch3"
species = "ester"
window_ppm = [0.82, 0.94]
nuclei = 3
""")
    problems = preflight.first_spectrum_problems(load_run_config(tmp_path / "run.toml"),
                                                 read(tmp_path / "run" / "s.dx"))
    if line_ppm == "clean":
        assert problems == []
    else:
        assert [p.key for p in problems] == ["integration.noise_region_ppm"], problems
        assert "line" in problems[0].problem
        if line_ppm is not None:
            assert f"{line_ppm:.2f}" in problems[0].problem or f"{line_ppm:.3f}" in problems[0].problem
