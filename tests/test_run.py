"""Tests of the data model's checks (runup.run.Run) on tables built by hand.

All data here is synthetic, invented for the tests.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from runup.errors import DataFormatError
from runup.run import SAMPLE_COLUMNS, Probe, Run, RunMetadata


def table(n: int = 6, **columns) -> pd.DataFrame:
    """A valid samples table of two interleaved probes; ``columns`` replace columns."""
    base = {
        "speed_rpm": np.repeat(1000.0 + 100.0 * np.arange(n // 2), 2),
        "probe": ["B", "A"] * (n // 2),
        "order": 1,
        "amplitude_um_pp": 5.0,
        "phase_lag_deg": 30.0,
        "time_s": np.nan,
        "row": np.arange(1, n + 1),
    }
    base.update(columns)
    return pd.DataFrame(base)


@pytest.mark.parametrize(
    ("column", "values", "fragment", "row"),
    [
        ("speed_rpm", [1000.0, 1000.0, 0.0, 0.0, 1200.0, 1200.0], "speed must be positive, found 0 rpm", 3),
        ("amplitude_um_pp", [1.0, 2.0, 3.0, 4.0, -0.5, 1.0], "amplitude must not be negative, found -0.5", 5),
        ("order", [1, 1, 1, 0, 1, 1], "harmonic order must be a whole number >= 1", 4),
    ],
)
def test_bad_values_are_rejected_naming_column_and_source_row(column, values, fragment, row):
    """A hand-built table with an impossible value is refused, naming the column and the
    source row given in the table's ``row`` column (here rows numbered from 11)."""
    df = table(**{column: values, "row": np.arange(11, 17)})
    with pytest.raises(DataFormatError) as e:
        Run(RunMetadata(), df)
    assert fragment in e.value.message
    assert (e.value.column, e.value.row) == (column, row + 10)


def test_missing_column_is_rejected():
    """A table without one of the sample columns is refused, naming it."""
    with pytest.raises(DataFormatError, match=r"lacks columns \['time_s'\]"):
        Run(RunMetadata(), table().drop(columns="time_s"))


def test_nan_marks_missing_values_and_is_accepted():
    """NaN speed or amplitude is a missing value (conditioning drops it), not an error."""
    run = Run(RunMetadata(), table(speed_rpm=[np.nan, 1000.0, 1000.0, 1100.0, 1100.0, 1200.0],
                                   amplitude_um_pp=[1.0, np.nan, 1.0, 1.0, 1.0, 1.0]))
    assert np.isnan(run.samples["speed_rpm"].iloc[0])


def test_table_is_normalised_and_independent_of_the_callers_frame():
    """Columns come in SAMPLE_COLUMNS order and dtypes with a fresh 0..n-1 index; a later
    change to the caller's frame does not reach the Run (pandas copy semantics)."""
    df = table(order=1.0)[list(reversed(list(SAMPLE_COLUMNS)))]
    df.index = df.index * 3 + 7
    run = Run(RunMetadata(), df)
    assert list(run.samples.columns) == list(SAMPLE_COLUMNS)
    assert [str(t) for t in run.samples.dtypes] == list(SAMPLE_COLUMNS.values())
    assert run.samples.index.equals(pd.RangeIndex(6))
    df.loc[7, "speed_rpm"] = 1.0
    assert run.samples["speed_rpm"].iloc[0] == 1000.0


def test_probes_without_a_definition_get_bare_ones_sorted_by_name():
    """Probes in the samples that the metadata does not describe are added bare, by name."""
    run = Run(RunMetadata(probes=(Probe("B", plane="DE"),)), table(probe=["C", "A", "B"] * 2))
    assert [(p.name, p.plane) for p in run.metadata.probes] == [("B", "DE"), ("A", None), ("C", None)]
    assert run.probe_names == ("C", "A", "B")


def test_checked_constructor_keeps_a_finished_table_and_checks_any_other():
    """The importers' constructor keeps a table already in final form as it is (same values
    as the checking constructor gives) and sends any other table through the checks."""
    df = table().astype({"probe": object})  # text columns are pandas' string dtype by default
    fast = Run._from_checked(RunMetadata(), df, ["A", "B"])
    assert fast.samples is df
    pd.testing.assert_frame_equal(fast.samples, Run(RunMetadata(), df).samples)
    assert [p.name for p in fast.metadata.probes] == ["A", "B"]
    assert Run._from_checked(RunMetadata(), table(), ["A", "B"]).samples["probe"].dtype == object
    with pytest.raises(DataFormatError, match="speed must be positive"):
        Run._from_checked(RunMetadata(), table(speed_rpm=-1.0).astype({"order": float}), ["A", "B"])
