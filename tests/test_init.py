"""``kinetics init``: a starter config drafted from the first spectrum of a folder.

Folders are simulated (kinetics.simulate, truth set here): an invented ester with a CH2
quartet (4.12 ppm) and a CH3 triplet (1.25 ppm), J = 7 Hz, a TMS line at 0 ppm and a big
water-like solvent line at 4.79 ppm, on a 60 MHz axis.  The line positions follow from the
first-order rule (n + 1 lines J apart, binomial intensities); the checks are that every
true line of a multiplet falls in one proposed window, that no window holds two
multiplets, that the reference and solvent lines are recognised, and that the written
config loads with the project's config loader.
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from datetime import datetime, timezone

import numpy as np
import pytest

from kinetics import simulate
from kinetics.cli import main
from kinetics.config import load_run_config
from kinetics.errors import InputFileError
from kinetics.init import draft_config, first_spectrum
from kinetics.spectra.spectrum import Spectrum

MHZ = 60.0
J_HZ = 7.0
ESTER = simulate.SpeciesSignals("ester", (simulate.Multiplet(4.12, 2, J_HZ, 4),
                                          simulate.Multiplet(1.25, 3, J_HZ, 3)))
ACID = simulate.SpeciesSignals("acid", (simulate.Multiplet(2.05, 3),))
TMS = simulate.SpeciesSignals("tms", (simulate.Multiplet(0.0, 12),))
SOLVENT = simulate.Multiplet(4.79, 40, width_hz=2.0)


def _true_lines(centre_ppm: float, n_lines: int) -> np.ndarray:
    # First-order multiplet: n lines spaced J apart about the centre (textbook rule).
    return centre_ppm + (np.arange(n_lines) - (n_lines - 1) / 2) * J_HZ / MHZ


def _write(folder, kind="spectrum", n=3, seed=11, acid_start=0.5):
    times = np.arange(n) * 300.0
    conc = {"ester": 0.5 * np.exp(-1e-3 * times), "acid": acid_start + 0.5 * (1 - np.exp(-1e-3 * times)),
            "tms": np.full(n, 0.01)}
    simulate.write_series(folder, times, conc, [ESTER, ACID, TMS], np.random.default_rng(seed), kind=kind,
                          snr=150.0, solvent=SOLVENT, phase0_deg=25.0 if kind == "fid" else 0.0,
                          acquisition=simulate.Acquisition(observe_mhz=MHZ, n_points=8192))
    return folder


@pytest.fixture(scope="module")
def spectra_folder(tmp_path_factory):
    return _write(tmp_path_factory.mktemp("series") / "run_25c")


def _check_windows(draft):
    signals = draft.signals
    multiplets = {"quartet": _true_lines(4.12, 4), "triplet": _true_lines(1.25, 3), "singlet": _true_lines(2.05, 1)}
    holders = {}
    for name, lines in multiplets.items():
        inside = [w for w in signals if all(w.window_ppm[0] < x < w.window_ppm[1] for x in lines)]
        assert len(inside) == 1, f"{name}: windows {[w.window_ppm for w in signals]}"
        holders[name] = inside[0]
    assert len({id(w) for w in holders.values()}) == 3  # one multiplet per window
    assert len(signals) == 3
    assert holders["quartet"].multiplicity == "quartet" and holders["triplet"].multiplicity == "triplet"
    assert holders["quartet"].coupling_hz == pytest.approx(J_HZ, abs=0.3)
    ordered = sorted(w.window_ppm for w in draft.windows)
    assert all(a[1] <= b[0] for a, b in zip(ordered, ordered[1:]))  # no overlaps
    assert draft.reference is not None and abs(draft.reference.peaks[0].shift_ppm) < 0.02
    assert draft.solvent is not None and abs(draft.solvent.peaks[0].shift_ppm - 4.79) < 0.02
    return holders


def test_spectra_folder_gives_true_windows_and_loadable_config(spectra_folder, tmp_path):
    out = tmp_path / "configs" / "run.toml"
    draft = draft_config(spectra_folder, out)
    holders = _check_windows(draft)
    # Nuclei from integral ratios, CH2 : CH3 : CH3 = 2 : 3 : 3 scaled by concentration
    # (ester and acid both 0.5 mol/L in the first spectrum), i.e. 2 : 3 : 3.
    assert [holders[k].nuclei_guess for k in ("quartet", "triplet", "singlet")] == [2, 3, 3]
    config = load_run_config(out)
    assert config.folder.resolve() == spectra_folder.resolve()
    assert config.pattern == "*.jdx" and config.order == "time" and config.time.source == "header"
    assert [s.window_ppm for s in config.signals] == [tuple(round(v, 3) for v in w.window_ppm) for w in draft.signals]
    assert config.processing["reference"] == {"ppm": 0.0, "window_ppm": 0.3}
    text = out.read_text()
    assert re.search(r"# Solvent line, left out of the signals .*(water|HDO)", text)
    assert re.search(r"# s \(singlet\), lines at 4\.79\d ppm", text)
    (high, low), = config.sections["processing"]["phase_exclude_ppm"]  # the solvent, out of phasing
    assert low < 4.79 < high
    (noise_low, noise_high), = config.integration.noise_region_ppm  # the noise clear of its tail
    assert noise_low > high or noise_high < low


def test_fid_folder_is_transformed_first(tmp_path):
    folder = _write(tmp_path / "fids", kind="fid", n=2)
    draft = draft_config(folder, tmp_path / "fid.toml")
    _check_windows(draft)
    assert draft.source.name == "fid_0001.jdx"
    assert load_run_config(tmp_path / "fid.toml").processing["phase"] == "auto"


def test_first_in_acquisition_order_not_name_order(tmp_path):
    folder = _write(tmp_path / "renamed", n=3)
    # Rename so name order runs backwards in time: c.jdx holds the first acquisition.
    for old, new in (("spectrum_0001.jdx", "c.jdx"), ("spectrum_0002.jdx", "b.jdx"), ("spectrum_0003.jdx", "a.jdx")):
        (folder / old).rename(folder / new)
    spectrum, files, skipped, from_fid = first_spectrum(folder)
    assert [p.name for p in files] == ["a.jdx", "b.jdx", "c.jdx"]  # truth.csv is not a spectrum
    assert spectrum.source_path.endswith("c.jdx") and not from_fid and skipped == []
    assert spectrum.acquired_utc < datetime(2026, 1, 1, 9, 0, 0, tzinfo=timezone.utc)


def test_never_overwrites_without_force(spectra_folder, tmp_path):
    out = tmp_path / "mine.toml"
    out.write_text("# my edited config\n")
    with pytest.raises(InputFileError, match="--force"):
        draft_config(spectra_folder, out)
    assert out.read_text() == "# my edited config\n"
    assert main(["init", str(spectra_folder), "--out", str(out)]) == 2
    assert out.read_text() == "# my edited config\n"
    assert main(["init", str(spectra_folder), "--out", str(out), "--force"]) == 0
    assert "[[signals]]" in out.read_text()


def test_cli_default_output_beside_folder(spectra_folder, capsys):
    target = spectra_folder.parent / f"{spectra_folder.name}.toml"
    target.unlink(missing_ok=True)
    assert main(["init", str(spectra_folder)]) == 0
    printed = capsys.readouterr().out
    assert str(target) in printed and "quartet" in printed
    assert target.is_file() and not (spectra_folder / f"{spectra_folder.name}.toml").exists()
    load_run_config(target)


def test_empty_folder_and_unreadable_first_file(tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    (empty / "notes.md").write_text("not a spectrum\n")
    with pytest.raises(InputFileError, match="no spectrum files"):
        draft_config(empty)
    broken = tmp_path / "broken"
    broken.mkdir()
    (broken / "0001.jdx").write_text("##TITLE= cut short\n##JCAMP-DX= 5.01\n##XYDATA=(X++(Y..Y))\n1 2 3\n")
    with pytest.raises(InputFileError, match="0001.jdx"):
        draft_config(broken)
    assert not (tmp_path / "broken.toml").exists()
    assert main(["init", str(tmp_path / "missing")]) == 2


def test_later_unreadable_file_is_skipped_and_noted(spectra_folder, tmp_path):
    import shutil

    folder = tmp_path / "mixed"
    shutil.copytree(spectra_folder, folder)
    (folder / "spectrum_0099.jdx").write_text("garbage\n")
    draft = draft_config(folder, tmp_path / "mixed.toml")
    assert len(draft.skipped) == 1 and "spectrum_0099.jdx" in draft.skipped[0]
    assert "skipped unreadable file" in draft.text
    load_run_config(tmp_path / "mixed.toml")


@pytest.mark.parametrize("name, groups, coupling_hz", [
    # Windows and proton counts from tests/data/README.md (open dataset nmr-dataset1,
    # proton counts from the structures).  The trans-alkene doublets of doublets (J ~ 16-17
    # Hz, common practice) must come out whole with the default settings (mirror-halves
    # rule), and also with a coupling_hz large enough to join them directly.
    ("butyl-acrylate.1h.dx", [(6.25, 6.40, 1), (5.95, 6.12, 1), (5.68, 5.80, 1), (4.02, 4.16, 2),
                              (1.52, 1.66, 2), (1.26, 1.42, 2), (0.82, 0.94, 3)], None),
    ("ethyl-crotonate.1h.fid.dx", [(6.80, 7.02, 1), (5.66, 5.86, 1), (4.00, 4.20, 2), (1.74, 1.86, 3),
                                   (1.13, 1.27, 3)], None),
    ("ethyl-crotonate.1h.dx", [(6.80, 7.02, 1), (5.66, 5.86, 1), (4.00, 4.20, 2), (1.74, 1.86, 3),
                               (1.13, 1.27, 3)], None),
    ("butyl-acrylate.1h.dx", [(6.25, 6.40, 1), (5.95, 6.12, 1), (5.68, 5.80, 1), (4.02, 4.16, 2),
                              (1.52, 1.66, 2), (1.26, 1.42, 2), (0.82, 0.94, 3)], 18.0),
])
def test_real_spectra_groups_and_proton_counts(tmp_path, name, groups, coupling_hz):
    import shutil
    from pathlib import Path

    folder = tmp_path / "real"
    folder.mkdir()
    shutil.copy(Path(__file__).parent / "data" / name, folder / name)
    options = {} if coupling_hz is None else {"coupling_hz": coupling_hz}
    draft = draft_config(folder, tmp_path / "real.toml", **options)
    for low, high, protons in groups:
        holders = [w for w in draft.signals if any(low <= p.shift_ppm <= high for p in w.peaks)]
        assert len(holders) == 1, (low, high, [w.window_ppm for w in holders])  # not split
        assert all(low <= p.shift_ppm <= high for p in holders[0].peaks)  # not merged
        assert holders[0].nuclei_guess == protons, (low, high)
    listed = [w for w in draft.signals if any(lo <= w.centre_ppm <= hi for lo, hi, _ in groups)]
    others = [w for w in draft.signals if w not in listed]
    assert all(w.minor for w in others)  # solvent residue / impurity lines are flagged as minor
    if name.startswith("butyl"):
        assert draft.reference is not None and abs(draft.reference.peaks[0].shift_ppm) < 0.01  # TMS
    load_run_config(tmp_path / "real.toml")


def test_trans_alkene_dd_needs_the_large_coupling():
    # The control for the test above: with couplings limited to the 12.8 Hz of an
    # unexplained cluster (large_coupling_hz None), the =CH2 trans dd of butyl acrylate
    # (6.25-6.40 ppm, tests/data/README.md; J ~ 17 Hz, 1.5 Hz measured from this file's
    # line positions: 3805.6, 3804.1, 3788.2, 3786.7 Hz) cannot be one multiplet; with
    # 18 Hz it is one dd with both couplings.
    from pathlib import Path

    from kinetics.init import propose_windows
    from kinetics.spectra import read

    spectrum = read(Path(__file__).parent / "data" / "butyl-acrylate.1h.dx")
    for large_coupling_hz in (None, 18.0):
        *_, windows = propose_windows(spectrum, large_coupling_hz=large_coupling_hz)
        holders = [w for w in windows if any(6.25 <= p.shift_ppm <= 6.40 for p in w.peaks)]
        if large_coupling_hz is None:
            assert len(holders) > 1, [w.window_ppm for w in holders]
        else:
            assert len(holders) == 1 and holders[0].pattern.code == "dd"
            assert holders[0].pattern.j_hz[0] == pytest.approx(17.4, abs=0.5)
            assert holders[0].pattern.j_hz[1] == pytest.approx(1.5, abs=0.5)


def _dq_lines(centre_ppm: float, j_large_hz: float, j_small_hz: float) -> np.ndarray:
    # First-order doublet of quartets (textbook rule): two quartets j_large apart, each of
    # four lines j_small apart, all about the centre.
    quartet = (np.arange(4) - 1.5) * j_small_hz
    hz = np.concatenate([quartet + j_large_hz / 2, quartet - j_large_hz / 2])
    return centre_ppm + hz / MHZ


def test_simulated_60_mhz_alkene_doublets_of_quartets_and_close_singlets():
    # Invented 60 MHz spectrum (truth set here): a crotyl-like alkene with dq at 6.95 ppm
    # (J 15.5, 6.9 Hz) and 5.84 ppm (J 15.5, 1.7 Hz), and two singlets of two species only
    # 15 Hz apart (3.30 and 3.05 ppm, similar heights).  Each dq must be one window holding
    # all eight of its lines; the two singlets must stay two windows (never read as a
    # doublet).
    from kinetics.init import propose_windows

    alkene = simulate.SpeciesSignals("alkene", (simulate.Multiplet(6.95, 1, (15.5, 6.9), (2, 4)),
                                                simulate.Multiplet(5.84, 1, (15.5, 1.7), (2, 4)),
                                                simulate.Multiplet(1.88, 3, (6.9, 1.7), (2, 2))))
    singlets = (simulate.SpeciesSignals("a", (simulate.Multiplet(3.30, 3),)),
                simulate.SpeciesSignals("b", (simulate.Multiplet(3.05, 3),)))
    spectrum = simulate.simulate_spectrum([alkene, *singlets], {"alkene": 1.0, "a": 1.0, "b": 0.9},
                                          np.random.default_rng(3),
                                          simulate.Acquisition(observe_mhz=MHZ, n_points=16384), snr=300.0)
    *_, windows = propose_windows(spectrum)
    for lines in (_dq_lines(6.95, 15.5, 6.9), _dq_lines(5.84, 15.5, 1.7)):
        inside = [w for w in windows if all(w.window_ppm[0] < x < w.window_ppm[1] for x in lines)]
        touching = [w for w in windows if any(w.window_ppm[0] < x < w.window_ppm[1] for x in lines)]
        assert len(inside) == 1 and touching == inside, [w.window_ppm for w in touching]
    for shift in (3.30, 3.05):
        holders = [w for w in windows if w.window_ppm[0] < shift < w.window_ppm[1]]
        assert len(holders) == 1 and len(holders[0].peaks) == 1, [w.window_ppm for w in holders]


def test_csv_folder_pattern_leaves_out_the_unreadable_table(tmp_path):
    # The simulator writes truth.csv beside spectrum_000N.csv; init notes it as unreadable
    # and drafts a glob that matches the spectra only.
    folder = tmp_path / "csv_run"
    simulate.write_series(folder, np.arange(2) * 300.0, {"ester": np.ones(2), "acid": np.ones(2), "tms": np.ones(2)},
                          [ESTER, ACID, TMS], np.random.default_rng(2), format="csv", snr=150.0,
                          acquisition=simulate.Acquisition(observe_mhz=MHZ, n_points=4096))
    draft = draft_config(folder, tmp_path / "csv.toml")
    assert len(draft.skipped) == 1 and "truth.csv" in draft.skipped[0]
    config = load_run_config(tmp_path / "csv.toml")
    assert config.pattern == "spectrum_*.csv"
    assert sorted(p.name for p in folder.glob(config.pattern)) == ["spectrum_0001.csv", "spectrum_0002.csv"]


def test_mis_phased_benchtop_spectra_are_rephased_before_peak_picking(tmp_path):
    # the demo's invented 60 MHz spectra carry phase errors of tens of degrees and a water
    # line whose dispersive tail hides the O-CH2 triplet at 4.05 ppm unless re-phased
    import shutil

    from kinetics import demo
    from kinetics.config import load_run_config
    from kinetics.init import draft_config

    source = Path(__file__).resolve().parent.parent / "demo_series" / demo.demo_runs()[0].folder
    folder = tmp_path / "run"
    folder.mkdir()
    for name in ("spectrum_0001.jdx", "spectrum_0002.jdx"):
        shutil.copy(source / name, folder / name)
    draft = draft_config(folder)
    assert 'phase = "auto"' in draft.text and "phase_exclude_ppm" in draft.text
    signal_windows = [w.window_ppm for w in draft.windows if w.role == "signal"]
    assert any(lo < 4.05 < hi for lo, hi in signal_windows)  # the ester's O-CH2 triplet
    assert any(lo < 6.20 < hi for lo, hi in signal_windows)  # the standard
    assert any(w.role == "solvent" and w.window_ppm[0] < 4.75 < w.window_ppm[1] for w in draft.windows)
    load_run_config(draft.config_path)  # the draft loads as written


# ---------------------------------------------------------------- multiplet names, solvent, reference, edits
def _edit(text: str, standard_mol_per_l: float, reactant: str, product: str) -> tuple[str, int]:
    """The chemist's edits to a draft: the standard's concentration, reactant and product.
    Returns the edited text and the number of lines changed."""
    edited = text.replace("# concentration_mol_per_l = 0.05   # EDIT",
                          f"concentration_mol_per_l = {standard_mol_per_l}   # EDIT", 1)
    edited = re.sub(r"^# reactant = \"[^\"]*\"", f'reactant = "{reactant}"', edited, count=1, flags=re.M)
    edited = re.sub(r"^# product = \"[^\"]*\"", f'product = "{product}"', edited, count=1, flags=re.M)
    changed = sum(a != b for a, b in zip(text.splitlines(), edited.splitlines()))
    return edited, changed


def test_demo_draft_names_solvent_reference_multiplets_and_runs_after_three_edits(tmp_path, capsys):
    # The demo scenario (demo_series/README.md, kinetics/demo.py): water at 4.75 ppm in an
    # undeuterated solvent, the standard's 6-proton singlet at 6.20 ppm (0.0500 mol/L), the
    # ester's O-CH2 triplet (4.05, J 6.8 Hz) and acetyl singlet (2.04), the alcohol's
    # HO-CH2 triplet (3.58, J 6.6 Hz), the acid's acetyl singlet (2.09, 3 Hz from the
    # ester's), the two CH3 triplets overlapping at 0.9 ppm; generator k(25 C) 1.5e-4 1/s.
    from kinetics import demo

    folder = Path(__file__).resolve().parent.parent / "demo_series" / demo.demo_runs()[0].folder
    out = tmp_path / "demo.toml"
    draft = draft_config(folder, out)
    assert draft.last_source is not None and draft.last_source.name == "spectrum_0036.jdx"
    (water,) = draft.solvents
    assert abs(water.peaks[0].shift_ppm - 4.75) < 0.03 and "water" in water.label
    reference = draft.reference
    assert reference.reference_candidate and abs(reference.peaks[0].shift_ppm - 6.20) < 0.02
    assert reference.pattern.code == "s" and 0.8 < reference.change < 1.25

    def holder(shift):
        (found,) = [w for w in draft.windows if any(abs(p.shift_ppm - shift) < 0.015 for p in w.peaks)]
        return found

    for shift, j_hz in ((4.05, 6.8), (3.58, 6.6)):
        triplet = holder(shift)
        assert triplet.pattern.code == "t" and triplet.pattern.j_hz[0] == pytest.approx(j_hz, abs=0.3)
    ester_acetyl, acid_acetyl = holder(2.04), holder(2.09)
    assert ester_acetyl is not acid_acetyl  # 3 Hz apart: two singlets, never one doublet
    assert [len(w.peaks) for w in (ester_acetyl, acid_acetyl)] == [1, 1]
    assert ester_acetyl.change < 0.3 and acid_acetyl.change == float("inf")
    assert ester_acetyl.fit_group and ester_acetyl.fit_group == acid_acetyl.fit_group
    assert holder(0.93).mixed  # two species' triplets overlap: left out of the draft
    assert holder(4.05).species == ester_acetyl.species  # both fall alike: one placeholder species
    config = load_run_config(out)
    assert config.quantify.reactant is None and config.quantify.standard is None  # nothing guessed
    assert not any(s.is_standard for s in config.signals)
    edited, edits = _edit(draft.text, 0.05, ester_acetyl.species, holder(3.58).species)
    assert edits == 3  # enough for k (first order: the standard's nuclei and the mass balance do not enter)
    # two more for right concentrations and a clean mass balance: the standard's 6 protons
    # (no spectrum can tell them) and the acid counted once with the alcohol
    assert reference.nuclei_guess != 6
    lines = edited.splitlines()
    standard_line = next(n for n, line in enumerate(lines) if line.startswith("concentration_mol_per_l = 0.05"))
    nuclei_line = max(n for n in range(standard_line) if lines[n].startswith("nuclei = "))
    lines[nuclei_line] = "nuclei = 6"
    stoichiometry = next(n for n, line in enumerate(lines) if line.startswith("# stoichiometry = {"))
    lines[stoichiometry] = lines[stoichiometry][2:]
    assert sum(a != b for a, b in zip(draft.text.splitlines(), lines)) == 5
    (tmp_path / "edited.toml").write_text("\n".join(lines) + "\n")
    import json

    import pandas as pd

    capsys.readouterr()
    assert main(["run", str(tmp_path / "edited.toml"), "--out", str(tmp_path / "out"), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    k = summary["runs"][0]["k_per_s"]["value"]
    assert k == pytest.approx(demo.K_REF_PER_S, rel=0.015)  # the generator's k at 25 C
    first = pd.read_csv(tmp_path / "out" / "series.csv").iloc[0]
    # the demo's first spectrum is 60 s after mixing (demo_series/README.md); the draft keeps t = 0 there
    truth = demo.ESTER_INITIAL_MOL_PER_L * math.exp(-demo.K_REF_PER_S * (first["time_s"] + 60.0))
    assert first[f"{ester_acetyl.species}_concentration"] == pytest.approx(truth, rel=0.03)


@pytest.mark.parametrize("name, expected", [
    # Structures (tests/data/README.md): ethyl (E)-but-2-enoate CH3-CH=CH-CO-O-CH2-CH3,
    # 500 MHz in CDCl3.  First-order names from the structure: O-CH2 a quartet and the
    # ethyl CH3 a triplet (3J ~ 7 Hz); the crotonate CH3 a doublet of doublets (3J to the
    # CH= ~ 7 Hz, 4J to =CH-CO ~ 1.7 Hz); both alkene protons doublets of quartets (trans
    # 3J ~ 15.5 Hz; coupling ranges common practice, from memory).  Windows as in README.
    ("ethyl-crotonate.1h.dx", [(4.00, 4.20, "q", (7.0,), 2), (1.13, 1.27, "t", (7.0,), 3),
                               (1.74, 1.86, "dd", (6.9, 1.7), 3), (6.80, 7.02, "dq", (15.5, 6.9), 1),
                               (5.66, 5.86, "dq", (15.5, 1.7), 1)]),
    # butyl prop-2-enoate CH2=CH-CO-O-CH2-CH2-CH2-CH3, 600 MHz in CDCl3 with TMS: the three
    # vinyl protons are each a dd (trans ~17, cis ~10, geminal ~1.5 Hz), O-CH2 and CH3
    # triplets.
    ("butyl-acrylate.1h.dx", [(6.25, 6.40, "dd", (17.4, 1.5), 1), (5.95, 6.12, "dd", (17.4, 10.4), 1),
                              (5.68, 5.80, "dd", (10.4, 1.5), 1), (4.02, 4.16, "t", (6.7,), 2),
                              (0.82, 0.94, "t", (7.4,), 3)]),
])
def test_real_spectra_multiplet_names_solvent_and_reference(tmp_path, name, expected):
    import shutil

    folder = tmp_path / "real"
    folder.mkdir()
    shutil.copy(Path(__file__).parent / "data" / name, folder / name)
    draft = draft_config(folder, tmp_path / "real.toml")
    for low, high, code, j_hz, protons in expected:
        (window,) = [w for w in draft.signals if low <= w.line_centre_ppm <= high]
        assert window.pattern.code == code, (low, high, window.pattern)
        # J within 0.5 Hz (1.5 lines of digitisation on these files' 0.29-0.38 Hz points)
        assert window.pattern.j_hz == pytest.approx(j_hz, abs=0.5), (low, high, window.pattern)
        assert window.nuclei_guess == protons
    # the CHCl3 residual (7.26 ppm in CDCl3, from memory; the file names its solvent) is a solvent line
    (chcl3,) = draft.solvents
    assert "CDCl3" in chcl3.label and abs(chcl3.peaks[0].shift_ppm - 7.26) < 0.08
    config = load_run_config(tmp_path / "real.toml")
    assert all(not (lo < 7.22 < hi) for lo, hi in (s.window_ppm for s in config.signals))
    if name.startswith("butyl"):
        assert draft.reference.role == "reference" and abs(draft.reference.peaks[0].shift_ppm) < 0.01  # TMS
        assert config.processing["reference"]["ppm"] == 0.0
    else:  # no TMS: the residual CHCl3 singlet is proposed (commented) as the reference
        assert "reference" not in config.processing
        assert re.search(r"^# reference = \{ ppm = 7\.2\d\d, .*target_ppm = 7\.26 \}", draft.text, re.M)


# ---------------------------------------------------------------- an invented 60 MHz stress series
def _stress_spectrum(reactant_mol_per_l: float, product_mol_per_l: float, rng, minutes: float,
                     mhz: float = 60.0, phase_deg: float = 0.0, drift_ppm: float = 0.0) -> Spectrum:
    """This test's own generator (not kinetics.simulate): Lorentzian lines on a 60 MHz
    axis, first-order multiplets built here, Gaussian noise.

    Reactant: ethyl group (O-CH2 quartet 4.10 ppm, CH3 triplet 1.25 ppm, J 7.1 Hz), acetyl
    singlet 2.10 ppm and a vinyl dd at 6.90 ppm (J 15.6, 6.9 Hz); product: acetyl singlet
    1.98 ppm (0.12 ppm from the reactant's) and a CH2 triplet at 3.60 ppm (J 6.5 Hz);
    standard: 6-proton singlet at 6.20 ppm, 0.05 mol/L; water at 4.80 ppm, 45 times the
    quartet's tallest line.  A zero-order phase error mixes in the dispersion
    (absorption A / (1 + u^2), dispersion A u / (1 + u^2)); a drift moves every line."""
    width_hz = 1.0
    ppm = np.linspace(11.0, -1.0, 8192)
    real = np.zeros_like(ppm)
    imag = np.zeros_like(ppm)

    def multiplet(centre_ppm, nuclei, couplings):
        # first-order rule: each coupling (J, n partners) splits every line into n + 1 binomial lines
        lines = [(0.0, float(nuclei))]
        for j_hz, partners in couplings:
            weights = [math.comb(partners, m) / 2 ** partners for m in range(partners + 1)]
            lines = [(x + (m - partners / 2) * j_hz, a * w) for x, a in lines for m, w in enumerate(weights)]
        for offset_hz, area in lines:
            hw = 0.5 * width_hz / mhz
            u = (ppm - centre_ppm - drift_ppm - offset_hz / mhz) / hw
            real[:] += area / (math.pi * hw) / (1 + u ** 2) / 1000
            imag[:] += area / (math.pi * hw) * u / (1 + u ** 2) / 1000

    multiplet(4.10, 2 * reactant_mol_per_l, [(7.1, 3)])
    multiplet(1.25, 3 * reactant_mol_per_l, [(7.1, 2)])
    multiplet(2.10, 3 * reactant_mol_per_l, [])
    multiplet(6.90, 1 * reactant_mol_per_l, [(15.6, 1), (6.9, 1)])
    multiplet(1.98, 3 * product_mol_per_l, [])
    multiplet(3.60, 2 * product_mol_per_l, [(6.5, 2)])
    multiplet(6.20, 6 * 0.05, [])
    quartet_top = 2 * 0.45 * 3 / 8 / (math.pi * 0.5 * width_hz / mhz) / 1000
    multiplet(4.80, 45 * quartet_top * math.pi * 0.5 * width_hz / mhz * 1000, [])
    rotated = (real + 1j * imag) * np.exp(1j * math.radians(phase_deg))
    noise = rng.normal(0.0, 2e-3 * quartet_top, (2, ppm.size))
    start = datetime(2026, 3, 1, 9, 0, 0, tzinfo=timezone.utc)
    from datetime import timedelta

    return Spectrum(ppm=ppm, real=rotated.real + noise[0], imag=rotated.imag + noise[1], observe_mhz=mhz,
                    acquired_utc=start + timedelta(minutes=minutes), duration_s=16.0)


def quartet_nuclei(draft):
    (quartet,) = [w for w in draft.windows if w.pattern.code == "q"]
    return quartet.nuclei_guess


@pytest.mark.parametrize("mhz", [60.0, 40.0])
def test_stress_series_water_close_singlets_and_dd(tmp_path, capsys, mhz):
    # 12 spectra over 33 min, random zero-order phase errors (+-30 deg) and a 0.01 ppm drift
    import json

    from kinetics.spectra.jcampdx import write_spectrum

    rng = np.random.default_rng(45)
    folder = tmp_path / "stress_40C"
    folder.mkdir()
    k_per_min = 0.08  # the truth set here: reactant 0.45 exp(-k t), product 0.01 + what reacted
    for number, minutes in enumerate(np.arange(12) * 3.0, start=1):
        reactant = 0.45 * math.exp(-k_per_min * minutes)
        write_spectrum(folder / f"spectrum_{number:04d}.jdx",
                       _stress_spectrum(reactant, 0.01 + 0.45 - reactant, rng, minutes, mhz=mhz,
                                        phase_deg=rng.uniform(-30.0, 30.0), drift_ppm=0.01 * minutes / 33.0))
    out = tmp_path / "stress.toml"
    draft = draft_config(folder, out)
    (water,) = draft.solvents
    assert abs(water.peaks[0].shift_ppm - 4.80) < 0.02 and re.search("water|HDO", water.label)
    assert all(not (w.window_ppm[0] < 4.80 < w.window_ppm[1]) for w in draft.signals)  # not a signal

    def holder(shift):
        (found,) = [w for w in draft.windows if abs(w.line_centre_ppm - shift) < 0.02]
        return found

    reactant_s, product_s = holder(2.10), holder(1.98)  # 45:1 at the start, 7.2 Hz apart
    assert reactant_s is not product_s and [w.pattern.code for w in (reactant_s, product_s)] == ["s", "s"]
    assert [reactant_s.nuclei_guess, product_s.nuclei_guess, quartet_nuclei(draft)] == [3, 3, 2]
    dd = holder(6.90)
    assert dd.pattern.code == "dd" and dd.pattern.j_hz == pytest.approx((15.6, 6.9), abs=0.5)
    quartet = holder(4.10)
    assert quartet.pattern.code == "q" and quartet.pattern.j_hz[0] == pytest.approx(7.1, abs=0.5)
    assert holder(1.25).pattern.code == "t" and holder(3.60).pattern.code == "t"
    assert draft.reference.reference_candidate and abs(draft.reference.peaks[0].shift_ppm - 6.20) < 0.01
    config = load_run_config(out)
    (high, low), = config.sections["processing"]["phase_exclude_ppm"]
    assert low < 4.80 < high
    edited, edits = _edit(draft.text, 0.05, quartet.species, product_s.species)
    assert edits <= 5
    (tmp_path / "edited.toml").write_text(edited)
    edited_config = load_run_config(tmp_path / "edited.toml")
    assert edited_config.quantify.mode == "standard" and edited_config.quantify.reactant == quartet.species
    assert 'phase = "auto"' in draft.text  # the phase errors were seen
    if mhz == 60.0:
        capsys.readouterr()
        assert main(["run", str(tmp_path / "edited.toml"), "--out", str(tmp_path / "out"), "--json"]) == 0
        k = json.loads(capsys.readouterr().out)["runs"][0]["k_per_s"]["value"]
        assert k == pytest.approx(k_per_min / 60.0, rel=0.02)


def test_file_names_cannot_inject_keys(tmp_path):
    # issue 14 item 5: a file name with a newline must not add TOML keys to the draft
    import shutil

    source = _write(tmp_path / "plain", n=2)
    folder = tmp_path / 'odd"dir\nmode = 1'
    folder.mkdir()
    for number, path in enumerate(sorted(source.glob("*.jdx"))):
        shutil.copy(path, folder / f'x{number}\n[quantify]\nmode = "none"\n.jdx')
    out = tmp_path / "odd.toml"
    draft_config(folder, out)
    config = load_run_config(out)
    assert config.folder.resolve() == folder.resolve()
    assert config.quantify.mode == "relative"  # the loader's default, not the injected "none"
    assert all(not line.startswith("mode") for line in out.read_text().splitlines())


def _first_order_lines(couplings, width_hz=1.0, mhz=60.0):
    """Line positions (Hz, high first) and peak heights of a first-order multiplet with
    Lorentzian lines (textbook rule: n equivalent partners split a line into n + 1
    lines of binomial intensity); heights include the neighbours' overlap."""
    sticks = [(0.0, 1.0)]
    for j_hz, partners in couplings:
        sticks = [(x + (m - partners / 2) * j_hz, a * math.comb(partners, m))
                  for x, a in sticks for m in range(partners + 1)]
    positions = sorted({round(x, 6) for x, _ in sticks}, reverse=True)
    half = width_hz / 2
    heights = [sum(a / (1 + ((p - x) / half) ** 2) for x, a in sticks) for p in positions]
    return np.array(positions) + 500.0, np.array(heights), np.full(len(positions), width_hz)


@pytest.mark.parametrize("couplings, code, j_hz", [
    ([(7.0, 1)], "d", (7.0,)),
    ([(7.0, 2)], "t", (7.0,)),
    ([(7.0, 3)], "q", (7.0,)),
    ([(14.0, 1), (7.0, 1)], "dd", (14.0, 7.0)),   # equal spacings, 1:1:1:1: not a quartet
    ([(10.4, 1), (6.9, 1)], "dd", (10.4, 6.9)),
    ([(15.6, 1), (6.9, 2)], "dt", (15.6, 6.9)),
    ([(7.5, 2), (2.1, 1)], "td", (7.5, 2.1)),
    ([(15.5, 1), (6.9, 3)], "dq", (15.5, 6.9)),
])
def test_first_order_patterns_are_named_with_their_couplings(couplings, code, j_hz):
    from kinetics.signals.multiplets import match_pattern

    x, h, w = _first_order_lines(couplings)
    pattern = match_pattern(x, h, w, tol_hz=0.3)
    assert pattern is not None and pattern.code == code
    assert pattern.j_hz == pytest.approx(j_hz, abs=0.1)


def test_unequal_or_unlike_lines_are_not_a_doublet():
    # 45:1 at 7.2 Hz (two species' singlets 0.12 ppm apart at 60 MHz), and two lines of
    # equal height but widths 1 and 4 Hz: no first-order doublet looks like either.
    from kinetics.signals.lines import Peak
    from kinetics.signals.multiplets import group_peaks, match_pattern

    assert match_pattern([507.2, 500.0], [45.0, 1.0], [1.0, 1.0], tol_hz=0.3) is None
    assert match_pattern([507.2, 500.0], [1.0, 1.0], [1.0, 4.0], tol_hz=0.3) is None
    lines = [Peak(2.10, 45.0, 1.0, 900.0), Peak(1.98, 1.0, 1.0, 20.0)]
    assert [pattern.code for _, pattern in group_peaks(lines, 60.0, 12.8)] == ["s", "s"]
    # the same pair 0.12 ppm apart at 500 MHz is 60 Hz: never one multiplet
    even = [Peak(2.10, 1.0, 1.0, 900.0), Peak(1.98, 1.0, 1.0, 900.0)]
    assert len(group_peaks(even, 500.0, 12.8)) == 2 and len(group_peaks(even, 60.0, 12.8)) == 1


def test_19f_chf2_doublet_is_one_window_at_its_own_coupling():
    # Invented 19F spectrum at 56.46 MHz (truth set here): a CHF2 group whose geminal
    # 2J(H,F) of 56 Hz (from memory: 45-57 Hz for CHF2 groups) splits it into a doublet at
    # -110 ppm, beside a CF3 singlet at -63.7 ppm.  With the 19F coupling limit the doublet
    # is one window holding both lines and reported as "d" with J = 56 Hz; with the 1H
    # limit of 18 Hz (the control) it falls apart into two one-line windows.
    from kinetics.init import propose_windows
    from kinetics.nuclei import largest_coupling_hz

    mhz = 56.46
    chf2 = simulate.SpeciesSignals("chf2", (simulate.Multiplet(-110.0, 2, (56.0,), (2,), width_hz=2.0),))
    cf3 = simulate.SpeciesSignals("cf3", (simulate.Multiplet(-63.7, 3, width_hz=2.0),))
    acquisition = simulate.Acquisition(observe_mhz=mhz, n_points=32768, spectral_width_ppm=120.0,
                                       carrier_ppm=-90.0, nucleus="19F")
    spectrum = simulate.simulate_spectrum([chf2, cf3], {"chf2": 1.0, "cf3": 1.0}, np.random.default_rng(5),
                                          acquisition, snr=300.0)
    doublet = -110.0 + np.array([28.0, -28.0]) / mhz
    assert largest_coupling_hz("19F") > 56.0 > largest_coupling_hz("1H")
    for limit in ("nucleus", 18.0):
        *_, windows = propose_windows(spectrum, large_coupling_hz=limit)
        holders = [w for w in windows if any(w.window_ppm[0] < x < w.window_ppm[1] for x in doublet)]
        if limit == "nucleus":
            assert len(holders) == 1 and holders[0].pattern.code == "d", [w.window_ppm for w in holders]
            assert holders[0].pattern.j_hz[0] == pytest.approx(56.0, abs=1.0)
        else:
            assert len(holders) == 2, [w.window_ppm for w in holders]
