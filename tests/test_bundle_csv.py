"""The bundle's CSV writer against outside readers: Python's csv module
(RFC 4180 quoting) and pandas.read_csv, over a gallery of awkward tables,
and Python's own float parser for exact round trips of numbers."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from curation.bundle import files
from curation.bundle.files import write_csv

GALLERY = {
    "empty table": pd.DataFrame({"a": pd.Series(dtype=float), "b": pd.Series(dtype=object)}),
    "one row": pd.DataFrame({"tip_label": ["Alpha_one"], "mass": [11.0]}),
    "one column with empty text": pd.DataFrame({"note": ["", "x", None, ""]}),
    "quotes, commas and line breaks": pd.DataFrame(
        {"text": ['he said "hi"', "a,b", "two\nlines", "cr\rhere", "plain", "'single'"]}
    ),
    "unicode": pd.DataFrame({"name": ["Æthiops ñandú", "Straße", "日本"], "n": [1, 2, 3]}),
    "missing values of every kind": pd.DataFrame(
        {
            "float": [np.nan, 1.5, np.inf, -np.inf],
            "int": pd.array([1, None, 3, 4], dtype="Int64"),
            "flag": pd.array([True, None, False, True], dtype="boolean"),
            "text": ["x", None, np.nan, ""],
        }
    ),
    "booleans": pd.DataFrame({"used": [True, False, True]}),
    "mixed objects": pd.DataFrame({"thing": [1, "two", 3.5, None]}),
    "header needing quotes": pd.DataFrame({"a,b": [1], 'say "x"': ["y"]}),
}


def _expected_rows(frame: pd.DataFrame) -> list[list[str]]:
    """What each row should say, spelled by Python itself: repr of floats
    (shortest round trip), str of the rest, missing values empty."""
    rows = []
    for values in frame.itertuples(index=False):
        row = []
        for value in values:
            if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
                row.append("")
            elif isinstance(value, (float, np.floating)):
                row.append(str(float(value)))
            else:
                row.append(str(value))
        rows.append(row)
    return rows


@pytest.mark.parametrize("case", sorted(GALLERY))
def test_csv_module_reads_back_every_field(case: str, tmp_path: Path) -> None:
    frame = GALLERY[case]
    path = tmp_path / "t.csv"
    write_csv(frame, path)
    assert path.read_bytes().endswith(b"\n")
    # Python's csv module is the reference reader of RFC 4180 quoting.
    with path.open(encoding="utf-8", newline="") as handle:
        header, *rows = list(csv.reader(handle))
    assert header == [str(c) for c in frame.columns]
    expected = _expected_rows(frame)
    assert len(rows) == len(expected)
    for got, want in zip(rows, expected, strict=True):
        for cell, text in zip(got, want, strict=True):
            if text and _is_float_text(text):
                # Numbers may be spelled differently ("1" for 1.0) but must
                # read back to the same float exactly.
                assert float(cell) == float(text) or (math.isnan(float(text)))
            else:
                assert cell == text


def _is_float_text(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return "." in text or "e" in text or "inf" in text


@pytest.mark.parametrize("case", sorted(GALLERY))
def test_pandas_reads_back_the_same_table(case: str, tmp_path: Path) -> None:
    frame = GALLERY[case]
    path = tmp_path / "t.csv"
    write_csv(frame, path)
    # pandas.read_csv as a second reader: the same shape and the same
    # numbers (compared as floats; missing stays missing).
    back = pd.read_csv(path, keep_default_na=False, dtype=str)
    assert list(back.columns) == [str(c) for c in frame.columns]
    assert len(back) == len(frame)
    for column in frame.columns:
        if frame[column].dtype.kind == "f":
            got = [float(t) if t else math.nan for t in back[str(column)]]
            np.testing.assert_array_equal(got, frame[column].to_numpy())


def test_large_tables_are_written_in_slices(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    frame = pd.DataFrame(
        {"i": np.arange(25), "x": np.arange(25) / 7, "s": [f"r{i}" for i in range(25)]}
    )
    whole = tmp_path / "whole.csv"
    write_csv(frame, whole)
    monkeypatch.setattr(files, "_CSV_SLICE_ROWS", 4)
    sliced = tmp_path / "sliced.csv"
    write_csv(frame, sliced)
    assert sliced.read_bytes() == whole.read_bytes()
    assert len(whole.read_text().splitlines()) == 26


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False), min_size=1, max_size=30))
def test_floats_read_back_exactly(values: list[float]) -> None:
    import tempfile

    with tempfile.TemporaryDirectory() as scratch:
        path = Path(scratch) / "f.csv"
        write_csv(pd.DataFrame({"x": values}), path)
        lines = path.read_text().splitlines()[1:]
    # Python's float parser is the oracle: the text reads back to the very
    # same double.
    assert [float(line) for line in lines] == values


@settings(max_examples=60, deadline=None)
@given(
    st.lists(
        st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=12),
        min_size=1,
        max_size=20,
    )
)
def test_text_reads_back_exactly(values: list[str]) -> None:
    import tempfile

    frame = pd.DataFrame({"text": values, "n": range(len(values))}, dtype=object)
    with tempfile.TemporaryDirectory() as scratch:
        path = Path(scratch) / "s.csv"
        write_csv(frame, path)
        with path.open(encoding="utf-8", newline="") as handle:
            rows = list(csv.reader(handle))[1:]
    # The csv module (RFC 4180) reads every field back as written.
    assert [row[0] for row in rows] == values
