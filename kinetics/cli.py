"""The ``kinetics`` command.  The library computes; this module parses, calls and prints.

Each sub-command has an ``_add_<name>`` (its arguments) and a ``_cmd_<name>`` (its work).
``--json`` prints exactly one JSON object on stdout and nothing else there; messages go
to stderr.  Errors the user can fix (``KineticsError``) print one line and exit 2.

Progress bars (runs, spectra, bootstrap refits) are drawn on stderr from the library's
``progress(stage, done, total)`` callback, only when stderr is a terminal and neither
``--quiet`` nor ``--json`` is given.  ``--quiet`` leaves errors and the final result.  A
warning logged with the same words twice is shown once.  The safety caution is in
``--help`` and in every report, not after every command.
"""

from __future__ import annotations

import argparse
import logging
import os
import sys
from pathlib import Path

from kinetics import __version__
from kinetics.errors import KineticsError


def _print_json(obj) -> None:
    from kinetics.jsonio import dumps  # numpy-aware; loaded here so that `kinetics --help` starts fast

    sys.stdout.write(dumps(obj) + "\n")


SAFETY_NOTE = ("Safety: reactions can run away and heated or pressurised sample tubes can fail; "
               "strong magnets attract tools and affect implants. Follow local safety rules and "
               "qualified supervision; kinetic parameters are no substitute for a calorimetric "
               "hazard assessment. Every report repeats this caution.")


def _add_quiet(p) -> None:
    p.add_argument("-q", "--quiet", action="store_true",
                   help="print only errors and the final result (no progress, no notes)")


class _ProgressBars:
    """Bars on stderr (rich) for the library's ``progress(stage, done, total)`` callback:
    one bar per stage (runs, spectra, bootstrap refits); a stage that starts again (the
    spectra of the next run) restarts its bar."""

    LABELS = {"runs": "runs", "spectra": "spectra measured", "bootstrap": "bootstrap refits"}

    def __init__(self, console=None):
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

        self.bars = Progress(TextColumn("{task.description:<18}"), BarColumn(), MofNCompleteColumn(),
                             TimeElapsedColumn(), console=console or Console(stderr=True), transient=True)
        self.tasks: dict = {}

    def __enter__(self):
        self.bars.start()
        return self

    def __exit__(self, *exc) -> None:
        self.bars.stop()

    def __call__(self, stage: str, done: int, total: int) -> None:
        task = self.tasks.get(stage)
        if task is None:
            task = self.tasks[stage] = self.bars.add_task(self.LABELS.get(stage, stage), total=total)
        self.bars.update(task, completed=done, total=total)


def _progress(args):
    """The progress callback for a command (a context manager yielding it), or None."""
    import contextlib

    if getattr(args, "quiet", False) or getattr(args, "json", False) or not sys.stderr.isatty():
        return contextlib.nullcontext(None)
    return _ProgressBars()


class _OnceFilter(logging.Filter):
    """Passes each warning once per command: the same words from every run or spectrum say
    nothing new (the first one names what to check)."""

    def __init__(self):
        super().__init__()
        self.seen: set = set()

    def filter(self, record: logging.LogRecord) -> bool:
        if record.levelno < logging.WARNING:
            return True
        key = (record.levelno, record.getMessage())
        if key in self.seen:
            return False
        self.seen.add(key)
        return True


# ---------------------------------------------------------------- inspect (spectra)
def _add_inspect(sub) -> None:
    p = sub.add_parser("inspect", help="header, axis and peaks of one spectrum")
    p.add_argument("file", type=Path)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_cmd_inspect)


