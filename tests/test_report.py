"""The report folder: self-contained HTML, PDF, tables as CSV equal to the frames, provenance.

Invented inputs whose content the test sets; the checks are about what the files contain
(no external references, the exact table values, escaping, the cautions, the run time).
"""

from __future__ import annotations

import base64
import importlib.metadata
import json
import re
from datetime import datetime, timezone

import numpy as np
import pandas as pd
import pytest

from kinetics import plots, report
from kinetics.jsonio import parameter_dict

RUN_UTC = datetime(2026, 3, 4, 5, 6, 7, tzinfo=timezone.utc)
HOSTILE = '<script>alert("x")</script> & co'


def _sections():
    rng = np.random.default_rng(7)
    time_s = np.linspace(0.0, 1800.0, 12)
    conc = 0.5 * np.exp(-1.2e-3 * time_s) + rng.normal(0, 0.004, time_s.size)
    series = pd.DataFrame({"time_s": time_s, "A_concentration": conc,
                           "A_flags": ["" if i % 5 else "left window" for i in range(12)]})
    params = {"k": parameter_dict(1.2e-3, 2e-5, (1.16e-3, 1.24e-3), "1/s"),
              "c0": parameter_dict(0.5, 0.003, None, "mol/L")}
    comparison = pd.DataFrame({"model": ["first", "second"], "aicc": [-120.5, -98.1],
                               "delta_aicc": [0.0, 22.4], "weight": [0.99999, 1.4e-5]}).set_index("model")
    figure = plots.concentration_figure(time_s, {"A": conc})
    ppm = np.linspace(6, 0, 400)
    spectra = plots.stacked_spectra_figure([(ppm, np.exp(-((ppm - 2) / 0.05) ** 2))], windows={"A": (1.8, 2.2)})
    return (
        report.Section("Spectra through time", (report.FigureBlock("Stacked spectra", spectra, "windows shaded"),)),
        report.Section("Concentrations", (
            report.FigureBlock("Course of A", figure, caption=HOSTILE),
            report.TableBlock("Series table", series, name="series"),
        ), intro="Measured points and the first-order fit."),
        report.Section("Rate law", (
            report.TableBlock("Model comparison", comparison, name="model_comparison"),
            report.TableBlock("Fitted parameters", report.parameters_frame(params, run="25 C"), name="parameters"),
            report.TextBlock(HOSTILE, ("first paragraph", "second paragraph")),
        )),
    ), series, comparison


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    sections, series, comparison = _sections()
    out = tmp_path_factory.mktemp("report")
    config = '[run]\nname = "ester <hydrolysis> & co"\n'
    provenance = report.Provenance(config_text=config, run_utc=RUN_UTC,
                                   input_files=[("spectra/0001.dx", "ab" * 32), ("spectra/0002.dx", "cd" * 32)],
                                   extra={"command": "kinetics run x.toml"})
    files = report.write_report(out, *sections, title="Test report", provenance=provenance,
                                summary={"k at 25 °C": "1.20e-3 1/s"})
    return files, series, comparison, config


def test_files_exist_and_nothing_half_written(written):
    files, *_ = written
    assert files.html.is_file() and files.pdf.is_file()
    assert files.pdf.read_bytes()[:5] == b"%PDF-"
    assert set(files.csv) == {"series", "model_comparison", "parameters", "provenance_inputs",
                              "provenance_packages"}
    assert len(files.figures) == 2
    leftovers = [p for p in files.folder.rglob("*") if p.name.endswith(".tmp")]
    assert leftovers == []


