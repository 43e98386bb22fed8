"""Reading many rows of the store into pandas quickly.

Building a SQLAlchemy row object per result row costs more than the query
itself for a million measurements, so large reads take the driver's plain
tuples. Only for statements whose columns need no type processing by
SQLAlchemy (numbers and text; not datetimes or JSON).

Rows are fetched in slices and each slice becomes a frame at once, so the
driver's Python objects for a million rows never all exist together (they
take several times the memory of the finished frame).
"""

from __future__ import annotations

from typing import Any

import pandas as pd
from sqlalchemy.orm import Session

__all__ = ["select_frame"]


#: Rows fetched from the driver at a time.
FETCH_ROWS = 100_000


def _frames(cursor: Any, names: list[str], rows_at_a_time: int) -> list[pd.DataFrame]:
    frames = []
    while rows := cursor.fetchmany(rows_at_a_time):
        frames.append(pd.DataFrame.from_records(rows, columns=names, coerce_float=True))
    return frames


def select_frame(
    session: Session,
    statement: Any,
    columns: list[str] | None = None,
    *,
    rows_at_a_time: int = FETCH_ROWS,
) -> pd.DataFrame:
    """Run a Core ``select`` of plain number and text columns in
    ``session``'s transaction and return its rows as a DataFrame.

    Returns:
        One column per selected column (named ``columns`` when given, else
        by the statement's column keys), in the statement's order, with the
        dtypes pandas infers from all the rows at once.
    """
    result = session.connection().execute(statement)
    names = columns or list(result.keys())
    cursor = result.cursor  # the driver's cursor: tuples, no row objects
    frames = _frames(cursor, names, rows_at_a_time) if cursor is not None else []
    result.close()
    if len(frames) <= 1:
        return frames[0] if frames else pd.DataFrame.from_records([], columns=names)
    # A slice may infer another dtype than the whole (a slice of only
    # missing values, or of whole numbers where others have NaN): such
    # columns are joined as objects and inferred again over all rows.
    mixed = [c for c in names if len({str(f[c].dtype) for f in frames}) > 1]
    if mixed:
        frames = [f.astype(dict.fromkeys(mixed, object)) for f in frames]
    frame = pd.concat(frames, ignore_index=True)
    if mixed:
        frame[mixed] = frame[mixed].infer_objects()
    return frame
