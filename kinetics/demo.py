"""The bundled demo: an invented reaction followed on an invented 60 MHz benchtop magnet.

Scenario (every compound name is invented)
------------------------------------------
Hydrolysis of the fictitious ester *tessyl ethanoate* (reactant, "ester") in aqueous
acetonitrile with excess water, giving the fictitious alcohol *tessol* (product,
"alcohol") and acetic acid; pseudo-first order in the ester.  An inert internal standard,
the fictitious *dimethyl orbate* ("standard", a 6-proton singlet at 6.20 ppm, 0.0500
mol/L), is weighed in.  The solvent is not deuterated: a large water line sits at 4.75
ppm.  Runs at 25, 35, 45 and 55 degrees C; the generator's rate constants follow an
Arrhenius law with ``EA_KJ_PER_MOL`` and ``K_REF_PER_S`` at 25 degrees C.

1H signals at 60 MHz (shift ppm, protons, multiplicity, J Hz):

=========  ======================  ====  =======  =====
species    group                   ppm   nuclei   J
=========  ======================  ====  =======  =====
ester      O-CH2 (triplet)         4.05  2        6.8
ester      CH3-CO (singlet)        2.04  3        -
ester      CH3 (triplet)           0.93  3        7.2
alcohol    HO-CH2 (triplet)        3.58  2        6.6
alcohol    CH3 (triplet)           0.90  3        7.2
acid       CH3-CO2H (singlet)      2.09  3        -
standard   singlet                 6.20  6        -
=========  ======================  ====  =======  =====

The two CH3 triplets (0.03 ppm apart) and the acetyl singlets (0.05 ppm apart) overlap
at 60 MHz; the O-CH2 and HO-CH2 triplets are resolved and are what the example configs
integrate.  Artefacts per spectrum: noise, zero- and first-order phase errors, a slow
field drift (the magnet warms), a baseline roll and the water line.

The data are made by :func:`make_demo_data` from a fixed seed; ``kinetics demo
--make-data DIR`` regenerates them bit for bit.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
from scipy import constants

from kinetics.atomic import write_atomic
from kinetics.simulate import Acquisition, Multiplet, SpeciesSignals, write_series

SEED = 20261201
EA_KJ_PER_MOL = 62.0
K_REF_PER_S = 1.5e-4
T_REF_KELVIN = 298.15
ESTER_INITIAL_MOL_PER_L = 0.400
STANDARD_MOL_PER_L = 0.0500
TEMPERATURES_C = (25.0, 35.0, 45.0, 55.0)
SPECTRA_PER_RUN = 36
HALF_LIVES_COVERED = 3.5
SCAN_DURATION_S = 16.0
ACQUISITION = Acquisition(observe_mhz=60.0, n_points=4096, spectral_width_ppm=12.0,
                          carrier_ppm=4.5, nucleus="1H")

SPIN_SYSTEMS = (
    SpeciesSignals("ester", (
        Multiplet(4.05, 2, j_hz=6.8, multiplicity=3, width_hz=1.2),
        Multiplet(2.04, 3, width_hz=1.2),
        Multiplet(0.93, 3, j_hz=7.2, multiplicity=3, width_hz=1.2),
    )),
    SpeciesSignals("alcohol", (
        Multiplet(3.58, 2, j_hz=6.6, multiplicity=3, width_hz=1.2),
        Multiplet(0.90, 3, j_hz=7.2, multiplicity=3, width_hz=1.2),
    )),
    SpeciesSignals("acid", (Multiplet(2.09, 3, width_hz=1.2),)),
    SpeciesSignals("standard", (Multiplet(6.20, 6, width_hz=1.0),)),
)
WATER = Multiplet(4.75, 60.0, width_hz=4.0)  # amplitude 60 "nuclei" at unit concentration


@dataclass(frozen=True)
class DemoRun:
    """One temperature of the demo study and the truth the generator used."""

    folder: str
    temperature_c: float
    k_per_s: float
    interval_s: float


def k_true(temperature_c: float) -> float:
    """The generator's k(T) = k_ref exp(-(Ea/R)(1/T - 1/T_ref)), s^-1."""
    t_kelvin = temperature_c + constants.zero_Celsius
    return K_REF_PER_S * math.exp(-EA_KJ_PER_MOL * 1e3 / constants.R * (1.0 / t_kelvin - 1.0 / T_REF_KELVIN))


