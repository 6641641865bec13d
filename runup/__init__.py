"""runup: critical speeds, amplification factors and damping from run-up records.

Results support, and never replace, engineering judgement; acceptance follows the
purchase specification, the applicable standards, local codes and licensed practice.
"""

from .errors import DataFormatError, FitError, RunupError, UnitError
from .run import (
    ConditionedRun,
    Correction,
    Curve,
    OperatingSpeeds,
    Probe,
    Run,
    RunMetadata,
    Segment,
    SlowRoll,
    SourceFile,
)

__version__ = "0.1.0"

__all__ = [
    "__version__",
    "RunupError",
    "DataFormatError",
    "UnitError",
    "FitError",
    "Run",
    "RunMetadata",
    "Probe",
    "OperatingSpeeds",
    "SourceFile",
    "ConditionedRun",
    "Curve",
    "Segment",
    "Correction",
    "SlowRoll",
]
