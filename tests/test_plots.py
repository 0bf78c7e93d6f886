"""Figures: labelled axes with units, data drawn where the inputs say, greyscale-safe styles.

The checks are analytic: the plotted points must be exactly the transforms the axes name
(ln k against 1000/T for Arrhenius, ln(k/T) for Eyring, observed minus model for
residuals), so a figure that draws the wrong quantity fails.
"""

from __future__ import annotations

import re

import matplotlib.pyplot as plt  # only to check that the library leaves pyplot alone
import numpy as np
import pytest
from matplotlib.figure import Figure

from kinetics import plots

_UNIT_LABEL = re.compile(r"\S.* / \S.*")  # "quantity / unit", the layout every axis follows


def _check_labelled(figure: Figure) -> None:
    axes = list(figure.axes)
    for ax in figure.axes:
        axes.extend(ax.child_axes)
    assert axes
    for ax in axes:
        for label in (ax.get_xlabel(), ax.get_ylabel()):
            if label:
                assert _UNIT_LABEL.fullmatch(label), label
    for ax in figure.axes:
        assert ax.get_ylabel(), "every main panel names its quantity and unit"
    assert any(ax.get_xlabel() for ax in figure.axes)


def _line_spectrum(ppm, centres, width_ppm=0.01, heights=None):
    heights = np.ones(len(centres)) if heights is None else heights
    return sum(h / (1 + ((ppm - c) / width_ppm) ** 2) for c, h in zip(centres, heights))


def test_styles_differ_without_colour():
    pairs = {(str(s.linestyle), s.marker) for s in plots.SERIES_STYLES}
    assert len(pairs) == len(plots.SERIES_STYLES)
    assert len({s.linestyle if isinstance(s.linestyle, str) else str(s.linestyle)
                for s in plots.SERIES_STYLES}) == len(plots.SERIES_STYLES)
    assert plots.series_style(len(plots.SERIES_STYLES)) == plots.series_style(0)
    # In greyscale the first three series also differ in tone: relative luminance
    # 0.2126 R + 0.7152 G + 0.0722 B of the sRGB values (ITU-R BT.709 weights, from memory;
    # gamma ignored, which keeps the order).
    from matplotlib.colors import to_rgb

    grey = sorted(float(np.dot([0.2126, 0.7152, 0.0722], to_rgb(s.colour))) for s in plots.SERIES_STYLES[:3])
    assert min(np.diff(grey)) > 0.15, grey


def test_user_text_with_dollar_signs_is_drawn_as_written():
    # Matplotlib reads "$...$" as mathtext and raises on what it cannot parse; species,
    # window and run names come from users, so they must be drawn literally.
    name = r"ester $\frac$ $5"
    ppm = np.linspace(5.0, 0.0, 300)
    figures = [
        plots.stacked_spectra_figure([(ppm, _line_spectrum(ppm, [2.0]))], windows={name: (1.8, 2.2)}, title=name),
        plots.concentration_figure([0, 60, 120], {name: [1.0, 0.6, 0.3]}, curve_time_s=[0, 60, 120],
                                   curve={name: [1.0, 0.6, 0.3]}, concentration_unit="$x"),
        plots.arrhenius_figure(*_temperature_data(), labels=[name] * 4, annotation=name),
    ]
    for figure in figures:
        assert plots.png_bytes(figure)[:8] == b"\x89PNG\r\n\x1a\n"  # drawing raised nothing
    texts = [t.get_text() for t in figures[0].axes[0].texts]
    assert any(t.replace("\\$", "$") == name for t in texts)


def test_stacked_spectra_axis_reversed_and_windows_shaded():
    ppm = np.linspace(8.0, -0.5, 3000)
    spectra = [(ppm, _line_spectrum(ppm, [1.2, 4.1], heights=[1 - f, f])) for f in np.linspace(0, 1, 30)]
    windows = {"ester CH3": (1.1, 1.3), "product CH2": (4.0, 4.2)}
    before = len(plt.get_fignums())
    figure = plots.stacked_spectra_figure(spectra, time_s=np.arange(30) * 60.0, windows=windows,
                                          max_traces=8)
    assert len(plt.get_fignums()) == before  # nothing registered with pyplot
    assert isinstance(figure, Figure)
    _check_labelled(figure)
    ax = figure.axes[0]
    assert ax.get_xlabel() == "chemical shift / ppm"
    assert ax.xaxis_inverted()
    assert ax.get_xlim() == pytest.approx((8.0, -0.5))
    spans = sorted(patch.get_x() for patch in ax.patches)
    assert spans == pytest.approx([1.1, 4.0])
    assert sorted(patch.get_width() for patch in ax.patches) == pytest.approx([0.2, 0.2])
    assert len(ax.lines) == 8  # first and last included, evenly thinned
    hatches = {patch.get_hatch() or "" for patch in ax.patches}
    assert len(hatches) == 2  # the windows differ by hatch, not colour alone