def demo_runs() -> list[DemoRun]:
    runs = []
    for temperature_c in TEMPERATURES_C:
        k = k_true(temperature_c)
        span_s = HALF_LIVES_COVERED * math.log(2.0) / k
        # whole seconds keep file timestamps exact
        interval_s = float(round(span_s / (SPECTRA_PER_RUN - 1)))
        runs.append(DemoRun(f"run_{int(temperature_c):02d}C", temperature_c, k, interval_s))
    return runs


def make_demo_data(folder: str | Path) -> list[Path]:
    """Write the demo series (one sub-folder per temperature) and return the run folders."""
    folder = Path(folder)
    rng = np.random.default_rng(SEED)
    start = datetime(2026, 3, 9, 8, 30, 0, tzinfo=timezone.utc)
    written = []
    for number, run in enumerate(demo_runs()):
        n = SPECTRA_PER_RUN
        # the first spectrum is taken 60 s after mixing, then one every interval
        times_s = 60.0 + run.interval_s * np.arange(n)
        ester = ESTER_INITIAL_MOL_PER_L * np.exp(-run.k_per_s * times_s)
        formed = ESTER_INITIAL_MOL_PER_L - ester
        concentrations = {"ester": ester, "alcohol": formed, "acid": formed,
                          "standard": np.full(n, STANDARD_MOL_PER_L)}
        drift = 0.012 * (1.0 - np.exp(-times_s / times_s[-1] * 3.0)) + rng.normal(0.0, 0.0015, n)
        phase0 = rng.uniform(-40.0, 40.0, n)
        phase1 = rng.uniform(-15.0, 15.0, n)
        run_start = start + timedelta(days=number)
        path = folder / run.folder
        write_series(
            path, times_s, concentrations, SPIN_SYSTEMS, rng,
            acquisition=ACQUISITION, start_utc=run_start, scan_duration_s=SCAN_DURATION_S,
            n_scans=16, format="jcamp", kind="spectrum", compression="dif", snr=150.0,
            phase0_deg=phase0, phase1_deg=phase1, drift_ppm=drift, baseline_roll=0.01,
            solvent=WATER, amplitude_per_nucleus=1.0e4,
            title=f"tessyl ethanoate hydrolysis {run.temperature_c:g} C",
        )
        truth = json.loads((path / "truth.json").read_text())
        truth["scenario"] = {
            "reaction": "tessyl ethanoate + H2O -> tessol + acetic acid (invented compounds)",
            "temperature_c": run.temperature_c, "k_per_s": run.k_per_s,
            "ea_kj_per_mol": EA_KJ_PER_MOL, "k_ref_per_s": K_REF_PER_S,
            "t_ref_kelvin": T_REF_KELVIN, "ester_initial_mol_per_l": ESTER_INITIAL_MOL_PER_L,
            "standard_mol_per_l": STANDARD_MOL_PER_L, "seed": SEED,
        }
        write_atomic(path / "truth.json", json.dumps(truth, indent=2) + "\n")
        written.append(path)
    from kinetics.campaign.demo import write_series as write_campaign_series

    write_campaign_series(folder / "campaign")  # the demo campaign's series tables (their own seed)
    make_f19_arrayed(folder / F19_FOLDER)  # the 19F run in one arrayed file (its own seed)
    return written


