"""poise: how probable is a stability claim about an ODE model with uncertain parameters.

Public API (imported on first use, so that `import poise` stays quick)::

    load_study(path) -> Study
    run_study(study, out=None, *, size=None, seed=None, jobs=None, scheduler=None,
              resume=False, progress=False, chunk_size=None, report=True) -> RunResult
    open_run(directory) -> RunResult
    inspect_point(study, overrides=None) -> dict
"""

__version__ = "0.1.0"

_EXPORTS = {
    "load_study": "poise.study.loader",
    "run_study": "poise.api",
    "open_run": "poise.api",
    "RunResult": "poise.api",
    "inspect_point": "poise.inspect",
    "InputError": "poise.errors",
}

__all__ = ["__version__", *_EXPORTS]


def __getattr__(name):
    if name in _EXPORTS:
        import importlib
        return getattr(importlib.import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'poise' has no attribute {name!r}")
