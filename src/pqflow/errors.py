"""Every error pqflow raises on purpose.

    PqflowError                      base: catch this to catch them all
    ├── ConfigError                  a run configuration is invalid (names the file and the key)
    │   └── LiabilityDataError       a liability portfolio file is invalid (names the model point)
    ├── MarketDataError              a market-data input is invalid (names the file, row, column)
    │   └── CalibrationError         the model cannot fit the quotes as given
    ├── MeasureError                 the real-world and market-consistent measures are not
    │                                equivalent, so no density weights exist
    ├── RunDirectoryError            an output directory is in the way, locked or not a run
    ├── IntegrityError               a written file does not match its manifest entry
    └── RuntimeFault                 the machine, not the input, stopped the work: disk full,
                                     permissions, an unsafe Prefect home (exit code 3)
"""

from __future__ import annotations

__all__ = [
    "PqflowError",
    "ConfigError",
    "LiabilityDataError",
    "MarketDataError",
    "CalibrationError",
    "MeasureError",
    "RunDirectoryError",
    "IntegrityError",
    "RuntimeFault",
]


class PqflowError(Exception):
    """Base class of every error pqflow raises on purpose."""


class ConfigError(PqflowError):
    """A run configuration is invalid."""


class LiabilityDataError(ConfigError):
    """A liability portfolio file is invalid (names the file and the model point)."""


class MarketDataError(PqflowError):
    """A market-data input is invalid."""


class CalibrationError(MarketDataError):
    """The model cannot fit the market quotes (e.g. a quote below the rates' own variance)."""


class MeasureError(PqflowError):
    """The two measures are not equivalent: density weights would mean nothing."""


class RunDirectoryError(PqflowError):
    """An output directory cannot be used as asked."""


class IntegrityError(PqflowError):
    """A file of a run does not match what the manifest recorded."""


class RuntimeFault(PqflowError):
    """The work failed for a reason outside its input: no space left, no permission, an I/O
    error, an unsafe Prefect home folder. The command line exits 3 for these."""
