"""poise: how probable is a stability claim about an ODE model with uncertain parameters.

Public API (imported on first use, so that `import poise` stays quick)::

    load_study(path) -> Study
    run_study(study, out=None, *, size=None, seed=None, jobs=None, scheduler=None,
              resume=False, overwrite=False, progress=False, chunk_size=None,
              report=True) -> RunResult
    open_run(directory) -> RunResult
    inspect_point(study, overrides=None) -> dict
    RunResult, Study, InputError, PoiseWarning
"""

__version__ = "0.1.0"

__all__ = ["load_study", "run_study", "open_run", "inspect_point",
           "RunResult", "Study", "InputError", "PoiseWarning", "__version__"]


def __getattr__(name):
    """The public names, each imported from its module on first use."""
    import importlib
    modules = {"load_study": "poise.study.loader", "run_study": "poise.api",
               "open_run": "poise.api", "RunResult": "poise.api", "Study": "poise.study.spec",
               "inspect_point": "poise.inspect", "InputError": "poise.errors",
               "PoiseWarning": "poise.errors"}
    if name in modules:
        return getattr(importlib.import_module(modules[name]), name)
    raise AttributeError(f"module 'poise' has no attribute {name!r}")


def __dir__():
    # the public API only, not the subpackages that importing it brings in
    return sorted(__all__)
