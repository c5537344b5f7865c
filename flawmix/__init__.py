"""flawmix: strength statistics of brittle materials with competing flaw populations."""
from .errors import FlawmixError, FlawmixWarning
from .fit import fit
from .result import FitResult, PopulationEstimate
from .specimens import Population, Specimens, read_specimens

__version__ = "0.1.0"

__all__ = [
    "FitResult", "FlawmixError", "FlawmixWarning", "Population", "PopulationEstimate",
    "Specimens", "fit", "read_specimens", "__version__",
]
