"""The bundled demo: data regenerate bit for bit, configs match their generator, and the
README's first command, typed in a fresh copy of the repository, does the whole job.

The demo's data are invented (kinetics.simulate), so the checks of its results are
*self-consistency* checks: the recovered rate constants and activation energy must lie
within their own 95 % intervals of the values the generator used.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from kinetics import demo

ROOT = Path(__file__).resolve().parent.parent


def _digests(folder: Path) -> dict[str, str]:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file() and p.name != "README.md"}


def test_demo_series_regenerates_bit_for_bit(tmp_path):
    demo.make_demo_data(tmp_path / "demo_series")
    assert _digests(tmp_path / "demo_series") == _digests(ROOT / "demo_series")


def test_demo_series_is_modest_in_size():
    # the limit: under 10 MB in the repository
    size = sum(p.stat().st_size for p in (ROOT / "demo_series").rglob("*") if p.is_file())
    assert size < 10e6


def test_example_configs_are_what_the_generator_writes():
    configs = ROOT / "configs"
    assert (configs / "demo_run.toml").read_text() == demo.run_config_text("../demo_series/run_25C", 25)
    assert (configs / "demo_mechanism.toml").read_text() == demo.mechanism_config_text("../demo_series/run_45C")
    assert (configs / "demo_study.toml").read_text() == demo.study_config_over_runs_text(
        "demo_run.toml", "../demo_series")


def test_generator_rate_constants_follow_its_arrhenius_law():
    # k(T) = k_ref exp(-(Ea/R)(1/T - 1/T_ref)); at T_ref it is k_ref (identity)
    assert demo.k_true(25.0) == pytest.approx(demo.K_REF_PER_S)
    ratio = demo.k_true(35.0) / demo.k_true(25.0)
    # Ea = R ln(k2/k1) / (1/T1 - 1/T2) (Arrhenius, two-point form)
    r = 8.314462618
    ea = r * __import__("math").log(ratio) / (1 / 298.15 - 1 / 308.15) / 1e3
    assert ea == pytest.approx(demo.EA_KJ_PER_MOL, rel=1e-9)


def _readme_first_command() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```\n(.*?)\n```", text, flags=re.S)
    commands = [b.strip() for b in blocks if "kinetics demo" in b]
    assert commands, "the README must show the command that runs the demo"
    return commands[0]


def _copy_of_repository(target: Path) -> Path:
    # a fresh clone holds the tracked files; copying the tree without build products and
    # virtual environments gives the same thing in a development checkout
    ignore = shutil.ignore_patterns(".git", ".venv", ".ci-venv", "*.egg-info", "__pycache__", ".pytest_cache",
                                    ".hypothesis", "build", "dist", ".notes", "kinetics-demo-output", "demo-output")
    shutil.copytree(ROOT, target, ignore=ignore)
    return target


@pytest.fixture(scope="module")
def readme_demo(tmp_path_factory):
    """Run the README's first command, as printed, in a fresh copy of the repository."""
    if shutil.which("bash") is None:
        pytest.skip("bash is needed to run the README command as printed")
    work = _copy_of_repository(tmp_path_factory.mktemp("fresh") / "kinetics")
    command = _readme_first_command()
    env = {k: v for k, v in os.environ.items() if k not in ("VIRTUAL_ENV", "PYTHONPATH")}
    # the interpreter running the tests stands for the newcomer's python3
    env["PATH"] = f"{Path(sys.executable).parent}{os.pathsep}{env.get('PATH', '')}"
    done = subprocess.run(["bash", "-c", command.replace("python3 -m venv", f"{sys.executable} -m venv")],
                          cwd=work, env=env, capture_output=True, text=True, timeout=1500)
    assert done.returncode == 0, f"README command failed:\n{done.stdout[-3000:]}\n{done.stderr[-3000:]}"
    out = work / command.split("--out", 1)[1].split()[0]
    return work, out, done.stdout


def test_readme_first_command_does_the_whole_job(readme_demo):
    _, out, stdout = readme_demo
    assert (out / "report" / "report.html").stat().st_size > 50_000
    assert (out / "report" / "report.pdf").read_bytes().startswith(b"%PDF")
    assert (out / "study" / "study.json").exists()
    for run in demo.demo_runs():
        live = out / "runs" / run.folder / "live"
        assert (live / "ledger.sqlite").exists() and (live / "fit.json").exists()
    # the summary names k per temperature and the activation parameters; the safety
    # cautions are in --help and in the report, not after every command
    for word in ("Ea", "dH‡", "dS‡", "°C"):
        assert word in stdout
    assert "Safety" not in stdout


def test_demo_recovers_its_generator_self_consistency(readme_demo):
    """Self-consistency: each run's k and the study's Ea lie in their 95 % intervals of the truth."""
    _, out, _ = readme_demo
    for run in demo.demo_runs():
        fit = json.loads((out / "runs" / run.folder / "live" / "fit.json").read_text())
        assert fit["fit"]["converged"], fit["fit"]["message"]
        low, high = fit["k"]["ci95"]
        assert low <= run.k_per_s <= high, f"{run.folder}: k interval {low:.4g}..{high:.4g} misses {run.k_per_s:.4g}"
        counts = fit["counts"]
        assert counts["processed"] == demo.SPECTRA_PER_RUN and counts["quarantined"] == 0
    study = json.loads((out / "study" / "study.json").read_text())
    ea = study["two_step"]["ea_kj_per_mol"]
    assert ea["ci95"][0] <= demo.EA_KJ_PER_MOL <= ea["ci95"][1], ea
    global_ea = study["global_fit"]["ea_kj_per_mol"]
    assert global_ea["ci95"][0] <= demo.EA_KJ_PER_MOL <= global_ea["ci95"][1], global_ea


def test_demo_report_in_a_real_browser(readme_demo, tmp_path):
    """The demo's report, rendered by headless Chromium, shows its figures and headings."""
    from tests_support_browser import chromium, dump_dom_with_image_sizes, screenshot

    binary = chromium()
    if binary is None:
        reason = "chromium is not installed (apt-get install chromium); browser check skipped"
        print(reason)
        pytest.skip(reason)
    _, out, _ = readme_demo
    html = out / "report" / "report.html"
    dom, sizes = dump_dom_with_image_sizes(binary, html, tmp_path)
    assert len(sizes) >= 7 and all(w > 300 and h > 200 for w, h in sizes)  # every figure decoded
    for heading in ("Temperature dependence (two-step)", "Arrhenius plot", "Eyring plot",
                    "Spectra through time: 25 °C", "Rate law: 25 °C", "Rate laws compared", "Safety first"):
        assert heading in dom, heading
    shot = screenshot(binary, html, tmp_path)
    print(f"screenshot of the demo report: {shot}")
    assert shot.stat().st_size > 50_000