def test_html_is_self_contained(written):
    files, *_ = written
    page = files.html.read_text(encoding="utf-8")
    # Base64 payloads may spell "http" by chance (~1 % for a page this size): look at the
    # markup and text around them.
    markup = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "data:", page)
    assert "http" not in markup and "//" not in re.sub(r"<pre>.*?</pre>", "", markup, flags=re.S)
    assert "<script" not in page  # only escaped user text: &lt;script&gt;
    assert "<link" not in page and "@import" not in page and "url(" not in page
    sources = re.findall(r'<img src="([^"]+)"', page)
    assert len(sources) == 2
    for source in sources:
        assert source.startswith("data:image/png;base64,")
        png = base64.b64decode(source.split(",", 1)[1])
        assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 5000
    refs = re.findall(r'href="([^"]+)"', page)
    assert refs and all(ref.startswith("#") for ref in refs)  # only in-page anchors


def test_user_text_is_escaped(written):
    files, *_ = written
    page = files.html.read_text(encoding="utf-8")
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt; &amp; co" in page
    assert "ester &lt;hydrolysis&gt; &amp; co" in page


def test_tables_csv_match_frames(written):
    files, series, comparison, _ = written
    pd.testing.assert_frame_equal(pd.read_csv(files.csv["series"], keep_default_na=False), series,
                                  check_exact=True)
    back = pd.read_csv(files.csv["model_comparison"])
    pd.testing.assert_frame_equal(back, comparison.reset_index(), check_exact=True)
    params = pd.read_csv(files.csv["parameters"])
    assert list(params.columns) == ["run", "parameter", "value", "stderr", "ci95_low", "ci95_high", "unit"]
    assert params.loc[0, "value"] == 1.2e-3 and params.loc[0, "ci95_high"] == 1.24e-3
    assert np.isnan(params.loc[1, "ci95_low"])  # no interval given -> empty, not invented
    if report._parquet_available():
        pd.testing.assert_frame_equal(pd.read_parquet(files.parquet["series"]), series)
    else:
        assert files.parquet == {} and not list(files.folder.rglob("*.parquet"))


def test_html_tables_show_the_values(written):
    files, *_ = written
    page = files.html.read_text(encoding="utf-8")
    assert page.count("<table>") == 5  # three tables + inputs + packages
    assert "<td>22.4</td>" in page  # ΔAICc to 0.1
    # k = 1.2e-3 ± 2e-5 rounded together (GUM 7.2.6): two digits of the uncertainty (leading 2)
    assert "<td>0.001200 ± 0.000020</td>" in page
    assert '<th scope="col">ΔAICc</th>' in page and "delta_aicc" not in page.split("<main>")[1].split("tables/")[0]
    assert "left window" in page


def test_provenance(written):
    files, _, _, config = written
    page = files.html.read_text(encoding="utf-8")
    assert "2026-03-04T05:06:07Z" in page
    assert "ab" * 32 in page and "spectra/0002.dx" in page
    assert importlib.metadata.version("numpy") in page
    record = json.loads((files.folder / "provenance.json").read_text())
    assert record["run_utc"] == "2026-03-04T05:06:07Z"
    assert record["config_text"] == config
    assert record["packages"]["pandas"] == importlib.metadata.version("pandas")
    assert (files.folder / "config.toml").read_text() == config
    inputs = pd.read_csv(files.csv["provenance_inputs"])
    assert list(inputs["sha256"]) == ["ab" * 32, "cd" * 32]


def test_safety_cautions_present(written):
    files, *_ = written
    page = files.html.read_text(encoding="utf-8")
    for caution in report.SAFETY_CAUTIONS:
        assert report._e(caution) in page
    for phrase in ("run away", "burst", "pacemakers", "supervision", "calorimetric"):
        assert phrase in page


def test_headings_and_pdf_pages(written):
    files, *_ = written
    page = files.html.read_text(encoding="utf-8")
    for heading in ("Spectra through time", "Concentrations", "Rate law", "Model comparison",
                    report.SAFETY_HEADING, report.PROVENANCE_HEADING):
        assert f">{heading}</h" in page
    from pypdf import PdfReader

    reader = PdfReader(files.pdf)
    text = " ".join(p.extract_text() for p in reader.pages)
    for heading in ("Test report", "Key results", report.SAFETY_HEADING, "Model comparison", "Figure 1.",
                    "Table 1.", report.PROVENANCE_HEADING):
        assert heading in text, heading
    assert len(reader.pages) <= 4  # blocks flow together; no page per block


