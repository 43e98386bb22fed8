"""What the trait importers share: parsing written values into numbers,
telling discrete traits from continuous ones, and storing measurements in
bulk.

Values are parsed column-wise with pandas string methods, never row by
row. A value that is not a number is kept as written with status
``unparsed`` and a reason naming what is wrong (and the option that would
help); an empty cell or a missing-value mark is status ``missing``.
"""

from __future__ import annotations

from typing import Literal, get_args

import numpy as np
import pandas as pd
from sqlalchemy import insert
from sqlalchemy.orm import Session

from curation.errors import check_choice
from curation.progress import Progress
from curation.store.models import Measurement

__all__ = [
    "MISSING_MARKS",
    "MEASUREMENT_COLUMNS",
    "parse_values",
    "mark_discrete",
    "store_measurements",
    "check_decimal",
    "DECIMAL_MARKS",
    "DecimalMark",
    "insert_rows",
]


#: The decimal marks written values may use.
DecimalMark = Literal[".", ","]
DECIMAL_MARKS: tuple[str, ...] = get_args(DecimalMark)

#: Written marks read as "no value" (case-insensitive; common practice of
#: spreadsheets and R/pandas exports).
MISSING_MARKS = frozenset({"na", "n/a", "nan", "null", "none", "-", "--", "?", "\u2013", "\u2014"})

#: The columns of a measurement frame, as :func:`store_measurements` expects.
MEASUREMENT_COLUMNS = [
    "row_number",
    "written_name",
    "specimen_id",
    "institution",
    "trait",
    "value_written",
    "value_number",
    "unit",
    "sex",
    "life_stage",
    "status",
    "reason",
]

_POINT_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
# Decimal comma, with an optional point (or thin space) for thousands: 1.234,5
_COMMA_NUMBER = r"[+-]?(?:\d{1,3}(?:\.\d{3})+|\d+)?(?:,\d+)?(?:[eE][+-]?\d+)?"


def check_decimal(decimal: str) -> str:
    """Return ``decimal`` if it is ``.`` or ``,`` (:data:`DECIMAL_MARKS`).

    Raises:
        InputError: any other mark.
    """
    return check_choice(decimal, DECIMAL_MARKS, "decimal")


def parse_values(written: pd.Series, *, decimal: str = ".") -> pd.DataFrame:
    """Parse written values into numbers, column-wise.

    Args:
        written: the values as written (strings; ``None``/NaN taken as empty).
        decimal: the decimal mark, ``.`` or ``,`` (with ``,`` a point may
            group thousands, as in ``1.234,5``).

    Returns:
        A frame with the same index and columns ``value_written`` (the text,
        stripped of surrounding blanks; ``None`` when empty), ``value_number``
        (float or NaN), ``status`` (``ok``, ``unparsed`` or ``missing``) and
        ``reason`` (``None`` when ok).
    """
    check_decimal(decimal)
    text = written.astype(object).where(written.notna(), "").str.strip()
    lowered = text.str.lower()
    empty = text == ""
    mark = lowered.isin(MISSING_MARKS)
    if decimal == ".":
        valid = text.str.fullmatch(_POINT_NUMBER)
        normal = text
        other_mark = text.str.fullmatch(r"[+-]?\d*,\d+(?:[eE][+-]?\d+)?")
        other_reason = "has a decimal comma; if the file writes decimal commas, use --decimal ','"
    else:
        valid = text.str.fullmatch(_COMMA_NUMBER) & text.str.contains(r"\d", regex=True)
        normal = text.str.replace(".", "", regex=False).str.replace(",", ".", regex=False)
        other_mark = text.str.fullmatch(r"[+-]?\d*\.\d+(?:[eE][+-]?\d+)?") & ~valid
        other_reason = "has a decimal point but --decimal ',' was given; check the value"
    numbers = pd.to_numeric(normal.where(valid & ~empty), errors="coerce")
    parsed = numbers.notna() & np.isfinite(numbers.fillna(0.0))
    has_digit = text.str.contains(r"\d", regex=True)
    status = np.select([empty | mark, parsed], ["missing", "ok"], default="unparsed")
    reason = np.select(
        [
            empty,
            mark,
            parsed,
            other_mark.fillna(False),
            has_digit,
        ],
        [
            "empty",
            "written as a missing-value mark",
            "",
            other_reason,
            "not a plain number (text beside the digits, a range or a qualifier)",
        ],
        default="not a number",
    )
    result = pd.DataFrame(
        {
            "value_written": text.where(~empty, None),
            "value_number": numbers.where(parsed),
            "status": status,
            "reason": pd.Series(reason, index=written.index).where(~parsed, None),
        },
        index=written.index,
    )
    return result