def _cmd_inspect(args) -> int:
    from kinetics.spectra.inspect import inspect_file

    info = inspect_file(args.file)
    if args.json:
        _print_json(info)
        return 0
    print(f"file        {args.file}")
    print(f"format      {info['format']}")
    print(f"kind        {info.get('kind', 'spectrum')}")
    print(f"nucleus     {info['nucleus']}")
    print(f"observe     {info['observe_mhz']:.4f} MHz")
    print(f"points      {info['points']}")
    if info.get("ppm_range"):
        print(f"ppm range   {info['ppm_range'][0]:.3f} .. {info['ppm_range'][1]:.3f}")
    print(f"acquired    {info['acquired'] or 'unknown'}")
    if info.get("peaks"):
        print("peaks       ppm        height        snr")
        for peak in info["peaks"]:
            print(f"            {peak['ppm']:8.3f}  {peak['height']:12.4g}  {peak['snr']:8.1f}")
    return 0


# ---------------------------------------------------------------- fit (rates)
def _add_fit(sub) -> None:
    from kinetics.rates.laws import MODELS

    p = sub.add_parser("fit", help="rate law or mechanism fitted to a concentration table")
    p.add_argument("table", type=Path, help="delimited table: a time column (s) and concentration columns")
    p.add_argument("--time-column", required=True, help="column with time from the reaction start (s unless --time-unit)")
    p.add_argument("--column", action="append", required=True, help="concentration column (repeat for several)")
    how = p.add_mutually_exclusive_group(required=True)
    how.add_argument("--model", choices=MODELS, help="integrated rate law")
    how.add_argument("--mechanism", help="reaction text, e.g. 'A -> B; B -> C' (columns name species)")
    p.add_argument("--observed", choices=("reactant", "product"), default="reactant",
                   help="what a single column measures (default reactant)")
    p.add_argument("--species", action="append", help="species of each --column (multi-species models, mechanisms)")
    p.add_argument("--sigma-column", action="append", help="uncertainty column for each --column (weights)")
    p.add_argument("--absolute-sigma", action="store_true", help="sigmas are absolute (no chi-square rescaling)")
    p.add_argument("--weighting", choices=("none", "relative"), default="none",
                   help="relative: noise proportional to the concentration (no sigma column needed)")
    p.add_argument("--time-unit", choices=("s", "min", "h"), help="unit of the time column (default s)")
    p.add_argument("--concentration-unit", choices=("mol/L", "mmol/L", "umol/L"),
                   help="unit of the concentration and sigma columns (default mol/L)")
    p.add_argument("--start", action="append", help="starting values NAME=VALUE[,NAME=VALUE...]")
    p.add_argument("--fix", action="append", help="fixed parameter values NAME=VALUE[,...]")
    p.add_argument("--initial", action="append", help="mechanism: known initial concentrations SPECIES=mol/L[,...]")
    p.add_argument("--compare", action="store_true", help="rank candidate laws by AICc")
    p.add_argument("--target-conversion", type=float, help="forecast the time to this conversion (0..1)")
    p.add_argument("--bootstrap", type=int, default=0, help="residual-bootstrap refits (default 0)")
    p.add_argument("--seed", type=int, default=None, help="seed of the bootstrap generator")
    p.add_argument("--no-profile", action="store_true", help="skip profile-likelihood intervals")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    _add_quiet(p)
    p.set_defaults(func=_cmd_fit)


def _cmd_fit(args) -> int:
    from kinetics.rates.command import fit_command, parse_assignments

    with _progress(args) as progress:
        payload, text = fit_command(
            args.table, args.time_column, args.column, model=args.model, mechanism=args.mechanism,
            observed=args.observed, species=args.species, sigma_columns=args.sigma_column,
            compare=args.compare, target_conversion=args.target_conversion, bootstrap=args.bootstrap,
            seed=args.seed, start=parse_assignments(args.start, "--start"),
            fixed=parse_assignments(args.fix, "--fix"), initial=parse_assignments(args.initial, "--initial"),
            profile=not args.no_profile, absolute_sigma=args.absolute_sigma, weighting=args.weighting,
            time_unit=args.time_unit, concentration_unit=args.concentration_unit, progress=progress)
    if args.json:
        _print_json(payload)
    else:
        print(text)
    if not args.quiet:  # the text above lists them already; stderr keeps them visible beside --json
        for warning in payload.get("warnings", []):
            print(f"kinetics fit: warning: {warning}", file=sys.stderr)
    return 0 if payload["converged"] else 1