def test_parameters_frame_reads_to_dict_shape():
    frame = report.parameters_frame({"k": {"value": 2.0, "stderr": 0.1, "ci95": [1.8, 2.2], "unit": "1/s"}})
    assert frame.to_dict(orient="records") == [
        {"parameter": "k", "value": 2.0, "stderr": 0.1, "ci95_low": 1.8, "ci95_high": 2.2, "unit": "1/s"}]


def test_rewrite_same_folder(tmp_path):
    sections, *_ = _sections()
    first = report.write_report(tmp_path, *sections)
    second = report.write_report(tmp_path, *sections[:1])
    assert first.html == second.html and second.csv.keys() == {"provenance_inputs", "provenance_packages"}
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", second.run_utc)


def test_sections_from_real_fit_and_temperature_results(tmp_path):
    # Seeded first-order data (truth set here) through the project's fitter, and four
    # invented runs through the Arrhenius/Eyring analysis; the report tables must carry
    # exactly the numbers those results report.
    from kinetics.rates.compare import compare_models
    from kinetics.rates.fit import fit_law
    from kinetics.rates.table import from_arrays
    from kinetics.temperature import analyse_temperatures

    rng = np.random.default_rng(5)
    time_s = np.linspace(0.0, 3600.0, 30)
    conc = 0.5 * np.exp(-1e-3 * time_s) + rng.normal(0.0, 0.004, time_s.size)
    data = from_arrays(time_s, conc, sigma=np.full(time_s.size, 0.004), columns=["ester"])
    fit = fit_law(data, "first")
    t_k = np.array([288.15, 298.15, 308.15, 318.15])
    k = 1e10 * np.exp(-75_000 / (8.314462618 * t_k)) * np.exp(rng.normal(0, 0.03, 4))
    temperature = analyse_temperatures(t_k, k, 0.04 * k, labels=["15 C", "25 C", "35 C", "45 C"])

    comparison = compare_models(data)
    files = report.write_report(tmp_path, report.fit_section(fit, comparison=comparison),
                                report.temperature_section(temperature))
    params = pd.read_csv(files.csv["fit_parameters"]).set_index("parameter")
    for name, entry in fit.to_dict()["params"].items():
        assert params.loc[name, "value"] == entry["value"]
        assert [params.loc[name, "ci95_low"], params.loc[name, "ci95_high"]] == entry["ci95"]
    ranked = pd.read_csv(files.csv["fit_model_comparison"])
    assert list(ranked["model"]) == list(comparison.table["model"])
    np.testing.assert_array_equal(ranked["aicc"], comparison.table["aicc"])
    activation = pd.read_csv(files.csv["temperature_parameters"]).set_index("parameter")
    assert activation.loc["ea_kj_per_mol", "value"] == temperature.to_dict()["ea_kj_per_mol"]["value"]
    assert len(pd.read_csv(files.csv["temperature_runs"])) == 4
    page = files.html.read_text(encoding="utf-8")
    assert page.count('<img src="data:image/png;base64,') == 3
    for heading in ("Arrhenius plot", "Eyring plot", "Rate laws compared", "Fitted parameters"):
        assert f">{heading}</h3>" in page


def test_accessibility_basics(written):
    # WCAG 2 basics (from memory): a page language, a text alternative for every image,
    # header cells that say what they head.
    files, *_ = written
    page = files.html.read_text(encoding="utf-8")
    assert '<html lang="en">' in page
    alts = re.findall(r'<img [^>]*alt="([^"]*)"', page)
    assert len(alts) == page.count("<img ") == 2 and all(alt.strip() for alt in alts)
    assert "Course of A. &lt;script&gt;" in page  # the caption is part of the alt text, escaped
    heads = re.findall(r"<thead>(.*?)</thead>", page)
    assert len(heads) == page.count("<table>")
    assert all(re.fullmatch(r'<tr>(<th scope="col">[^<]*</th>)+</tr>', head) for head in heads)


