"""flawmix: strength statistics of brittle materials with competing flaw populations.

Names are imported on first use (PEP 562), so ``flawmix --help`` or an MLE fit never pays for
pandas, scipy, emcee, arviz or matplotlib it does not need.
"""
from __future__ import annotations

import importlib

# `fit` is eager (fit.py itself imports only errors.py) because the submodule flawmix.fit
# would otherwise shadow the function once anything imports it.
from .fit import fit

__version__ = "0.1.0"

# public name -> module that defines it
_EXPORTS = {
    "FlawmixError": "errors", "FlawmixWarning": "errors",
    "FitResult": "result", "PopulationEstimate": "result",
    "Population": "specimens", "Specimens": "specimens", "read_specimens": "specimens",
    "compare_lots": "lots", "read_lots": "lots", "LotComparison": "lots",
}

__all__ = sorted(_EXPORTS) + ["fit", "__version__"]


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is not None:
        value = getattr(importlib.import_module(f".{module}", __name__), name)
        globals()[name] = value   # later look-ups skip this function
        return value
    try:   # submodules: fm.compare, fm.plots, ... as after `import flawmix.compare`
        return importlib.import_module(f".{name}", __name__)
    except ModuleNotFoundError as error:
        if error.name != f"{__name__}.{name}":
            raise
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_EXPORTS))