def mark_discrete(frame: pd.DataFrame, kinds: dict[str, str]) -> list[str]:
    """Treat the values of discrete traits as states, not failed numbers.

    A trait is discrete when its stored definition (``kinds``: trait name ->
    ``continuous``/``discrete``) says so, or, when it has
    no definition, when none of its written values is a number (a column of
    states such as ``Torgersen`` or ``winged``). Its values that are written
    get status ``ok`` with no number; a trait defined as continuous keeps
    its ``unparsed`` values.

    Returns:
        The names of the traits read as discrete, sorted. ``frame`` (with the
        columns of :func:`parse_values` and ``trait``) is changed in place.
    """
    if frame.empty:
        return []
    written = frame["status"] != "missing"
    numeric_count = (frame["status"] == "ok").groupby(frame["trait"]).sum()
    written_count = written.groupby(frame["trait"]).sum()
    discrete = sorted(
        str(trait)
        for trait in written_count.index
        if kinds.get(trait) == "discrete"
        or (trait not in kinds and numeric_count.get(trait, 0) == 0 and written_count[trait] > 0)
    )
    if discrete:
        rows = frame["trait"].isin(discrete) & written
        frame.loc[rows, "status"] = "ok"
        frame.loc[rows, "reason"] = None
        frame.loc[rows, "value_number"] = np.nan
    return discrete


def insert_rows(session: Session, table: str, columns: list[str], rows: list[tuple]) -> None:
    """Insert ``rows`` (tuples in ``columns`` order) into ``table`` with one
    executemany on the session's own connection (so inside its transaction),
    skipping the per-row parameter processing of an ORM or Core insert."""
    if not rows:
        return
    connection = session.connection()
    style = connection.dialect.paramstyle
    if style == "qmark":
        marks = ", ".join("?" for _ in columns)
    elif style in ("format", "pyformat"):
        marks = ", ".join("%s" for _ in columns)
    else:  # any other driver: SQLAlchemy's own bulk insert
        table_object = Measurement.metadata.tables[table]
        session.execute(insert(table_object), [dict(zip(columns, r, strict=True)) for r in rows])
        return
    quoted = ", ".join(connection.dialect.identifier_preparer.quote(c) for c in columns)
    connection.exec_driver_sql(f"INSERT INTO {table} ({quoted}) VALUES ({marks})", rows)


def store_measurements(
    session: Session,
    trait_source_id: int,
    frame: pd.DataFrame,
    *,
    chunk_size: int = 20_000,
    progress: Progress | None = None,
) -> dict[str, int]:
    """Insert ``frame``'s rows as measurements of one trait source, in bulk.

    Args:
        frame: columns :data:`MEASUREMENT_COLUMNS` (missing optional ones are
            taken as empty).
        chunk_size: rows per executemany batch; bounds the memory held in
            Python objects at once.

    Returns:
        Counts: ``measurements`` and one per status.
    """
    total = len(frame)
    for column in MEASUREMENT_COLUMNS:
        if column not in frame.columns:
            frame[column] = None
    names = ["trait_source_id", *MEASUREMENT_COLUMNS]
    for start in range(0, total, chunk_size):
        part = frame.iloc[start : start + chunk_size]
        # Plain Python values column by column (NaN -> None), zipped into
        # rows: much cheaper than one dict per row.
        values = [[trait_source_id] * len(part)]
        for column in MEASUREMENT_COLUMNS:
            series = part[column]
            data = series.to_numpy(dtype=object)
            missing = pd.isna(data)
            if missing.any():
                data = data.copy()
                data[missing] = None
            values.append(data.tolist())
        insert_rows(session, Measurement.__table__.name, names, list(zip(*values, strict=True)))
        if progress is not None:
            progress(min(start + chunk_size, total), total)
    counts = {"measurements": total}
    for status in ("ok", "unparsed", "missing"):
        counts[status] = int((frame["status"] == status).sum())
    return counts