def test_stacked_spectra_accepts_records():
    from kinetics.spectra.spectrum import Spectrum

    ppm = np.linspace(5.0, 0.0, 500)
    records = [Spectrum(ppm=ppm, real=_line_spectrum(ppm, [2.0]) * s, observe_mhz=60.0) for s in (1, 2)]
    figure = plots.stacked_spectra_figure(records)
    assert len(figure.axes[0].lines) == 2


def test_concentration_residuals_are_observed_minus_model():
    time_s = np.linspace(0.0, 3000.0, 25)
    k = 1e-3
    truth = np.exp(-k * time_s)
    observed = truth + 0.01 * np.sin(time_s / 300.0)  # known offsets, so residuals are known
    curve_t = np.linspace(0.0, 3000.0, 301)
    curve = np.exp(-k * curve_t)
    figure = plots.concentration_figure(
        time_s, {"A": observed, "P": 1 - observed, "S": np.full(25, 0.5)},
        sigma={"A": np.full(25, 0.01)}, curve_time_s=curve_t,
        curve={"A": curve, "P": 1 - curve}, band={"A": (curve - 0.02, curve + 0.02)},
        fitted={"A": truth})
    _check_labelled(figure)
    main, residual = figure.axes
    assert main.get_ylabel() == "concentration / mol L⁻¹"
    assert residual.get_xlabel() == "time / min"  # 3000 s shown in minutes
    assert residual.get_ylabel() == "residual / mol L⁻¹"
    points_a = residual.containers[0].lines[0]
    np.testing.assert_allclose(points_a.get_xdata(), time_s / 60.0)
    np.testing.assert_allclose(points_a.get_ydata(), observed - truth, atol=1e-12)
    points_p = residual.containers[1].lines[0]  # residual of P interpolated from its curve
    np.testing.assert_allclose(points_p.get_ydata(), (1 - observed) - np.interp(time_s, curve_t, 1 - curve))
    fits = [line for line in main.lines if line.get_label().endswith(" fit")]
    assert len(fits) == 2
    assert fits[0].get_linestyle() != fits[1].get_linestyle()
    markers = [c.lines[0].get_marker() for c in main.containers]
    assert len(set(markers)) == 3  # three species, three markers: readable in greyscale
    assert len(main.collections) >= 1  # the 95 % band


def test_concentration_without_fit_has_one_panel():
    figure = plots.concentration_figure([0, 10, 20], {"A": [1.0, 0.8, 0.6]}, concentration_unit="fraction")
    assert len(figure.axes) == 1
    assert figure.axes[0].get_xlabel() == "time / s"
    _check_labelled(figure)


def _temperature_data():
    # Invented study with a known Ea: k = A exp(-Ea/RT); the plot must show exactly ln k.
    temperature_kelvin = np.array([298.15, 308.15, 318.15, 328.15])
    k = 1.0e11 * np.exp(-80_000.0 / (8.314462618 * temperature_kelvin))
    return temperature_kelvin, k, 0.04 * k


