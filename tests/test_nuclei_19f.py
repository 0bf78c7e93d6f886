"""19F and 31P end to end: the header's nucleus and frequency, the scale references, `init`
proposals without solvent logic, and a simulated 19F run through `kinetics run`.

Sources named beside each check.  Frequency ratios Xi and reference shifts are the
IUPAC 2001/2008 recommendations and common-practice tables, values from memory
(kinetics/nuclei.py).  The 19F series is simulated with kinetics.simulate, the truth set
here: k = 1.0e-3 s^-1, a CF3 singlet of the reactant at -72.30 ppm, the product's at
-74.10 ppm, alpha,alpha,alpha-trifluorotoluene (PhCF3, -63.72 ppm from memory) as the
internal standard at 0.050 mol/L, on a file axis mis-set by +0.30 ppm.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from kinetics import nuclei, simulate
from kinetics.cli import main
from kinetics.config import load_run_config
from kinetics.init import draft_config
from kinetics.processing.pipeline import Pipeline
from kinetics.processing.steps import peak_position
from kinetics.spectra.jcampdx import write_spectrum
from kinetics.spectra.reader import read
from kinetics.spectra.spectrum import Spectrum


def _hand_written_jcamp(path: Path, nucleus: str, mhz: float, decoupler: str | None) -> Path:
    # A minimal JCAMP-DX 5.01 NMR spectrum as a benchtop instrument writes it (labels of the
    # NMR dictionary: .OBSERVE FREQUENCY in MHz, .OBSERVE NUCLEUS, .DECOUPLER).
    lines = ["##TITLE= hand-written", "##JCAMP-DX= 5.01", "##DATA TYPE= NMR SPECTRUM",
             f"##.OBSERVE FREQUENCY= {mhz}", f"##.OBSERVE NUCLEUS= ^{nucleus}"]
    if decoupler:
        lines.append(f"##.DECOUPLER= {decoupler}")
    lines += ["##XUNITS= PPM", "##YUNITS= ARBITRARY UNITS", "##FIRSTX= 10.0", "##LASTX= -10.0",
              "##NPOINTS= 5", "##XFACTOR= 1.0", "##YFACTOR= 1.0", "##XYDATA= (X++(Y..Y))",
              "10.0 1 2 3 4 5", "##END="]
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.mark.parametrize("nucleus, file_mhz", [("19F", 56.088), ("31P", 24.130)])
def test_larmor_at_1p4_tesla_matches_the_header(tmp_path, nucleus, file_mhz):
    # IUPAC 2001 Xi(19F) = 94.094011 %, Xi(31P) = 40.480742 % (from memory), 1H from CODATA
    # via scipy.constants: at 1.4 T (a "60 MHz" benchtop magnet) 19F resonates at 56.09 MHz
    # and 31P at 24.13 MHz; the file states the frequency its instrument used.
    record = read(_hand_written_jcamp(tmp_path / f"{nucleus}.jdx", nucleus, file_mhz, "^1H"))
    assert record.nucleus == nucleus
    assert record.observe_mhz == pytest.approx(file_mhz)
    assert nuclei.larmor_mhz(1.4, nucleus) == pytest.approx(record.observe_mhz, abs=0.01)
    assert nuclei.field_tesla(record.observe_mhz, nucleus) == pytest.approx(1.4, abs=2e-4)
    assert record.decoupler == "^1H"  # recorded as written, not interpreted


def test_decoupler_absent_is_none_and_round_trips(tmp_path):
    plain = read(_hand_written_jcamp(tmp_path / "plain.jdx", "19F", 56.088, None))
    assert plain.decoupler is None  # the file does not say: nothing invented
    written = write_spectrum(tmp_path / "copy.jdx", plain.replace(decoupler="1H"))
    assert read(written).decoupler == "1H"


def test_scale_references_follow_the_nucleus():
    # IUPAC 2001/2008 (from memory): 0 ppm is TMS for 1H and 13C, CCl3F for 19F, 85 % H3PO4 for 31P.
    assert [nuclei.scale_reference(n).name for n in ("1H", "^13C", "19f", "31P")] == ["TMS", "TMS", "CCl3F", "H3PO4"]
    assert nuclei.scale_reference("11B") is None
    assert not nuclei.has_solvent_background("19F") and not nuclei.has_solvent_background("31P")
    assert nuclei.has_solvent_background("1H")
    assert nuclei.internal_reference_near("19F", -63.5).name == "PhCF3"
    assert nuclei.internal_reference_near("19F", -40.0) is None
    assert nuclei.internal_references("1H") == ()
    ppm = np.linspace(1.0, -1.0, 2001)
    line = 1.0 / (1.0 + ((ppm - 0.05) / 0.005) ** 2)
    fluorine = Spectrum(ppm=ppm, real=line, nucleus="19F", observe_mhz=56.088)
    ccl3f = Pipeline.from_config({"reference": "CCl3F", "phase": "none"})
    assert ccl3f(fluorine).reference_shift_ppm == pytest.approx(-0.05, abs=1e-3)
    # "tms" names the 1H/13C zero: refused on a 19F spectrum, with a note saying why
    refused = Pipeline.from_config({"reference": "tms", "phase": "none"})(fluorine)
    assert not refused.succeeded and refused.reference_shift_ppm == 0.0
    assert any("1H/13C scale" in note and "is 19F" in note for note in refused.notes)


# ---------------------------------------------------------------- a simulated 19F run
MHZ_19F = 56.088            # 19F at 1.4 T (test above)
K_PER_S = 1.0e-3            # truth
OFFSET_PPM = 0.30           # the files' axis is mis-set by this much
STANDARD_PPM = -63.72       # PhCF3, from memory (kinetics.nuclei.INTERNAL_REFERENCES)
REACTANT_PPM, PRODUCT_PPM = -72.30, -74.10


def _fluorine_series(folder: Path) -> Path:
    acquisition = simulate.Acquisition(observe_mhz=MHZ_19F, n_points=8192, spectral_width_ppm=40.0,
                                       carrier_ppm=-70.0, nucleus="19F")
    species = [simulate.SpeciesSignals("reactant", (simulate.Multiplet(REACTANT_PPM, 3),)),
               simulate.SpeciesSignals("product", (simulate.Multiplet(PRODUCT_PPM, 3),)),
               simulate.SpeciesSignals("standard", (simulate.Multiplet(STANDARD_PPM, 3),))]
    times = np.arange(21) * 180.0
    decay = np.exp(-K_PER_S * times)
    concentrations = {"reactant": 0.40 * decay, "product": 0.40 * (1.0 - decay),
                      "standard": np.full(times.size, 0.050)}
    rng = np.random.default_rng(19)
    simulate.write_series(folder, times, concentrations, species, rng, acquisition=acquisition, kind="fid",
                          snr=300.0, phase0_deg=rng.uniform(-30.0, 30.0, times.size),
                          drift_ppm=OFFSET_PPM + 0.01 * times / times[-1])
    return folder


def test_fluorine_run_init_proposes_a_named_reference_and_run_recovers_k(tmp_path, capsys):
    folder = _fluorine_series(tmp_path / "f19_25c")
    out = tmp_path / "f19.toml"
    draft = draft_config(folder, out)
    assert draft.spectrum.nucleus == "19F"
    # no water or solvent logic for 19F: no solvent windows, no phase exclusions
    assert draft.solvents == () and "phase_exclude_ppm" not in draft.text
    assert "No solvent or water lines looked for" in draft.text
    reference = draft.reference
    assert reference.reference_candidate and reference.expected_ppm == STANDARD_PPM
    assert "PhCF3" in reference.label and "PROPOSAL" in draft.text
    # the proposal names where the line is in the files and where the convention puts it
    found = re.search(r"^reference = \{ ppm = (-?\d+\.\d+), window_ppm = [\d.]+, target_ppm = (-?\d+\.\d+) \}",
                      draft.text, re.M)
    assert found and float(found.group(1)) == pytest.approx(STANDARD_PPM + OFFSET_PPM, abs=0.01)
    assert float(found.group(2)) == STANDARD_PPM
    falling = [w for w in draft.signals if w.change is not None and w.change < 0.8]
    rising = [w for w in draft.signals if w.change is not None and w.change > 1.25]
    assert [len(falling), len(rising)] == [1, 1]
    # windows are drafted on the reference's scale: each holds its true line
    assert falling[0].window_ppm[0] < REACTANT_PPM < falling[0].window_ppm[1]
    assert rising[0].window_ppm[0] < PRODUCT_PPM < rising[0].window_ppm[1]

    # the chemist's edits: the standard's concentration, reactant, product, nuclei (3 F each)
    text = draft.text.replace("# concentration_mol_per_l = 0.05   # EDIT", "concentration_mol_per_l = 0.05   # EDIT", 1)
    text = re.sub(r'^# reactant = "[^"]*"', f'reactant = "{falling[0].species}"', text, flags=re.M)
    text = re.sub(r'^# product = "[^"]*"', f'product = "{rising[0].species}"', text, flags=re.M)
    text = re.sub(r"^nuclei = \d+", "nuclei = 3", text, flags=re.M)
    edited = tmp_path / "edited.toml"
    edited.write_text(text)
    config = load_run_config(edited)

    # the reference lands at its convention, and the reactant's line at its true shift
    pipeline = Pipeline.from_config(config.processing)
    processed = pipeline(read(sorted(folder.glob("*.jdx"))[0]))
    assert processed.succeeded
    assert peak_position(processed.spectrum, STANDARD_PPM, 0.1) == pytest.approx(STANDARD_PPM, abs=0.005)
    assert peak_position(processed.spectrum, REACTANT_PPM, 0.1) == pytest.approx(REACTANT_PPM, abs=0.01)

    capsys.readouterr()
    assert main(["run", str(edited), "--out", str(tmp_path / "out"), "--json", "--no-report"]) == 0
    k = json.loads(capsys.readouterr().out)["runs"][0]["k_per_s"]
    low, high = k["ci95"]
    assert low < K_PER_S < high  # truth inside the quoted 95 % interval
    assert k["value"] == pytest.approx(K_PER_S, rel=0.03)


def test_phosphorus_init_names_a_standard_without_solvent_logic(tmp_path):
    # 31P (1H-decoupled, singlets): triphenyl phosphate (-17.7 ppm from memory) as the
    # standard, on an axis 0.4 ppm off; a reactant at 12.0 ppm and a product at 25.0 ppm.
    acquisition = simulate.Acquisition(observe_mhz=24.130, n_points=8192, spectral_width_ppm=80.0,
                                       carrier_ppm=5.0, nucleus="31P")
    species = [simulate.SpeciesSignals("reactant", (simulate.Multiplet(12.0, 1),)),
               simulate.SpeciesSignals("product", (simulate.Multiplet(25.0, 1),)),
               simulate.SpeciesSignals("standard", (simulate.Multiplet(-17.7, 1),))]
    times = np.array([0.0, 3000.0])
    concentrations = {"reactant": 0.2 * np.exp(-1e-3 * times), "product": 0.2 * (1 - np.exp(-1e-3 * times)),
                      "standard": np.full(2, 0.05)}
    simulate.write_series(tmp_path / "p31", times, concentrations, species, np.random.default_rng(31),
                          acquisition=acquisition, snr=200.0, drift_ppm=0.4)
    draft = draft_config(tmp_path / "p31", tmp_path / "p31.toml")
    assert draft.spectrum.nucleus == "31P" and draft.solvents == ()
    assert draft.reference.expected_ppm == pytest.approx(-17.7) and "(PhO)3PO" in draft.reference.label
    assert "0 ppm = 85 % phosphoric acid" in draft.text
    load_run_config(tmp_path / "p31.toml")