# ---------------------------------------------------------------- arrhenius (temperature)
def _add_arrhenius(sub) -> None:
    p = sub.add_parser("arrhenius", help="Ea, A, dH‡, dS‡, dG‡ from rate constants at several temperatures")
    p.add_argument("table", type=Path, help="CSV: temperature_c or temperature_kelvin, k, k_stderr [, label]")
    p.add_argument("--reference-temperature-kelvin", type=float, default=298.15,
                   help="temperature at which dG‡ is given (default 298.15 K)")
    p.add_argument("--basis", choices=("scatter", "stated"), default="scatter",
                   help="headline intervals: chi-square-scaled with Student t (default) or from the stated stderrs")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_cmd_arrhenius)


def _cmd_arrhenius(args) -> int:
    from kinetics.temperature import analyse_temperatures, read_arrhenius_table

    kelvin, k, k_stderr, labels, warnings = read_arrhenius_table(args.table)
    result = analyse_temperatures(kelvin, k, k_stderr, labels=labels, basis=args.basis,
                                  reference_temperature_kelvin=args.reference_temperature_kelvin,
                                  extra_warnings=warnings)
    if args.json:
        _print_json(result.to_dict())
        return 0
    print(result.report())
    print()
    print(result.table().to_string(index=False, float_format=lambda v: f"{v:.6g}"))
    return 0


# ---------------------------------------------------------------- watch (live)
def _add_watch(sub) -> None:
    p = sub.add_parser("watch", help="follow a run live as spectra arrive in its folder", epilog=SAFETY_NOTE)
    p.add_argument("config", type=Path, help="run config (TOML), as for `kinetics run`")
    p.add_argument("--out", type=Path, default=None,
                   help="output folder: ledger, series.csv, fit.json, index.html "
                   "(default: <config name>.live next to the config)")
    p.add_argument("--poll", action="store_true",
                   help="list the folder instead of file events (network shares)")
    p.add_argument("--folder", type=Path, default=None, metavar="DIR",
                   help="watch this folder instead of the config's [run] folder "
                   "(with --replay: the folder the replay writes into; created if missing)")
    p.add_argument("--replay", type=Path, metavar="DIR",
                   help="feed this finished folder into the watched folder, as an instrument would")
    p.add_argument("--interval", type=float, default=2.0, metavar="S",
                   help="seconds between replayed files (default 2)")
    p.add_argument("--quiet-period", type=float, default=None, metavar="S",
                   help="seconds a file must stay unchanged to count as complete")
    p.add_argument("--max-duration", type=float, default=None, metavar="S",
                   help="stop after this many seconds")
    p.add_argument("--idle-minutes", type=float, default=None, metavar="N",
                   help="stop after N minutes without a new spectrum")
    p.add_argument("--target-conversion", type=float, default=None, metavar="X",
                   help="stop once the conversion (lower 95%% bound) reaches X (0-1)")
    p.add_argument("--serve", type=int, nargs="?", const=8765, default=None, metavar="PORT",
                   help="also serve the page on http://127.0.0.1:PORT (default 8765)")
    p.add_argument("--plot", action="store_true", help="live matplotlib window")
    p.add_argument("--json", action="store_true", help="print the final summary as one JSON object")
    _add_quiet(p)
    p.set_defaults(func=_cmd_watch)


def _cmd_watch(args) -> int:
    from watchers.live import watch_command

    summary = watch_command(args)
    if args.json:
        _print_json(summary)
    else:
        print(f"stopped: {summary['stop_reason']}")
        counts = summary["counts"]
        print(f"files:   {counts['processed']} processed, {counts['duplicate']} duplicate, "
              f"{counts['quarantined']} quarantined, {counts['replaced']} replaced")
        print(f"output:  {summary['out_dir']}")
    return 0