def test_dollar_signs_in_user_text_do_not_break_the_pdf(tmp_path):
    # Matplotlib would read "$...$" in headings, table cells and config as mathtext and
    # raise on "$\\frac$"; the PDF text pages print user text as written.
    text = r"cost $\frac$ and $5"
    section = report.Section(text, (
        report.FigureBlock(text, plots.concentration_figure([0, 1, 2], {text: [1.0, 0.5, 0.2]}), text),
        report.TableBlock(text, pd.DataFrame({text: [1.0, 2.0]})),
        report.TextBlock(text, (text,)),
    ))
    files = report.write_report(tmp_path, section, title=text, summary={text: text},
                                provenance=report.Provenance(config_text=text))
    from pypdf import PdfReader

    shown = " ".join(p.extract_text() for p in PdfReader(files.pdf).pages)
    assert shown.count(r"$\frac$") >= 4  # title, summary, headings and text, printed as written
    assert report._e(text) in files.html.read_text(encoding="utf-8")


def test_fit_section_draws_every_species_and_says_how_many_spectra(tmp_path):
    # simulated first order A -> P (truth set here): reactant fitted, product and mass balance drawn too
    from kinetics.rates.fit import fit_arrays

    time_s = np.linspace(0.0, 3600.0, 20)
    a = 0.4 * np.exp(-8e-4 * time_s)
    fit = fit_arrays(time_s, a + np.random.default_rng(2).normal(0, 0.002, time_s.size), "first")
    section = report.fit_section(fit, species={"P": (0.4 - a, np.full(20, 0.002)), "mass balance": np.full(20, 0.4)})
    main = section.blocks[0].figure.axes[0]
    assert len(main.containers) == 3  # reactant, product, mass balance, each with its own marker
    assert len({c.lines[0].get_marker() for c in main.containers}) == 3
    assert "Half-life" in section.blocks[0].caption and " min" in section.blocks[0].caption
    text = [b for b in section.blocks if isinstance(b, report.TextBlock)][0].paragraphs[0]
    assert "<arrays>" not in text  # issue 12: "data <arrays>" in fit reports
    ppm = np.linspace(5.0, 0.0, 200)
    picked = report.spectra_section([(ppm, np.exp(-((ppm - 2) / 0.05) ** 2))] * 12, total=36)
    assert picked.blocks[0].caption.startswith("12 of 36 spectra")
    alone = report.spectra_section([(ppm, np.exp(-((ppm - 2) / 0.05) ** 2))] * 12)
    assert alone.blocks[0].caption.startswith("12 spectra,")  # never "12 of 12"


def test_temperature_section_caption_and_headings():
    from kinetics.temperature import analyse_temperatures

    t_k = np.array([298.15, 308.15, 318.15, 328.15])
    k = 1.0e11 * np.exp(-80_000.0 / (8.314462618 * t_k))  # Ea = 80 kJ/mol set here
    k *= np.exp(np.random.default_rng(4).normal(0.0, 0.02, k.size))  # scatter as runs have
    section = report.temperature_section(analyse_temperatures(t_k, k, 0.03 * k))
    table = [b for b in section.blocks if isinstance(b, report.TableBlock) and b.name.endswith("parameters")][0]
    assert table.caption.startswith("ΔG‡ at 298.15 K. ") and "K;" not in table.caption  # issue 12: "dG‡ at 298.15 K;"
    shown = report._display_frame(table)
    assert list(shown["parameter"])[:1] == ["Ea"] and "ea_kj_per_mol" in set(table.frame["parameter"])
    runs = [b for b in section.blocks if isinstance(b, report.TableBlock) and b.name.endswith("runs")][0]
    assert "T / K" in report._display_frame(runs).columns