# ---------------------------------------------------------------- the demo's configs
def run_config_text(folder: str, temperature_c: float | None = None) -> str:
    """The single-run config used for every demo run (``folder`` relative to the config)."""
    heading = "" if temperature_c is None else f" at {temperature_c:g} degrees C"
    return f'''# Demo run{heading}: hydrolysis of the invented ester tessyl ethanoate, followed on an
# invented 60 MHz benchtop magnet (see demo_series/README.md; every compound is invented).
# Run it with:  kinetics run THIS_FILE --out OUT    (or follow it live with kinetics watch)

[run]
folder = "{folder}"          # spectra of one run, relative to this file
pattern = "spectrum_*.jdx"    # the instrument's file names (truth.* files are not spectra)

[time]
source = "header"             # acquisition start from ##LONG DATE, plus half the duration
first_spectrum_offset_s = 60.0  # the first spectrum's midpoint is 60 s after mixing

[processing]
phase = "auto"                # the files carry zero- and first-order phase errors
phase_exclude_ppm = [[5.2, 4.3]]  # keep the huge water line out of the phase score
line_broadening_hz = 0.0      # already transformed spectra: no apodisation applies
reference = {{ ppm = 6.20, window_ppm = 0.15 }}   # the standard's singlet defines the scale

[alignment]
window_ppm = [6.1, 6.3]       # align every spectrum on the standard (the magnet drifts)
max_shift_ppm = 0.05

[integration]
noise_region_ppm = [[8.0, 9.5]]   # signal-free: no compound absorbs here
fit_baseline_order = 2        # the water line's tail curves under the O-CH2 triplet
global_fit = true             # positions, widths and J shared by the whole run

# Resolved triplets are fitted with their multiplet shape (Lorentzian lines of the width
# the fit finds), which captures the long Lorentzian tails a plain window integral cuts.
[[signals]]
name = "ester_OCH2"
species = "ester"
window_ppm = [3.85, 4.25]
nuclei = 2
method = "fit"
group = "ester_och2"
tolerance_ppm = 0.03
lineshape = {{ multiplicity = "triplet", j_hz = 6.8, width_hz = 1.2 }}

[[signals]]
name = "alcohol_CH2OH"
species = "alcohol"
window_ppm = [3.38, 3.78]
nuclei = 2
method = "fit"
group = "alcohol_ch2"
tolerance_ppm = 0.03
lineshape = {{ multiplicity = "triplet", j_hz = 6.6, width_hz = 1.2 }}

# The two acetyl singlets are 0.05 ppm (3 Hz) apart at 60 MHz: deconvolved together.
# Each window is centred on its own line (the fit starts there and may move the centre
# by tolerance_ppm), which keeps the two components from trading places.
[[signals]]
name = "ester_acetyl"
species = "ester"
window_ppm = [1.94, 2.14]
nuclei = 3
method = "fit"
group = "acetyl"
tolerance_ppm = 0.015
lineshape = {{ width_hz = 1.2 }}

[[signals]]
name = "acid_acetyl"
species = "acid"
window_ppm = [1.99, 2.19]
nuclei = 3
method = "fit"
group = "acetyl"
tolerance_ppm = 0.015
lineshape = {{ width_hz = 1.2 }}

[[signals]]
name = "standard"
species = "standard"
window_ppm = [6.0, 6.4]
nuclei = 6
method = "fit"
standard = true
concentration_mol_per_l = {STANDARD_MOL_PER_L}
concentration_sigma_mol_per_l = 0.0005   # weighing uncertainty, 1 %
lineshape = {{ width_hz = 1.0 }}

[quantify]
mode = "standard"
reactant = "ester"
product = "alcohol"
stoichiometry = {{ ester = 1, alcohol = 1, acid = 0 }}   # acid is counted once, via the alcohol

[fit]
model = "first"               # pseudo-first order in the ester (water in large excess)
species = "ester"

[live]
quiet_period_s = 0.5          # seconds a file must stay unchanged before it is taken
target_conversion = 0.95      # a live run stops once conversion is surely past 95 %
'''


def study_config_text(run_tables: list[tuple[str, float, str]], name: str = "tessyl ethanoate hydrolysis") -> str:
    """A temperature-study config over series tables: (label, temperature_c, table path)."""
    lines = [
        "# Demo temperature study: the four demo runs, fitted one by one (two-step Arrhenius",
        "# and Eyring) and all at once (global fit in the reference-temperature form).",
        "",
        "[study]",
        f'name = "{name}"',
        'model = "first"',
        'observed = "reactant"',
        "reference_temperature_kelvin = 298.15",
        "global_fit = true",
        "profile = true",
        "",
    ]
    for label, temperature_c, table in run_tables:
        lines += [
            "[[study.runs]]",
            f'label = "{label}"',
            f"temperature_c = {temperature_c:g}",
            f'table = "{table}"',
            'column = "ester_concentration"',
            'sigma_column = "ester_concentration_sigma"',
            "",
        ]
    return "\n".join(lines)


def mechanism_config_text(folder: str) -> str:
    """A demo run config whose fit is a written mechanism over two observed species."""
    text = run_config_text(folder, TEMPERATURES_C[2])
    law = '''[fit]
model = "first"               # pseudo-first order in the ester (water in large excess)
species = "ester"
'''
    mechanism = '''[fit]
# A written mechanism instead of a named rate law: mass-action ODEs fitted to the ester and
# the alcohol at once (one rate constant, both initial concentrations fitted).
mechanism = "ester -> alcohol : k_hyd"
observed_species = ["ester", "alcohol"]
'''
    assert law in text
    return text.replace(law, mechanism).replace("# Demo run", "# Demo mechanism fit", 1)


