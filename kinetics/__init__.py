"""kinetics: NMR spectra recorded during a reaction -> rate constants with honest intervals.

The entry points (:mod:`kinetics.api`), loaded on first use so that ``import kinetics``
and the command's start stay fast::

    import kinetics
    run = kinetics.load_run("configs/demo_run.toml")      # table, fit(), compare(), plot(), report()
    study = kinetics.load_study("configs/demo_study.toml")  # runs, arrhenius(), plot(), report()
"""

__version__ = "0.1.0"

_API = ("load_run", "load_study", "load_campaign", "Run", "Study")

__all__ = ["__version__", *_API]


def __getattr__(name: str):
    if name in _API:
        from kinetics import api

        return getattr(api, name)
    raise AttributeError(f"module 'kinetics' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_API))
