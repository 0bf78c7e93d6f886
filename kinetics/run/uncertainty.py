"""The processing uncertainty of a run's final fit (:mod:`kinetics.sensitivity` in the engine).

After the final fit from scratch of every run (batch, a study's runs, a live run's final
pass; never a live turn), the run's spectra are re-measured under the neighbouring
reasonable processing choices and k refitted under each; the spread is the systematic
term, combined with the fit's statistical interval into the interval the run quotes
(rule in :mod:`kinetics.sensitivity`).

The spectra are the ones the engine processed and aligned, kept in memory with their
measurements (``FileMeasurement.spectrum``); only files whose spectrum is not in memory
(a restarted run, a run past the memory budget of :class:`kinetics.run.state.SeriesState`)
are read and processed again, and the document says how many.

What :func:`assess_outcome` returns replaces the outcome's ``k``: ``ci95`` is the
combined interval, ``ci95_statistical`` the fit's own; ``processing_uncertainty`` is
the breakdown (statistical, systematic, combined, per choice) or, when the term is not
assessed, says why (a mechanism fit, a fit without a finite interval), and with no
choice to vary says that the systematic term is zero for that reason.
"""

from __future__ import annotations

import logging
import math
from dataclasses import replace

from kinetics import sensitivity as sens
from kinetics.errors import KineticsError

log = logging.getLogger(__name__)


def _not_assessed(reason: str) -> dict:
    return {"assessed": False, "reason": reason}


def run_spectra(config, measurements, reference):
    """(spectra, measurements, reference spectrum) of a run, from memory where kept.

    Measurements without their spectrum are read and processed again, aligned on the
    run's ``reference`` (:func:`kinetics.sensitivity.processed_run`).
    """
    missing = [m for m in measurements if m.spectrum is None]
    reread = {}
    reference_spectrum = None if reference is None else reference.spectrum
    if missing:
        log.info("processing uncertainty: %d spectra not in memory are read again", len(missing))
        if getattr(config, "file", None) is not None:  # traces of one arrayed file, read once
            from pathlib import Path

            from kinetics.run.sources import trace_records

            records = trace_records(config, [Path(m.path).name for m in missing])
            spectra, again, made = sens.processed_run(config, records=records, reference=reference)
        else:
            spectra, again, made = sens.processed_run(config, paths=[m.path for m in missing], reference=reference)
        reread = {m.path: s for m, s in zip(missing, spectra)}
        reference_spectrum = made if reference_spectrum is None else reference_spectrum
    spectra = [m.spectrum if m.spectrum is not None else reread[m.path] for m in measurements]
    return spectra, [replace(m, spectrum=None) for m in measurements], reference_spectrum, len(missing)


def assess_outcome(config, refitter, measurements, reference, table, outcome, workers: int = 1,
                   fits=None):
    """The processing uncertainty of a run's final fit.

    Parameters
    ----------
    config : RunConfig
    refitter : kinetics.run.refit.RatesRefitter
    measurements : list of kinetics.series.FileMeasurement
        The counted files' measurements (with their spectra where kept).
    reference : kinetics.series.Reference
    table, outcome : the run's final table and fit outcome
    workers : int
        Variants measured in forked worker processes (see :func:`kinetics.sensitivity.assess`).
    fits : mapping, optional
        Group -> the final table's series-wide fit from scratch, reused by variants that
        leave the group alone.

    Returns
    -------
    (k, document, warnings, report_text)
        ``k`` the outcome's k with the combined interval (``outcome.k`` unchanged when not
        assessed); ``document`` JSON-ready; ``warnings`` list of str; ``report_text`` for
        the report (None when not assessed).
    """
    k = outcome.k
    if getattr(refitter, "mechanism", None):
        doc = _not_assessed("the systematic term (processing choices) is not assessed for mechanism fits; "
                            "the interval quoted is the statistical one")
        return k, doc, [], None
    if outcome.state is None or not outcome.succeeded or not k:
        return k, _not_assessed("the fit did not converge: no interval to add a systematic term to"), [], None
    try:
        base = sens.estimate_from_fit(outcome.state)
    except KineticsError as error:
        return k, _not_assessed(f"not assessed: {error}"), [], None
    variants = sens.neighbour_variants(config)
    if not variants:
        doc = sens.assess(config, lambda c: table, lambda t: base, variants=[], base_table=table,
                          base_estimate=base).to_dict()
        doc.update(assessed=True, reason="no processing choice applies to this config (no window, fit "
                                         "baseline or grouping to vary): the systematic term is zero")
        return {**k, "ci95_statistical": k.get("ci95")}, doc, [], None
    spectra, ms, ref_spectrum, reread = run_spectra(config, measurements, reference)

    def fit(t):
        # k of a variant: the fit started at the run's optimum, value only (the variants'
        # own intervals are not used; tests/test_engine.py checks this equals a fit from
        # scratch)
        value = refitter.fit_value(outcome.state, t)
        return sens.KEstimate(value, math.nan, (math.nan, math.nan), base.quantile, base.unit, base.name)

    from kinetics import series

    known = {series.global_fit_key(members, config): fits[group]
             for group, members in config.fit_groups.items() if fits and group in fits}
    quantify = sens.SpectraQuantifier(spectra, ms, ref_spectrum, fits=known)
    result = sens.assess(config, quantify, fit, variants=variants,
                         base_table=table, base_estimate=base, workers=workers)
    doc = {"assessed": True, **result.to_dict(), "spectra_read_again": reread}
    new_k = {**k, "ci95": list(result.combined_ci95), "ci95_statistical": list(base.ci95),
             "stderr_systematic": result.systematic_sd}
    return new_k, doc, list(result.warnings), result.report()


__all__ = ["assess_outcome", "run_spectra"]
