"""strativ.cli: the `strativ` command (run, check, init) over the estimator core.

The command line reads a YAML spec, loads and checks the data, calls
`strativ.estimators.fit_all` per outcome, prints the comparison and writes results.json and
strata.csv. It computes no statistics of its own.
"""

from importlib.metadata import PackageNotFoundError, version

from .errors import CliError, DataError, SpecError, UsageError
from .loading import Dataset, load_data
from .runner import Run, run_spec
from .spec import Spec, load_spec

try:
    __version__ = version("strativ")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "unknown"

__all__ = [
    "__version__",
    "CliError",
    "DataError",
    "SpecError",
    "UsageError",
    "Dataset",
    "Run",
    "Spec",
    "load_data",
    "load_spec",
    "run_spec",
]