def study_config_over_runs_text(run_config: str, data_folder: str) -> str:
    """The demo study over the raw spectra: one run config applied to each run's folder."""
    lines = [
        "# Demo temperature study over the raw spectra: the run config below is applied to each",
        "# run's folder (key 'folder'), every run is fitted, then Arrhenius and Eyring parameters",
        "# are found two ways (per-run k, and one global fit of every concentration).",
        "# Run it with:  kinetics run configs/demo_study.toml --out OUT",
        "",
        "[study]",
        'name = "tessyl ethanoate hydrolysis"   # title of plots and report',
        'model = "first"                       # the rate law of every run',
        'observed = "reactant"                 # the column is the ester (reactant)',
        "reference_temperature_kelvin = 298.15   # K, where dG‡ is given",
        "global_fit = true                     # also fit all raw points at once",
        "profile = true                        # profile-likelihood interval of Ea",
        "",
    ]
    for run in demo_runs():
        lines += [
            "[[study.runs]]",
            f'label = "{run.temperature_c:g} °C"',
            f"temperature_c = {run.temperature_c:g}",
            f'config = "{run_config}"',
            f'folder = "{data_folder}/{run.folder}"',
            'column = "ester_concentration"',
            'sigma_column = "ester_concentration_sigma"',
            "",
        ]
    return "\n".join(lines)


# ---------------------------------------------------------------- the 19F run in one arrayed file
# Scenario (invented compounds): aminolysis of the fictitious ester *quenyl
# trifluoroacetate* (reactant "ester", a CF3 singlet at -75.20 ppm) by an excess of the
# fictitious amine *dorvamine*, giving *dorvyl trifluoroacetamide* (product "amide", its
# CF3 singlet at -76.40 ppm); pseudo-first order in the ester.  alpha,alpha,alpha-
# Trifluorotoluene (PhCF3, -63.72 ppm on the CCl3F scale, value from memory:
# kinetics.nuclei.INTERNAL_REFERENCES) is weighed in as internal standard and sets the
# shift scale.  19F observed on a 1.4 T benchtop magnet; the instrument's axis is off by
# F19_AXIS_OFFSET_PPM (the reference puts it right), the field drifts a little, every FID
# has its own receiver phase.  The whole series is ONE arrayed JCAMP-DX file (LINK
# blocks, one per time point, each with its ##LONG DATE), as an arrayed acquisition is
# exported.
F19_FOLDER = "f19_arrayed"
F19_FILE = "series.jdx"
F19_SEED = 20261202
F19_K_PER_S = 6.0e-4
F19_TRACES = 30
F19_INTERVAL_S = 120.0
F19_FIRST_MID_S = 60.0
F19_SCAN_DURATION_S = 32.0
F19_ESTER_MOL_PER_L = 0.200
F19_STANDARD_MOL_PER_L = 0.0500
F19_ESTER_PPM, F19_AMIDE_PPM, F19_STANDARD_PPM = -75.20, -76.40, -63.72
F19_AXIS_OFFSET_PPM = 0.25


def f19_acquisition() -> Acquisition:
    """19F at 1.4 T: the Larmor frequency from the IUPAC frequency ratio (kinetics.nuclei)."""
    from kinetics.nuclei import larmor_mhz

    return Acquisition(observe_mhz=round(larmor_mhz(1.4, "19F"), 4), n_points=4096,
                       spectral_width_ppm=30.0, carrier_ppm=-70.0, nucleus="19F")


F19_SPIN_SYSTEMS = (
    SpeciesSignals("ester", (Multiplet(F19_ESTER_PPM, 3, width_hz=1.5),)),
    SpeciesSignals("amide", (Multiplet(F19_AMIDE_PPM, 3, width_hz=1.5),)),
    SpeciesSignals("standard", (Multiplet(F19_STANDARD_PPM, 3, width_hz=1.2),)),
)