# ---------------------------------------------------------------- init (report)
def _add_init(sub) -> None:
    p = sub.add_parser("init", help="draft a commented starter config from a folder's first spectrum")
    p.add_argument("folder", type=Path, help="folder of spectra (JCAMP-DX or CSV)")
    p.add_argument("--out", type=Path, default=None,
                   help="config to write (default: <folder name>.toml beside the folder)")
    p.add_argument("--force", action="store_true", help="replace an existing config")
    p.add_argument("--coupling-hz", type=float, default=8.0,
                   help="largest spacing (x 1.6) of a bare doublet or an unexplained cluster, Hz (default 8); "
                        "named patterns (dd, dt, dq ...) reach 20 Hz without it")
    p.set_defaults(func=_cmd_init)


def _cmd_init(args) -> int:
    from kinetics.init import draft_config

    draft = draft_config(args.folder, args.out, force=args.force, coupling_hz=args.coupling_hz)
    config = draft.config_path
    print(f"read {draft.source} ({draft.spectrum.nucleus}, {draft.spectrum.observe_mhz:.3f} MHz): "
          f"{len(draft.peaks)} lines above {draft.threshold:.3g} (noise sigma {draft.noise_sigma:.3g})")
    for window in draft.windows:
        lo, hi = window.window_ppm
        print(f"  {window.name:12s} {lo:7.3f} .. {hi:7.3f} ppm  {window.role:9s} {window.multiplicity}"
              f" ({window.pattern.describe()}){'  left out: two species overlap' if window.mixed else ''}")
    for message in draft.skipped:
        print(f"  skipped: {message}")
    print(f"wrote {config}: set the lines marked EDIT (the standard's concentration or mode = \"relative\", "
          f"reactant, product; species names), check nuclei, then `kinetics run {config}`")
    return 0


# ---------------------------------------------------------------- integrate (signals)
def _add_integrate(sub) -> None:
    p = sub.add_parser("integrate", help="region integrals of one spectrum (or FID, processed first)")
    p.add_argument("file", type=Path)
    p.add_argument("--region", action="append", required=True, metavar="NAME=LO:HI[:NUCLEI]",
                   help="a named ppm window and its number of nuclei (default 1); repeat for more")
    p.add_argument("--reference", type=float, default=None, metavar="PPM",
                   help="move the tallest peak near PPM (within 0.3 ppm) to PPM first, e.g. 0 for TMS")
    p.add_argument("--baseline", choices=("edges", "processed"), default="edges",
                   help="local straight baseline through the window edges (default) or none")
    p.add_argument("--local-phase", action="store_true",
                   help="correct a zero-order phase error local to each window (needs an imaginary part)")
    p.add_argument("--noise-region", default=None, metavar="LO:HI",
                   help="signal-free ppm range for the noise (default: found automatically)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_cmd_integrate)


def _cmd_integrate(args) -> int:
    from kinetics.series import integrate_file, parse_region

    regions = [parse_region(text) for text in args.region]
    noise = None if args.noise_region is None else parse_region(f"noise={args.noise_region}")[1]
    info = integrate_file(args.file, regions, reference_ppm=args.reference, baseline=args.baseline,
                          local_phase=args.local_phase, noise_region_ppm=noise)
    if args.json:
        _print_json(info)
        return 0
    print(f"file      {info['file']}")
    print(f"noise     sigma {info['noise_sigma']:.4g} from {len(info['noise_region_ppm'])} range(s); "
          f"integrals in {info['unit']}")
    print(f"{'region':<14} {'ppm':>17} {'nuclei':>6} {'integral':>12} {'sigma':>10} {'per nucleus':>12} {'trunc.':>7}")
    for r in info["regions"]:
        lo, hi = r["ppm"]
        print(f"{r['name']:<14} {lo:8.3f}..{hi:7.3f} {r['nuclei']:6d} {r['integral']:12.5g} "
              f"{r['sigma']:10.3g} {r['per_nucleus']:12.5g} {100 * r['truncation_loss']:6.2f}%")
    return 0


# ---------------------------------------------------------------- run / demo (the whole job)
def _add_run(sub) -> None:
    p = sub.add_parser("run", help="batch: a run config (folder -> series -> fit -> report) or a study config",
                       epilog=SAFETY_NOTE)
    p.add_argument("config", type=Path, help="a single-run config or a temperature-study config (TOML)")
    p.add_argument("--out", type=Path, help="output folder (default: <config>.out beside the config)")
    p.add_argument("--no-report", action="store_true", help="skip the HTML/PDF report")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help='campaigns: "local" (a local Dask cluster), "none" (this process) or tcp://host:8786')
    p.add_argument("--workers", type=int, metavar="N", help="campaigns: worker processes of the local cluster "
                   "(1: in this process)")
    _add_quiet(p)
    p.set_defaults(func=_cmd_run)