def test_arrhenius_points_band_and_error_bars():
    t_k, k, k_se = _temperature_data()
    line_t = np.linspace(295.0, 330.0, 40)
    ln_k_line = np.log(1.0e11) - 80_000.0 / (8.314462618 * line_t)
    figure = plots.arrhenius_figure(t_k, k, k_se, line={"temperature_kelvin": line_t, "value": ln_k_line,
                                                        "low": ln_k_line - 0.1, "high": ln_k_line + 0.1},
                                    annotation="Ea = 80 kJ/mol", labels=["a", "b", "c", "d"])
    _check_labelled(figure)
    ax = figure.axes[0]
    assert ax.get_xlabel() == "1000/T / K⁻¹"
    assert ax.get_ylabel() == "ln(k / s⁻¹)"
    points = ax.containers[0].lines[0]
    np.testing.assert_allclose(points.get_xdata(), 1000.0 / t_k)
    np.testing.assert_allclose(points.get_ydata(), np.log(k))
    segments = ax.containers[0].lines[2][0].get_segments()
    half_lengths = [0.5 * (seg[1][1] - seg[0][1]) for seg in segments]
    np.testing.assert_allclose(half_lengths, k_se / k)  # sigma(ln k) = sigma(k)/k
    assert len(ax.collections) >= 2  # band + error bars
    assert ax.child_axes[0].get_xlabel() == "temperature / °C"


def test_eyring_plots_ln_k_over_t():
    t_k, k, k_se = _temperature_data()
    figure = plots.eyring_figure(t_k, k, k_se)
    _check_labelled(figure)
    ax = figure.axes[0]
    assert ax.get_ylabel() == "ln((k/T) / s⁻¹ K⁻¹)"
    np.testing.assert_allclose(ax.containers[0].lines[0].get_ydata(), np.log(k / t_k))


def test_png_output(tmp_path):
    t_k, k, k_se = _temperature_data()
    figure = plots.arrhenius_figure(t_k, k, k_se)
    data = plots.png_bytes(figure)
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    assert b"http" not in data  # no software banner with a URL inside the image
    path = plots.save_png(figure, tmp_path / "sub" / "arrhenius.png")
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert [p.name for p in path.parent.iterdir()] == ["arrhenius.png"]  # no temporary left


# ---------------------------------------------------------------- shared figures for report, study, live view
def _study():
    """Simulated first-order runs at four temperatures (the test sets Ea = 80 kJ/mol)."""
    from kinetics.temperature import KineticRun, analyse_temperatures, global_fit

    rng = np.random.default_rng(5)
    t_k, k, _ = _temperature_data()
    runs = []
    for temperature, rate in zip(t_k, k):
        time_s = np.linspace(0.0, 3.0 / rate, 25)
        conc = 0.4 * np.exp(-rate * time_s) + rng.normal(0.0, 0.002, time_s.size)
        runs.append(KineticRun(f"{temperature - 273.15:g} °C", float(temperature), time_s, conc,
                               np.full(time_s.size, 0.002)))
    result = global_fit(runs, "first", profile=False)
    return runs, result.two_step or analyse_temperatures(t_k, k, 0.04 * k), result


def test_arrhenius_and_eyring_from_results_with_the_global_line():
    runs, two_step, global_result = _study()
    figure = plots.arrhenius_figure(two_step, global_result=global_result)
    _check_labelled(figure)
    ax = figure.axes[0]
    np.testing.assert_allclose(ax.containers[0].lines[0].get_ydata(), np.log(two_step.k))
    dashed = [line for line in ax.lines if line.get_label() == "global fit"]
    assert len(dashed) == 1 and dashed[0].get_linestyle() == "--"
    # the dashed line is ln k(T) of the global fit at the plotted temperatures
    x = np.asarray(dashed[0].get_xdata())
    np.testing.assert_allclose(dashed[0].get_ydata(), np.log(global_result.k_at(1000.0 / x)), rtol=1e-10)
    box = [t.get_text() for t in ax.texts if t.get_text().startswith("Ea = ")]
    assert box and "±" in box[0] and "kJ mol⁻¹" in box[0]
    eyring = plots.eyring_figure(two_step, global_result=global_result)
    text = [t.get_text() for t in eyring.axes[0].texts if "ΔS‡" in t.get_text()][0]
    assert "± 0 " not in text + " "  # the defect of issue 12: "dS‡ = -119 ± 0"