def make_f19_arrayed(folder: str | Path) -> Path:
    """Write the 19F demo run: ``series.jdx`` (one LINK block per time point), ``truth.json``
    and ``truth.csv``; returns the arrayed file.  Bit for bit the same on every call."""
    import tempfile

    from kinetics.spectra.arrayed_writers import write_arrayed_jcampdx
    from kinetics.spectra.reader import read

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(F19_SEED)
    times_s = F19_FIRST_MID_S + F19_INTERVAL_S * np.arange(F19_TRACES)
    ester = F19_ESTER_MOL_PER_L * np.exp(-F19_K_PER_S * times_s)
    concentrations = {"ester": ester, "amide": F19_ESTER_MOL_PER_L - ester,
                      "standard": np.full(F19_TRACES, F19_STANDARD_MOL_PER_L)}
    drift = F19_AXIS_OFFSET_PPM + 0.02 * times_s / times_s[-1] + rng.normal(0.0, 0.002, F19_TRACES)
    phase0 = rng.uniform(-40.0, 40.0, F19_TRACES)
    start = datetime(2026, 3, 16, 10, 0, 0, tzinfo=timezone.utc)
    with tempfile.TemporaryDirectory() as scratch:
        write_series(scratch, times_s, concentrations, F19_SPIN_SYSTEMS, rng, acquisition=f19_acquisition(),
                     start_utc=start, scan_duration_s=F19_SCAN_DURATION_S, n_scans=16, kind="fid",
                     compression="dif", snr=250.0, phase0_deg=phase0, drift_ppm=drift,
                     amplitude_per_nucleus=1.0e4, title="quenyl trifluoroacetate aminolysis")
        files = sorted(Path(scratch).glob("fid_*.jdx"))
        records = [read(path) for path in files]
        truth = json.loads((Path(scratch) / "truth.json").read_text())
        truth_csv = (Path(scratch) / "truth.csv").read_text()
    path = folder / F19_FILE
    write_arrayed_jcampdx(path, records, form="link")
    truth["arrayed_file"] = F19_FILE
    truth["blocks"] = "one LINK block per row of files, in order (block 0 = fid_0001)"
    truth["scenario"] = {
        "reaction": "quenyl trifluoroacetate + dorvamine -> dorvyl trifluoroacetamide (invented compounds)",
        "k_per_s": F19_K_PER_S, "ester_initial_mol_per_l": F19_ESTER_MOL_PER_L,
        "standard": "PhCF3 (alpha,alpha,alpha-trifluorotoluene)", "standard_mol_per_l": F19_STANDARD_MOL_PER_L,
        "standard_ppm": F19_STANDARD_PPM, "axis_offset_ppm": F19_AXIS_OFFSET_PPM,
        "field_tesla": 1.4, "seed": F19_SEED,
    }
    (folder / "truth.json").write_text(json.dumps(truth, indent=2) + "\n")
    (folder / "truth.csv").write_text(truth_csv)
    return path


def f19_config_text(file: str) -> str:
    """The run config of the 19F demo (``file`` relative to the config)."""
    reference_in_file = F19_STANDARD_PPM + F19_AXIS_OFFSET_PPM
    return f'''# Demo 19F run: aminolysis of the invented ester quenyl trifluoroacetate, followed by its
# CF3 singlet on a 1.4 T benchtop magnet (19F at 56.09 MHz).  The whole series is one
# arrayed JCAMP-DX file (one block per time point).  See demo_series/README.md.
# Run it with:  kinetics run THIS_FILE --out OUT    (or follow it live with kinetics watch)

[run]
file = "{file}"   # one arrayed file holds every trace (relative to this file)

[time]
source = "header"             # each block's ##LONG DATE, plus half its duration
first_spectrum_offset_s = {F19_FIRST_MID_S:g}  # the first trace's midpoint is {F19_FIRST_MID_S:g} s after mixing

[processing]
phase = "auto"                # every FID has its own receiver phase
line_broadening_hz = 0.5
# the standard PhCF3 sets the CCl3F scale: in the files it sits near {reference_in_file:.2f} ppm
reference = {{ ppm = {reference_in_file:.2f}, window_ppm = 0.5, target_ppm = {F19_STANDARD_PPM} }}

[alignment]
window_ppm = [-64.2, -63.2]   # align every trace on the standard (the field drifts)
max_shift_ppm = 0.1

[integration]
noise_region_ppm = [[-60.0, -57.0]]   # no fluorine absorbs here

[[signals]]
name = "ester_CF3"
species = "ester"
window_ppm = [-75.75, -74.65]
nuclei = 3

[[signals]]
name = "amide_CF3"
species = "amide"
window_ppm = [-76.95, -75.85]
nuclei = 3

[[signals]]
name = "standard_CF3"
species = "standard"
window_ppm = [-64.27, -63.17]
nuclei = 3
standard = true
concentration_mol_per_l = {F19_STANDARD_MOL_PER_L}
concentration_sigma_mol_per_l = 0.0005   # weighing uncertainty, 1 %

[quantify]
mode = "standard"
reactant = "ester"
product = "amide"

[fit]
model = "first"               # pseudo-first order in the ester (the amine in excess)
species = "ester"

[live]
target_conversion = 0.95      # a live run stops once conversion is surely past 95 %
'''