def _cmd_run(args) -> int:
    from kinetics.run import job as workflow

    out = args.out or args.config.with_suffix(".out")
    if workflow.is_campaign_file(args.config):
        if args.workers is not None and args.workers < 1:
            from kinetics.errors import ConfigError

            raise ConfigError("--workers", f"{args.workers} workers", hint="give 1 or more")
        campaign = workflow.run_campaign_config(args.config, out, scheduler=args.scheduler, workers=args.workers, report=not args.no_report)
        if args.json:
            _print_json(campaign.to_dict())
        else:
            print(campaign.text())
        return 0 if campaign.success else 1
    with _progress(args) as progress:
        if workflow.is_study_file(args.config):
            job = workflow.run_study_config(args.config, out, report=not args.no_report, progress=progress)
        else:
            job = workflow.run_single(args.config, out, report=not args.no_report, progress=progress)
    if args.json:
        _print_json(job.to_dict())
    else:
        print(_job_text(job, quiet=args.quiet))
    failed = (job.study is not None and not job.study.success) or any(
        r.fit is None or not r.fit.converged for r in job.runs)
    return 1 if failed else 0


def _add_reprocess(sub) -> None:
    p = sub.add_parser("reprocess", help="one run config over every run folder of an archive, as Dask tasks")
    p.add_argument("archive", type=Path, help="the folder that holds the run folders")
    p.add_argument("--config", type=Path, required=True, help="the run config (TOML) applied to each run folder")
    p.add_argument("--pattern", default="run_*", help='names of the run folders (default "run_*")')
    p.add_argument("--out", type=Path, help="output folder (default: <archive>.out beside the archive)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help='"local" (a local Dask cluster, default), "none" (this process) or tcp://host:8786')
    p.add_argument("--workers", type=int, metavar="N", help="worker processes of the local cluster (1: this process)")
    p.set_defaults(func=_cmd_reprocess)


def _cmd_reprocess(args) -> int:
    from kinetics.campaign.archive import reprocess_archive

    if args.workers is not None and args.workers < 1:
        from kinetics.errors import ConfigError

        raise ConfigError("--workers", f"{args.workers} workers", hint="give 1 or more")
    out = args.out or args.archive.resolve().with_suffix(".out")
    outcome = reprocess_archive(args.archive, args.config, out, pattern=args.pattern, scheduler=args.scheduler,
                                workers=args.workers)
    if args.json:
        _print_json(outcome.to_dict())
    else:
        print(outcome.text())
    return 0 if outcome.success else 1


def _add_demo(sub) -> None:
    p = sub.add_parser("demo", help="the whole job on the bundled invented demo series")
    p.add_argument("--out", type=Path, default=Path("kinetics-demo-output"),
                   help="output folder (default ./kinetics-demo-output)")
    p.add_argument("--data", type=Path, help="demo series folder (default ./demo_series, else regenerated)")
    p.add_argument("--interval", type=float, default=0.02, help="seconds between replayed files (default 0.02)")
    p.add_argument("--make-data", type=Path, metavar="DIR",
                   help="only (re)generate the demo series into DIR, bit for bit, and stop")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    _add_quiet(p)
    p.set_defaults(func=_cmd_demo)


def _cmd_demo(args) -> int:
    if args.make_data is not None:
        from kinetics import demo

        folders = demo.make_demo_data(args.make_data)
        if args.json:
            _print_json({"demo_series": [str(f) for f in folders]})
        else:
            print(f"wrote the demo series (seed {demo.SEED}) to {args.make_data}: "
                  + ", ".join(f.name for f in folders))
        return 0
    from watchers import workflow

    if not (args.json or args.quiet):
        print("kinetics demo: replaying four invented runs through the live path ...", file=sys.stderr)
    with _progress(args) as progress:
        job = workflow.run_demo(args.out, args.data, args.interval, progress=progress)
    if args.json:
        _print_json(job.to_dict())
    else:
        print(_job_text(job, quiet=args.quiet))
    return 0 if job.study is not None and job.study.success else 1


def _fmt(entry, digits: int = 4) -> str:
    if not entry or entry.get("value") is None:
        return "n/a"
    if entry.get("stderr") is not None:  # value and uncertainty rounded together, then the interval
        from kinetics.numbers import format_estimate

        return format_estimate(entry)
    ci = entry.get("ci95") or [None, None]
    interval = "" if None in ci else f"  (95 %: {ci[0]:.{digits}g} .. {ci[1]:.{digits}g})"
    return f"{entry['value']:.{digits}g} {entry.get('unit', '')}{interval}"


def _grouped_warnings(job) -> list[str]:
    """Every warning of the job once: a run warning names the runs it concerns (or says every
    run); the study's own warnings follow."""
    grouped: dict[str, list[str]] = {}
    for run in job.runs:
        for warning in run.warnings:
            labels = grouped.setdefault(warning, [])
            if run.label not in labels:
                labels.append(run.label)
    lines = []
    for warning, labels in grouped.items():
        where = "" if len(job.runs) == 1 else (
            " (every run)" if len(labels) == len(job.runs) else f" ({', '.join(labels)})")
        lines.append(f"warning{where}: {warning}")
    study_warnings = [] if job.study is None else [w for w in dict.fromkeys(job.study.warnings) if w not in grouped]
    lines += [f"warning (study): {warning}" for warning in study_warnings]
    return [""] + lines if lines else []


def _job_text(job, quiet: bool = False) -> str:
    """The result of ``kinetics run``/``demo`` for the terminal; each warning once, naming the
    runs it concerns (``quiet``: without the notes on where data came from)."""
    lines = []
    for note in () if quiet else job.notes:
        lines.append(note)
    if job.runs:
        lines.append("")
        width = max(12, *(len(run.label) + 1 for run in job.runs))
        lines.append(f"{'run':<{width}} {'spectra':>7}  {'k with 95 % interval':<64} {'fit'}")
        for run in job.runs:
            status = "no fit" if run.fit is None else ("converged" if run.fit.converged else
                                                        f"NOT converged: {run.fit.message}")
            lines.append(f"{run.label:<{width}} {len(run.table):>7}  {_fmt(run.k()):<64} {status}")
            if run.breakdown():
                lines.append(f"{'':<{width}} {'':>7}  {run.breakdown()}")
            skipped = {k: v for k, v in run.counts.items() if k not in ("processed",) and v}
            if skipped:
                lines.append(f"{'':<{width}} files: " + ", ".join(f"{k} {v}" for k, v in sorted(skipped.items())))
    study = job.study
    if study is not None:
        lines.append("")
        if not job.runs:
            for fit in study.run_fits:
                state = "" if fit.success else f"  ({fit.message})"
                lines.append(f"{fit.label:<12} {fit.temperature_kelvin:8.2f} K  k = {fit.k:.4g} ± {fit.k_stderr:.2g}"
                             f"{state}")
            lines.append("")
        if study.temperature is None:
            lines.append(f"temperature study: {study.message}")
        else:
            data = study.temperature.to_dict()
            lines.append(f"temperature study '{study.name}' ({data.get('n_runs')} runs, two-step):")
            lines.append(f"  Ea   {_fmt(data.get('ea_kj_per_mol'))}")
            lines.append(f"  dH‡  {_fmt(data.get('dh_kj_per_mol'))}")
            lines.append(f"  dS‡  {_fmt(data.get('ds_j_per_mol_k'))}")
            lines.append(f"  dG‡  {_fmt(data.get('dg_kj_per_mol'))} at {data.get('t_ref_kelvin')} K")
        if study.global_result is not None and study.global_result.success:
            g = study.global_result.to_dict()
            ea = g.get("ea_kj_per_mol")
            if isinstance(ea, dict):
                lines.append(f"  Ea from the global fit  {_fmt(ea)}")
    if job.truth:
        lines.append("")
        lines.append(f"(the demo's generator used Ea = {job.truth['ea_kj_per_mol']} kJ/mol and k = "
                     + ", ".join(f"{float(v):.4g} s^-1 at {t} °C" for t, v in job.truth["k_per_s"].items())
                     + ")")
    lines += _grouped_warnings(job)
    lines.append("")
    lines.append(f"outputs: {job.out_dir}")
    if job.report_html is not None:
        lines.append(f"report:  {job.report_html}")
        lines.append(f"         {job.report_pdf}")
    return "\n".join(lines)


# ---------------------------------------------------------------- commands registry
# ---------------------------------------------------------------- bench
def _add_bench(sub) -> None:
    p = sub.add_parser("bench", help="the benchmarks, as a table")
    p.add_argument("--quick", action="store_true", help="fewer repetitions and smaller sizes (a smoke run)")
    p.add_argument("--section", help="only this section (spectra, processing, signals, rates, temperature, live)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_cmd_bench)


def _cmd_bench(args) -> int:
    import dataclasses

    from kinetics import bench

    names = [name for name, _ in bench.SECTIONS]
    if args.section and args.section not in names:
        from kinetics.errors import ConfigError

        raise ConfigError("--section", f"unknown section {args.section!r}", hint=f"use one of {', '.join(names)}")
    rows = bench.run_all(quick=args.quick, only=args.section)
    if args.json:
        _print_json({"quick": args.quick, "rows": [{**dataclasses.asdict(r), "ratio": r.ratio} for r in rows]})
    else:
        print(bench.format_table(rows))
    return 0


_ADDERS = [_add_demo, _add_run, _add_reprocess, _add_watch, _add_inspect, _add_integrate, _add_fit, _add_arrhenius,
           _add_init, _add_bench]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="kinetics",
        description="NMR spectra recorded during a reaction -> concentrations, rate "
        "constants with intervals, activation parameters.",
        epilog=SAFETY_NOTE,
    )
    parser.add_argument("--version", action="version", version=f"kinetics {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress to stderr")
    sub = parser.add_subparsers(dest="command", required=True)
    for add in _ADDERS:
        add(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(
        level=logging.INFO if args.verbose else logging.WARNING,
        format="%(levelname)s %(name)s: %(message)s",
        stream=sys.stderr,
    )
    root = logging.getLogger()
    level_before = root.level
    if getattr(args, "quiet", False):
        root.setLevel(logging.ERROR)
    once = _OnceFilter()
    handlers = list(root.handlers)
    for handler in handlers:
        handler.addFilter(once)
    if not args.verbose:  # Dask logs its cluster's life at INFO (workers too); read when it is imported
        os.environ.setdefault("DASK_LOGGING__DISTRIBUTED", "warning")
    try:
        return int(args.func(args) or 0)
    except KineticsError as error:
        print(f"kinetics {args.command}: error: {error}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        # the reader of our stdout went away (e.g. `kinetics inspect F | head`): not an error
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    finally:  # main() may run again in this process (tests): leave logging as it was
        root.setLevel(level_before)
        for handler in handlers:
            handler.removeFilter(once)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
