"""The run engine: folder -> ledger -> measurements -> series -> fit -> outputs.

The one path behind ``kinetics run``, ``kinetics watch`` (fed by ``watchers.live``),
studies given as run configs and campaigns.

* :mod:`kinetics.run.files` - which files of a folder a run takes, and in which order
  (the one rule that also picks the reference spectrum);
* :mod:`kinetics.run.engine` - :class:`RunPlan`, :func:`process_ready`, :class:`RunState`,
  :func:`batch_run`;
* :mod:`kinetics.run.state` - the in-memory, incremental series state and its measurer;
* :mod:`kinetics.run.refit` - the rate-law refit, warm-started during a live run;
* :mod:`kinetics.run.uncertainty` - the processing uncertainty of a run's final fit
  (k under neighbouring processing choices, :mod:`kinetics.sensitivity`);
* :mod:`kinetics.run.outputs` - the ledger lock, ``series.csv``, ``fit.json``, the figure
  and the page;
* :mod:`kinetics.run.job` - ``kinetics run`` end to end (run or study config, report).
"""

from kinetics.run.engine import (LedgerTable, RunPlan, RunState, RunSummary, SeriesRun, batch_run, plan_from_config,
                                 process_ready, ready_files, run_config_to_table, run_series)
from kinetics.run.files import ReadyFile, WatchSpec
from kinetics.run.refit import FitOutcome, RatesRefitter, refitter_from_config
from kinetics.run.state import SeriesMeasurer, SeriesState

__all__ = ["FitOutcome", "LedgerTable", "RatesRefitter", "ReadyFile", "RunPlan", "RunState", "RunSummary", "SeriesRun",
           "SeriesMeasurer", "SeriesState", "WatchSpec", "batch_run", "plan_from_config", "process_ready",
           "ready_files", "refitter_from_config", "run_config_to_table", "run_series"]
