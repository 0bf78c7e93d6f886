"""An independent stress series: JCAMP-DX files of a reaction whose truth the test sets.

Written from the physics, sharing no code and no settings with ``kinetics.simulate``
(so a mistake there cannot hide a mistake here), and with its own minimal JCAMP-DX
writer (nmrglue reads but does not write JCAMP-DX).  Importable by tests; it collects
no tests itself.

The sample (invented, loosely an ethyl ester hydrolysing in wet solvent)::

    ester   O-CH2 quartet 4.08 ppm (2 H, J 7.1 Hz)   CH3 triplet 1.26 ppm (3 H)
            acetyl singlet 2.05 ppm (3 H)
    alcohol CH2 quartet 3.60 ppm (2 H, J 7.0 Hz)      CH3 triplet 1.17 ppm (3 H)
    acid    acetyl singlet 1.93 ppm (3 H)  -- 0.12 ppm from the ester's
    standard  singlet 6.75 ppm (3 H), constant
    water   singlet 4.78 ppm (0.7 ppm from the ester quartet), its height ``water_ratio``
            (45) times the ester quartet's tallest line at t = 0

At the start the acid (and alcohol) are ``1/initial_ratio`` (1/45) of the ester.
Lines are first order (binomial multiplets; at 40-60 MHz the ethyl CH2/CH3 pair has
Delta-nu/J > 15, so roof effects are small and ignored).

Physics
-------
* Field: ``B0 = nominal_mhz / (gamma/2pi)``; the observe frequency is
  ``(gamma/2pi) * B0`` with gamma/2pi of 1H from ``scipy.constants`` (CODATA,
  42.577 MHz/T).  (The free-proton value; shielding is what the shifts describe.)
* FID: an exact sum of damped complex exponentials, line l at offset
  ``f_l = (delta_l - carrier) * nu0 + drift(t)`` Hz, amplitude proportional to
  nuclei x concentration x binomial weight, decay ``exp(-pi * FWHM * t)`` (Lorentzian
  line of that FWHM), sampled at ``t_n = n * dwell``.  A line at +f Hz from the
  carrier sits at ``carrier + f / nu0`` ppm (the usual quadrature convention).
* Phase errors: each line is rotated by ``p0 + p1 * (f_l / SW)`` (zero order, and
  first order across the spectral width, pivot at the carrier), random per file.
* Frequency-domain option: the discrete Fourier transform of the same sampled FID in
  closed form, ``sum_n z^n = (1 - z^N) / (1 - z)``, minus half the first point
  (the usual first-point correction), on the FFT grid; written as R and I pages.
* Concentrations: each file holds the mean concentration over its acquisition
  (exact for first order, Simpson's rule on 9 points for second order); the truth
  time of a file is its acquisition midpoint.
* Noise: complex white Gaussian noise; the SNR is the tallest noise-free real point of
  the non-solvent signals in the first spectrum over the noise sigma of the real part.
* Field drift: ``drift_hz * t / t_end`` plus a small sinusoidal wander (0.3 Hz).

Rate laws (A = ester, P = alcohol = acid formed):
  first order  -d[A]/dt = k [A]     ->  [A] = [A]0 exp(-k t)
  second order -d[A]/dt = k [A]^2   ->  [A] = [A]0 / (1 + k [A]0 t)
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field, replace
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import scipy.constants

#: 1H gyromagnetic ratio / 2 pi in MHz/T (CODATA via scipy.constants)
GAMMA_1H_MHZ_PER_T = scipy.constants.physical_constants["proton gyromag. ratio in MHz/T"][0]

WATER_PPM = 4.78
STANDARD_PPM = 6.75


@dataclass(frozen=True)
class Multiplet:
    """A first-order multiplet: ``lines`` lines J Hz apart, binomial weights."""

    species: str
    shift_ppm: float
    nuclei: int
    lines: int = 1
    j_hz: float = 0.0
    width_hz: float = 0.9


#: the sample; the water line's size is set separately (it is not a species)
SAMPLE = (
    Multiplet("ester", 4.08, 2, 4, 7.1),
    Multiplet("ester", 1.26, 3, 3, 7.1),
    Multiplet("ester", 2.05, 3),
    Multiplet("alcohol", 3.60, 2, 4, 7.0),
    Multiplet("alcohol", 1.17, 3, 3, 7.0),
    Multiplet("acid", 1.93, 3),
    Multiplet("standard", STANDARD_PPM, 3, width_hz=0.8),
)


@dataclass(frozen=True)
class Scenario:
    """Everything that defines one stress series (the truth is derived from it).

    Attributes
    ----------
    nominal_mhz : float
        Magnet size (40 or 60); the observe frequency is gamma/2pi * B0.
    order : int
        1 (first order) or 2 (second order in the ester).
    k : float
        Rate constant (s^-1 for order 1, L mol^-1 s^-1 for order 2).
    ester0_mol_per_l, standard_mol_per_l : float
    initial_ratio : float
        Ester : acid (and : alcohol) at t = 0.
    water_ratio : float
        Water height over the ester quartet's tallest line at t = 0.
    n_spectra, interval_s, scan_duration_s, first_start_s : spectra every ``interval_s``,
        each acquired over ``scan_duration_s``, the first starting ``first_start_s``
        after mixing.
    n_points, sw_hz : FID size and spectral width.
    snr : float
    p0_max_deg, p1_max_deg : phase errors drawn uniformly in +-max per file.
    drift_hz : float
        Field drift across the run.
    water_width_hz : float
    kind : 'fid' or 'spectrum'
    utc_offset_hours : int
        Zone of the ``##LONG DATE`` stamps (the truth is kept in UTC).
    """

    nominal_mhz: float = 60.0
    order: int = 1
    k: float = 4.0e-4
    ester0_mol_per_l: float = 0.20
    standard_mol_per_l: float = 0.030
    initial_ratio: float = 45.0
    water_ratio: float = 45.0
    n_spectra: int = 40
    interval_s: float = 120.0
    scan_duration_s: float = 80.0
    first_start_s: float = 30.0
    n_points: int = 8192
    sw_hz: float = 2000.0
    snr: float = 300.0
    p0_max_deg: float = 60.0
    p1_max_deg: float = 30.0
    drift_hz: float = 3.0
    water_width_hz: float = 2.5
    kind: str = "fid"
    utc_offset_hours: int = 1
    carrier_ppm: float = 5.0
    reaction_start_utc: str = "2026-03-14T08:00:00+00:00"

    @property
    def b0_tesla(self) -> float:
        return self.nominal_mhz / GAMMA_1H_MHZ_PER_T

    @property
    def observe_mhz(self) -> float:
        # a benchtop magnet is not exactly its nominal size: 1.4 T at "60 MHz"
        return GAMMA_1H_MHZ_PER_T * round(self.b0_tesla, 2)


@dataclass(frozen=True)
class Truth:
    """What the files hold, per file (written to ``truth.json``)."""

    scenario: dict
    observe_mhz: float
    files: list
    time_s: list  # acquisition midpoints from mixing
    ester_mol_per_l: list  # mean over each acquisition
    acid_mol_per_l: list
    p0_deg: list
    p1_deg: list
    drift_hz: list
    noise_sigma: float
    extra: dict = field(default_factory=dict)


# ---------------------------------------------------------------- kinetics
def ester_at(t_s: np.ndarray, sc: Scenario) -> np.ndarray:
    """[A](t) from the integrated law of ``sc.order`` (see the module docstring)."""
    a0 = sc.ester0_mol_per_l
    if sc.order == 1:
        return a0 * np.exp(-sc.k * t_s)
    if sc.order == 2:
        return a0 / (1.0 + sc.k * a0 * t_s)
    raise ValueError("order must be 1 or 2")


def mean_ester(start_s: float, duration_s: float, sc: Scenario) -> float:
    """Mean [A] over [start, start + duration]: exact for order 1, Simpson for order 2."""
    if duration_s <= 0:
        return float(ester_at(np.array([start_s]), sc)[0])
    if sc.order == 1:
        k, a0 = sc.k, sc.ester0_mol_per_l
        return float(a0 * math.exp(-k * start_s) * -math.expm1(-k * duration_s) / (k * duration_s))
    t = np.linspace(start_s, start_s + duration_s, 9)
    w = np.array([1, 4, 2, 4, 2, 4, 2, 4, 1], float) / 24.0
    return float(np.sum(w * ester_at(t, sc)))


# ---------------------------------------------------------------- lines
def _course(sc):
    """Scan start and mid times, the last mid time, and the ester and acid concentrations
    averaged over each scan (the acid grows as the ester falls, from acid0)."""
    starts = sc.first_start_s + sc.interval_s * np.arange(sc.n_spectra)
    mids = starts + sc.scan_duration_s / 2.0
    t_end = float(mids[-1]) or 1.0
    ester = np.array([mean_ester(s, sc.scan_duration_s, sc) for s in starts])
    acid0 = sc.ester0_mol_per_l / sc.initial_ratio
    acid = acid0 + (sc.ester0_mol_per_l - ester)
    return starts, mids, t_end, ester, acid0, acid


def _lines(mult: Multiplet, concentration: float) -> list[tuple[float, float, float]]:
    """(offset from the multiplet centre in Hz, amplitude, FWHM Hz) of each line."""
    n = mult.lines
    weights = np.array([math.comb(n - 1, i) for i in range(n)], float) / 2.0 ** (n - 1)
    offsets = (np.arange(n) - (n - 1) / 2.0) * mult.j_hz
    return [(float(o), float(mult.nuclei * concentration * w), mult.width_hz) for o, w in zip(offsets, weights)]


def water_amplitude(sc: Scenario) -> float:
    """Water amplitude giving ``water_ratio`` x the height of the ester quartet's tallest line.

    Height of a Lorentzian of amplitude a and FWHM w is proportional to a / w.
    """
    quartet = SAMPLE[0]
    tallest = max(a / w for _, a, w in _lines(quartet, sc.ester0_mol_per_l))
    return sc.water_ratio * tallest * sc.water_width_hz


def line_list(ester: float, acid: float, sc: Scenario) -> list[tuple[float, float, float, bool]]:
    """(shift ppm before drift, amplitude, FWHM Hz, is_solvent) of every line of one file."""
    conc = {"ester": ester, "alcohol": acid, "acid": acid, "standard": sc.standard_mol_per_l}
    out = []
    for mult in SAMPLE:
        for off_hz, amp, width in _lines(mult, conc[mult.species]):
            out.append((mult.shift_ppm + off_hz / sc.observe_mhz, amp, width, False))
    out.append((WATER_PPM, water_amplitude(sc), sc.water_width_hz, True))
    return out


def _line_arrays(lines, sc: Scenario, drift_hz: float, p0_deg: float, p1_deg: float):
    shift = np.array([x[0] for x in lines])
    freq_hz = (shift - sc.carrier_ppm) * sc.observe_mhz + drift_hz
    amp = np.array([x[1] for x in lines]) * np.exp(1j * np.deg2rad(p0_deg + p1_deg * freq_hz / sc.sw_hz))
    rate = math.pi * np.array([x[2] for x in lines])
    return freq_hz, amp, rate


def fid_values(lines, sc: Scenario, drift_hz: float, p0_deg: float, p1_deg: float) -> np.ndarray:
    """Noise-free FID, shape (n_points,), the exact sum of damped exponentials."""
    freq_hz, amp, rate = _line_arrays(lines, sc, drift_hz, p0_deg, p1_deg)
    t = np.arange(sc.n_points) / sc.sw_hz
    return np.exp(np.outer(t, 2j * np.pi * freq_hz - rate)) @ amp


def frequency_grid_hz(sc: Scenario) -> np.ndarray:
    """Offsets (Hz from the carrier) of the FFT grid, high to low (left to right)."""
    n = sc.n_points
    return (np.arange(n) - n // 2)[::-1] * sc.sw_hz / n


def spectrum_values(lines, sc: Scenario, drift_hz: float, p0_deg: float, p1_deg: float) -> np.ndarray:
    """Noise-free spectrum on :func:`frequency_grid_hz`: the closed-form DFT of the FID.

    With z = exp((2 pi i (f_l - f) - pi w_l) dt): sum_{n<N} z^n = (1 - z^N) / (1 - z);
    the first point (n = 0) is halved, as processing does before an FFT.
    """
    freq_hz, amp, rate = _line_arrays(lines, sc, drift_hz, p0_deg, p1_deg)
    dt = 1.0 / sc.sw_hz
    grid = frequency_grid_hz(sc)
    z = np.exp((2j * np.pi * (freq_hz[None, :] - grid[:, None]) - rate[None, :]) * dt)
    sums = (1.0 - z ** sc.n_points) / (1.0 - z) - 0.5
    return sums @ amp


def _noise_sigma(sc: Scenario, ester0: float, acid0: float) -> float:
    """Noise sigma per FID point (real and imaginary each) giving ``sc.snr``."""
    species = [x for x in line_list(ester0, acid0, sc) if not x[3]]
    spec = spectrum_values(species, sc, 0.0, 0.0, 0.0)
    sigma_spectrum = float(np.max(spec.real)) / sc.snr
    return sigma_spectrum / math.sqrt(sc.n_points)


# ---------------------------------------------------------------- JCAMP-DX writer
def _number(value: float) -> str:
    return f"{value:.10g}"


def _long_date(moment: datetime, offset_hours: int) -> str:
    local = moment.astimezone(timezone(timedelta(hours=offset_hours)))
    sign = "+" if offset_hours >= 0 else "-"
    return local.strftime("%Y/%m/%d %H:%M:%S") + f".{local.microsecond // 100:04d} {sign}{abs(offset_hours):02d}00"


def _affn_page(values: np.ndarray, per_line: int = 8) -> tuple[float, list[str]]:
    """(FACTOR, data lines 'X y1 .. y8') with integers of 9 significant digits, X = point index."""
    peak = float(np.max(np.abs(values))) or 1.0
    factor = peak / 1.0e9
    ints = np.rint(values / factor).astype(np.int64)
    lines = []
    for start in range(0, ints.size, per_line):
        chunk = ints[start:start + per_line]
        lines.append(f"{start} " + " ".join(str(int(v)) for v in chunk))
    return factor, lines


def jcamp_text(title: str, data: np.ndarray, *, kind: str, observe_mhz: float, sw_hz: float,
               carrier_ppm: float, acquired: datetime, offset_hours: int, n_scans: int) -> str:
    """A JCAMP-DX 5.01 NTUPLES file (AFFN) holding an FID or a complex spectrum.

    FID: X in SECONDS (FACTOR = dwell), ``##.SHIFT REFERENCE`` names the ppm of spectrum
    point 1 (carrier + SW/2).  Spectrum: X in HZ from the carrier... written as Hz from
    0 ppm, high to low, with the shift of point 1 in ``##.SHIFT REFERENCE``.
    """
    n = data.size
    f_real, real_lines = _affn_page(data.real)
    f_imag, imag_lines = _affn_page(data.imag)
    if kind == "fid":
        data_type, names, unit = "NMR FID", "TIME, FID/REAL, FID/IMAG", "SECONDS"
        x_step, first_x = 1.0 / sw_hz, 0.0
        point1_ppm = carrier_ppm + sw_hz / 2.0 / observe_mhz
    else:
        data_type, names, unit = "NMR SPECTRUM", "FREQUENCY, SPECTRUM/REAL, SPECTRUM/IMAG", "HZ"
        grid = (np.arange(n) - n // 2)[::-1] * sw_hz / n
        x_step = -sw_hz / n
        first_x = carrier_ppm * observe_mhz + grid[0]
        point1_ppm = first_x / observe_mhz
    last_x = first_x + (n - 1) * x_step
    head = [
        f"##TITLE= {title}", "##JCAMP-DX= 5.01", f"##DATA TYPE= {data_type}", "##DATA CLASS= NTUPLES",
        "##ORIGIN= independent stress generator (tests)", "##OWNER= public domain",
        f"##LONG DATE= {_long_date(acquired, offset_hours)}",
        f"##.OBSERVE FREQUENCY= {_number(observe_mhz)}", "##.OBSERVE NUCLEUS= ^1H",
        f"##.SHIFT REFERENCE= INTERNAL, UNKNOWN, 1, {_number(point1_ppm)}",
        f"##.AVERAGES= {n_scans}",
        f"##NTUPLES= {data_type}", f"##VAR_NAME= {names}", "##SYMBOL= X, R, I",
        "##VAR_TYPE= INDEPENDENT, DEPENDENT, DEPENDENT", "##VAR_FORM= AFFN, AFFN, AFFN",
        f"##VAR_DIM= {n}, {n}, {n}", f"##UNITS= {unit}, ARBITRARY UNITS, ARBITRARY UNITS",
    ]
    if kind == "fid":
        head.append(f"##FACTOR= {_number(x_step)}, {_number(f_real)}, {_number(f_imag)}")
        x_lines = (real_lines, imag_lines)
    else:
        # X written as Hz in units of |step| counted from the first point's Hz value is not
        # allowed by (X++(..)): the X of each line is the abscissa / FACTOR, so use FACTOR = -step
        head.append(f"##FACTOR= {_number(-x_step)}, {_number(f_real)}, {_number(f_imag)}")
        x_lines = tuple(_respell_x(lines, first_x / -x_step) for lines in (real_lines, imag_lines))
    head += [f"##FIRST= {_number(first_x)}, {_number(data.real[0])}, {_number(data.imag[0])}",
             f"##LAST= {_number(last_x)}, {_number(data.real[-1])}, {_number(data.imag[-1])}"]
    body = []
    for number, (symbol, lines) in enumerate(zip("RI", x_lines), start=1):
        body += [f"##PAGE= N={number}", f"##DATA TABLE= (X++({symbol}..{symbol})), XYDATA", *lines]
    return "\n".join(head + body + [f"##END NTUPLES= {data_type}", "##END="]) + "\n"


def _respell_x(lines: list[str], first: float) -> list[str]:
    """Spectrum pages: X = first - index (the axis runs high to low in units of the step)."""
    out = []
    for line in lines:
        index, _, rest = line.partition(" ")
        out.append(f"{first - int(index):.4f} {rest}")
    return out


# ---------------------------------------------------------------- the series
def write_series(folder: str | Path, scenario: Scenario, seed: int) -> Truth:
    """Write ``n_spectra`` files (``fid_0001.jdx`` or ``spectrum_0001.jdx``) and ``truth.json``.

    Returns the :class:`Truth`.  Randomness (phases, noise) comes only from
    ``numpy.random.default_rng(seed)``.
    """
    sc = scenario
    rng = np.random.default_rng(seed)
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    start = datetime.fromisoformat(sc.reaction_start_utc)
    starts, mids, t_end, ester, acid0, acid = _course(sc)
    sigma = _noise_sigma(sc, sc.ester0_mol_per_l, acid0)
    wander = rng.uniform(0, 2 * math.pi)
    files, p0s, p1s, drifts = [], [], [], []
    prefix = "fid" if sc.kind == "fid" else "spectrum"
    for i in range(sc.n_spectra):
        p0 = float(rng.uniform(-sc.p0_max_deg, sc.p0_max_deg))
        p1 = float(rng.uniform(-sc.p1_max_deg, sc.p1_max_deg))
        drift = float(sc.drift_hz * mids[i] / t_end + 0.3 * math.sin(wander + 6.0 * mids[i] / t_end))
        lines = line_list(float(ester[i]), float(acid[i]), sc)
        if sc.kind == "fid":
            data = fid_values(lines, sc, drift, p0, p1)
            data = data + sigma * (rng.standard_normal(data.size) + 1j * rng.standard_normal(data.size))
        else:
            data = spectrum_values(lines, sc, drift, p0, p1)
            s = sigma * math.sqrt(sc.n_points)
            data = data + s * (rng.standard_normal(data.size) + 1j * rng.standard_normal(data.size))
        name = f"{prefix}_{i + 1:04d}.jdx"
        acquired = start + timedelta(seconds=float(starts[i]))
        text = jcamp_text(f"stress series {sc.nominal_mhz:g} MHz, file {i + 1}", data, kind=sc.kind,
                          observe_mhz=sc.observe_mhz, sw_hz=sc.sw_hz, carrier_ppm=sc.carrier_ppm,
                          acquired=acquired, offset_hours=sc.utc_offset_hours, n_scans=16)
        (folder / name).write_text(text, encoding="ascii")
        files.append(name)
        p0s.append(p0)
        p1s.append(p1)
        drifts.append(drift)
    truth = Truth(scenario=asdict(sc), observe_mhz=sc.observe_mhz, files=files, time_s=mids.tolist(),
                  ester_mol_per_l=ester.tolist(), acid_mol_per_l=acid.tolist(), p0_deg=p0s, p1_deg=p1s,
                  drift_hz=drifts, noise_sigma=sigma)
    (folder / "truth.json").write_text(json.dumps(asdict(truth), indent=1), encoding="utf-8")
    return truth


# ---------------------------------------------------------------- configs a user would write
def config_text(folder: str | Path, sc: Scenario, *, baseline_order: int = 2, window_scale: float = 1.0,
                group_quartets: bool = False, method: str = "fit", acetyl_fit: bool = True) -> str:
    """A run config (TOML) as a user would write it from the README for this sample.

    ``method = 'integral'`` measures the quartets and the standard with region integrals
    (the acetyl pair stays a fit unless ``acetyl_fit`` is False).  Windows are the
    multiplet's extent plus 3 Hz (quartets) or 5 Hz (standard) on each side, scaled about
    their centre by ``window_scale``.  Quartet fit windows that would overlap (40 MHz) are
    put in one group; overlapping integral windows are split at their midpoint.
    """
    mhz = sc.observe_mhz
    kind = "fid" if sc.kind == "fid" else "spectrum"

    def window(centre: float, half_hz: float) -> list[float]:
        half = half_hz * window_scale / mhz
        return [centre - half, centre + half]

    ester_q, alcohol_q = window(4.08, 1.5 * 7.1 + 3.0), window(3.60, 1.5 * 7.0 + 3.0)
    if alcohol_q[1] > ester_q[0] and not (group_quartets and method == "fit"):
        if method == "fit":
            group_quartets = True
        else:
            ester_q[0] = alcohol_q[1] = 0.5 * (ester_q[0] + alcohol_q[1])
    lines = [
        "[run]", f'folder = "{Path(folder).as_posix()}"', f'pattern = "{kind}_*.jdx"', 'order = "time"', "",
        "[time]", 'source = "header"', f'reaction_start = "{sc.reaction_start_utc}"',
        f"duration_s = {sc.scan_duration_s}", "",
        "[processing]", 'phase = "auto"', f"phase_exclude_ppm = [[{WATER_PPM + 0.25:.2f}, {WATER_PPM - 0.25:.2f}]]",
        f"line_broadening_hz = {0.3 if kind == 'fid' else 0.0}",
        f"reference = {{ ppm = {STANDARD_PPM}, window_ppm = 0.1 }}", "",
        "[alignment]", f"window_ppm = [{STANDARD_PPM - 0.1:.2f}, {STANDARD_PPM + 0.1:.2f}]", "max_shift_ppm = 0.05", "",
        "[integration]", "noise_region_ppm = [[8.5, 10.0]]", f"fit_baseline_order = {baseline_order}",
        "global_fit = true", "",
    ]

    def signal(name, species, span, nuclei, how, shape, group="", extra=()):
        out = ["[[signals]]", f'name = "{name}"', f'species = "{species}"',
               f"window_ppm = [{span[0]:.4f}, {span[1]:.4f}]", f"nuclei = {nuclei}", f'method = "{how}"']
        if how == "fit":
            out.append(f"lineshape = {shape}")
            if group:
                out.append(f'group = "{group}"')
        return out + list(extra) + [""]

    quartet = '{ multiplicity = "quartet", j_hz = 7.0, width_hz = 1.0 }'
    singlet = "{ width_hz = 1.0 }"
    lines += signal("standard", "standard", window(STANDARD_PPM, 5.0), 3, method, singlet,
                    extra=("standard = true", f"concentration_mol_per_l = {sc.standard_mol_per_l}"))
    q_group = "ch2" if group_quartets else ""
    lines += signal("ester_OCH2", "ester", ester_q, 2, method, quartet, q_group)
    lines += signal("alcohol_CH2", "alcohol", alcohol_q, 2, method, quartet, q_group)
    if acetyl_fit:  # windows centred on their own lines, overlapping: one fit group
        half = 0.06 * mhz + 3.0
        lines += signal("ester_acetyl", "ester", window(2.05, half), 3, "fit", singlet, "acetyl")
        lines += signal("acid_acetyl", "acid", window(1.93, half), 3, "fit", singlet, "acetyl")
    else:  # touching windows split at the midpoint
        lines += signal("ester_acetyl", "ester", [1.99, 2.05 + 0.06 * window_scale], 3, "integral", singlet)
        lines += signal("acid_acetyl", "acid", [1.93 - 0.06 * window_scale, 1.99], 3, "integral", singlet)
    lines += ["[quantify]", 'mode = "standard"', 'reactant = "ester"', 'product = "alcohol"',
              "stoichiometry = { ester = 1, alcohol = 1, acid = 0 }", "",
              "[fit]", f'model = "{"first" if sc.order == 1 else "second"}"', 'species = "ester"', ""]
    return "\n".join(lines)


# ---------------------------------------------------------------- in memory (coverage runs)
def spectrum_records(scenario: Scenario, seed: int):
    """The series as in-memory ``kinetics`` Spectrum records (no files): (records, truth dict).

    Frequency-domain data on the FFT grid (the closed form above), with the scenario's
    phase errors, drift and noise; each record carries its acquisition start and
    duration, as a file read would.  For coverage runs that would be slow through files.
    """
    from kinetics.spectra.spectrum import Spectrum

    sc = replace(scenario, kind="spectrum")
    rng = np.random.default_rng(seed)
    start = datetime.fromisoformat(sc.reaction_start_utc)
    starts, mids, t_end, ester, acid0, acid = _course(sc)
    sigma = _noise_sigma(sc, sc.ester0_mol_per_l, acid0) * math.sqrt(sc.n_points)
    ppm = sc.carrier_ppm + frequency_grid_hz(sc) / sc.observe_mhz
    wander = rng.uniform(0, 2 * math.pi)
    records = []
    for i in range(sc.n_spectra):
        p0 = float(rng.uniform(-sc.p0_max_deg, sc.p0_max_deg))
        p1 = float(rng.uniform(-sc.p1_max_deg, sc.p1_max_deg))
        drift = float(sc.drift_hz * mids[i] / t_end + 0.3 * math.sin(wander + 6.0 * mids[i] / t_end))
        data = spectrum_values(line_list(float(ester[i]), float(acid[i]), sc), sc, drift, p0, p1)
        data = data + sigma * (rng.standard_normal(data.size) + 1j * rng.standard_normal(data.size))
        records.append(Spectrum(ppm=ppm, real=data.real.copy(), imag=data.imag.copy(), observe_mhz=sc.observe_mhz,
                                acquired_utc=start + timedelta(seconds=float(starts[i])),
                                duration_s=sc.scan_duration_s, n_scans=16,
                                source_path=f"spectrum_{i + 1:04d}.jdx"))
    return records, {"time_s": mids.tolist(), "ester_mol_per_l": ester.tolist(), "k": sc.k, "order": sc.order}


def run_config(folder: str | Path, scenario: Scenario, **choices):
    """:func:`config_text` validated into a ``kinetics`` RunConfig (the folder need not exist)."""
    import tomllib

    from kinetics.config import run_config_from_dict

    return run_config_from_dict(tomllib.loads(config_text(folder, scenario, **choices)))


# ---------------------------------------------------------------- one coverage trial
#: the "reasonable choices" a user might make, drawn at random per trial
CHOICES = {"baseline_order": (1, 2, 3), "window_scale": (0.7, 0.85, 1.0, 1.15, 1.3), "group_quartets": (False, True)}


def coverage_trial(seed: int, *, nominal_mhz: float | None = None, n_spectra: int = 16, snr: float = 300.0,
                   order: int = 1, noise_share: float | None = None, **scenario) -> dict:
    """One simulated run with a randomly drawn reasonable config, through ``kinetics.sensitivity``.

    Returns the truth, the config drawn, the statistical and the combined intervals.
    """
    from kinetics import sensitivity as sens

    rng = np.random.default_rng(seed)
    mhz = nominal_mhz if nominal_mhz is not None else float(rng.choice([40.0, 60.0]))
    k = 4.0e-4 if order == 1 else 2.0e-3
    sc = Scenario(nominal_mhz=mhz, n_spectra=n_spectra, interval_s=4800.0 / n_spectra, snr=snr, order=order, k=k,
                  kind="spectrum", **scenario)
    choice = {name: values[int(rng.integers(len(values)))] for name, values in CHOICES.items()}
    records, truth = spectrum_records(sc, seed=int(rng.integers(2**31)))
    config = run_config("unused", sc, **choice)
    spectra, measurements, reference = sens.processed_run(config, records)
    extra = {} if noise_share is None else {"noise_share": noise_share}
    result = sens.assess(config, sens.SpectraQuantifier(spectra, measurements, reference), sens.fitter_for(config),
                         **extra)
    return {"seed": seed, "mhz": mhz, "choice": choice, "k_true": k, "k": result.base.value,
            "stat_ci95": list(result.base.ci95), "combined_ci95": list(result.combined_ci95),
            "quantile": result.base.quantile, "u_sys": result.systematic_raw_sd,
            "family_sd": {f"{c}:{t}": v for (c, t), v in result.family_sd.items()},
            "failed": sum(1 for v in result.variants if v.error), "warnings": list(result.warnings)}
