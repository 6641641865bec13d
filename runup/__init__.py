"""runup: critical speeds, amplification factors and damping from run-up records.

The flow is one way: a data file is read into a :class:`Run` (:func:`read_run`),
conditioned into a :class:`ConditionedRun` (:func:`condition`), and identified into
:class:`Critical` results (:func:`identify`), which :func:`to_frame` turns into a
pandas DataFrame.

Results support, and never replace, engineering judgement; acceptance follows the
purchase specification, the applicable standards, local codes and licensed practice.
"""

from ._version import __version__
from .conditioning import condition
from .critical import Critical, Identification, Interval, ProbeDetail, to_frame
from .errors import DataFormatError, FitError, RunupError, UnitError
from .identify import identify, identify_conditioned
from .io import read_run
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

__all__ = [
    "__version__",
    "read_run",
    "condition",
    "identify",
    "identify_conditioned",
    "to_frame",
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
    "Critical",
    "ProbeDetail",
    "Identification",
    "Interval",
    "RunupError",
    "DataFormatError",
    "UnitError",
    "FitError",
]