def test_global_fit_figure_panels_and_residuals():
    runs, _, global_result = _study()
    figure = plots.global_fit_figure(runs, global_result)
    labels = [label for ax in figure.axes for label in (ax.get_xlabel(), ax.get_ylabel()) if label]
    assert all(_UNIT_LABEL.fullmatch(label) for label in labels), labels
    assert figure.axes[0].get_ylabel() and figure.axes[1].get_ylabel()  # the shared y axes, named once
    assert len(figure.axes) == 2 * len(runs)  # a course and a residual panel per run
    from kinetics.temperature import resolve_model

    model = resolve_model("first")
    for i, run in enumerate(runs):
        ax_res = figure.axes[2 * i + 1]
        scale = {"s": 1.0, "min": 60.0, "h": 3600.0}[ax_res.get_xlabel().split(" / ")[1]]
        k = float(global_result.k_at(run.temperature_kelvin))
        expected = (run.concentration_mol_per_l - model.function(run.time_s, k, **global_result.nuisance[i])) * 1e3
        points = ax_res.containers[0].lines[0]
        np.testing.assert_allclose(points.get_xdata(), run.time_s / scale)
        np.testing.assert_allclose(points.get_ydata(), expected, rtol=1e-9, atol=1e-12)


def test_print_sizes_and_vector_output_without_type3_fonts():
    t_k, k, k_se = _temperature_data()
    single = plots.arrhenius_figure(t_k, k, k_se)
    double = plots.concentration_figure([0, 60, 120], {"A": [1.0, 0.6, 0.3]})
    assert single.get_size_inches()[0] * 2.54 == pytest.approx(8.5)
    assert double.get_size_inches()[0] * 2.54 == pytest.approx(17.5)
    pdf = plots.pdf_bytes(single)
    assert pdf.startswith(b"%PDF") and b"/Type3" not in pdf and b"/FontFile2" in pdf  # TrueType, embedded
    assert plots.svg_bytes(single).lstrip().startswith(b"<?xml")
    assert matplotlib_rc_unchanged()


def matplotlib_rc_unchanged() -> bool:
    import matplotlib

    return matplotlib.rcParams["pdf.fonttype"] == matplotlib.rcParamsDefault["pdf.fonttype"]


def test_live_figure_from_a_series_table():
    import pandas as pd

    time_s = np.linspace(0.0, 1800.0, 10)
    table = pd.DataFrame({"time_s": time_s, "ester": np.exp(-1e-3 * time_s), "ester_stderr": np.full(10, 0.01)})
    curve_t = time_s  # the curve at the measured times: residuals are exactly zero
    figure = plots.live_figure(table, ["ester", "absent"], {"time_s": curve_t, "ester": np.exp(-1e-3 * curve_t)})
    _check_labelled(figure)
    main, residual = figure.axes
    assert residual.get_xlabel() == "time / min"  # raw seconds no more (issue 12)
    np.testing.assert_allclose(residual.containers[0].lines[0].get_ydata(), 0.0, atol=1e-12)
    assert main.get_legend() is not None
    empty = plots.live_figure(table.iloc[:0], ["ester"])
    assert plots.png_bytes(empty).startswith(b"\x89PNG")


def test_palette_stays_distinct_for_colour_blind_readers():
    # Colour-vision deficiency simulated with the Machado, Oliveira & Fernandes (2009)
    # matrices for severity 1.0 (values from memory), applied in linear sRGB; distances are
    # CIE 1976 ΔE*ab (D65).  ~10 is "clearly different" at a glance (common practice); the
    # palette keeps every pair above 15 under normal, deutan, protan and tritan vision.
    from matplotlib.colors import to_rgb

    vision = {
        "normal": np.eye(3),
        "deuteranopia": [[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413],
                         [-0.011820, 0.042940, 0.968881]],
        "protanopia": [[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216],
                       [-0.003882, -0.048116, 1.051998]],
        "tritanopia": [[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602],
                       [0.004733, 0.691367, 0.303900]],
    }

    def linear(c):
        c = np.asarray(c)
        return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)

    def lab(rgb_linear):  # sRGB -> XYZ (D65) -> CIELAB
        xyz = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]]) @ rgb_linear
        t = xyz / np.array([0.95047, 1.0, 1.08883])
        f = np.where(t > 0.008856, np.cbrt(t), 7.787 * t + 16 / 116)
        return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])

    colours = [to_rgb(s.colour) for s in plots.SERIES_STYLES]
    for name, matrix in vision.items():
        points = [lab(np.clip(np.asarray(matrix) @ linear(c), 0, 1)) for c in colours]
        closest = min(np.linalg.norm(points[i] - points[j])
                      for i in range(len(points)) for j in range(i + 1, len(points)))
        assert closest > 15, (name, closest)
