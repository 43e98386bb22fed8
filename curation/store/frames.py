"""Reading many rows of the store into pandas quickly.

Building a SQLAlchemy row object per result row costs more than the query
itself for a million measurements, so large reads take the driver's plain
tuples. Only for statements whose columns need no type processing by
SQLAlchemy (numbers and text; not datetimes or JSON).
"""

from __future__ import annotations

from typing import Any

import pandas as pd
from sqlalchemy.orm import Session

__all__ = ["select_frame"]


def select_frame(
    session: Session, statement: Any, columns: list[str] | None = None
) -> pd.DataFrame:
    """Run a Core ``select`` of plain number and text columns in
    ``session``'s transaction and return its rows as a DataFrame.

    Returns:
        One column per selected column (named ``columns`` when given, else
        by the statement's column keys), in the statement's order.
    """
    result = session.connection().execute(statement)
    names = columns or list(result.keys())
    cursor = result.cursor  # the driver's cursor: tuples, no row objects
    rows = cursor.fetchall() if cursor is not None else []
    result.close()
    return pd.DataFrame.from_records(rows, columns=names, coerce_float=True)
