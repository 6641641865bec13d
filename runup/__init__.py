"""runup: critical speeds, amplification factors and damping from run-up records.

The flow is one way: a data file is read into a :class:`Run` (:func:`read_run`, or
:func:`waveform_vectors` for raw waveforms), conditioned into a :class:`ConditionedRun`
(:func:`condition`), and identified into :class:`Critical` results (:func:`identify`),
which :func:`to_frame` turns into a pandas DataFrame; :func:`judge` checks them against a
rule set (:func:`load_rules`) and :func:`compare` against a prediction
(:func:`read_predicted`).  Plots are in :mod:`runup.plots`.

Results support, and never replace, engineering judgement; acceptance follows the
purchase specification, the applicable standards, local codes and licensed practice.
"""

from ._version import __version__
from .batch import BatchResult, run_batch
from .compare import Agreement, compare
from .conditioning import condition
from .criteria import CheckResult, available_rule_sets, judge, load_rules
from .critical import (
    Critical,
    Identification,
    Interval,
    ProbeDetail,
    SplitBranch,
    SplitPair,
    to_frame,
)
from .errors import DataFormatError, FitError, RunupError, UnitError
from .fingerprint import Fingerprint, fingerprint
from .identify import identify, identify_conditioned
from .io import read_run
from .io.predicted import Predicted, read_predicted
from .io.write import write_run
from .review import Review, read_review
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
from .stiffness import StiffnessEstimate, estimate_support_stiffness
from .subtract import subtract
from .vectors import SynchronousVectors, waveform_vectors

__all__ = [
    "__version__",
    "read_run",
    "write_run",
    "waveform_vectors",
    "SynchronousVectors",
    "condition",
    "identify",
    "identify_conditioned",
    "to_frame",
    "read_review",
    "Review",
    "load_rules",
    "available_rule_sets",
    "judge",
    "CheckResult",
    "read_predicted",
    "Predicted",
    "compare",
    "Agreement",
    "estimate_support_stiffness",
    "StiffnessEstimate",
    "subtract",
    "fingerprint",
    "Fingerprint",
    "run_batch",
    "BatchResult",
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
    "SplitPair",
    "SplitBranch",
    "Identification",
    "Interval",
    "RunupError",
    "DataFormatError",
    "UnitError",
    "FitError",
]
