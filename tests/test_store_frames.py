"""Reading large selects in slices gives the frame pandas would build from
all the rows at once (its own inference is the reference), on a real
SQLite file."""

from __future__ import annotations

import sqlite3
import tempfile
from pathlib import Path

import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import column, create_engine, select, table
from sqlalchemy.orm import Session

from curation.store.frames import select_frame

ROWS = st.lists(
    st.tuples(
        st.one_of(st.none(), st.integers(-1000, 1000)),
        st.one_of(st.none(), st.text(alphabet="abcxyz _", max_size=5)),
        st.one_of(st.none(), st.floats(allow_nan=False, allow_infinity=False, width=32)),
    ),
    max_size=25,
)


@settings(max_examples=40, deadline=None)
@given(rows=ROWS, at_a_time=st.integers(1, 7))
def test_slices_give_the_frame_of_all_rows(
    rows: list[tuple[int | None, str | None, float | None]], at_a_time: int
) -> None:
    with tempfile.TemporaryDirectory() as scratch:
        path = Path(scratch) / "rows.db"
        with sqlite3.connect(path) as raw:
            raw.execute("CREATE TABLE t (id INTEGER PRIMARY KEY, i INTEGER, s TEXT, f REAL)")
            raw.executemany("INSERT INTO t (i, s, f) VALUES (?, ?, ?)", rows)
        engine = create_engine(f"sqlite:///{path}")
        rows_table = table("t", column("id"), column("i"), column("s"), column("f"))
        statement = select(rows_table.c.i, rows_table.c.s, rows_table.c.f).order_by(rows_table.c.id)
        with Session(engine) as session:
            got = select_frame(session, statement, ["i", "s", "f"], rows_at_a_time=at_a_time)
            with engine.connect() as connection:
                every = connection.exec_driver_sql("SELECT i, s, f FROM t ORDER BY id").fetchall()
        engine.dispose()
    # pandas inferring over every row at once is the reference.
    expected = pd.DataFrame.from_records(
        [tuple(r) for r in every], columns=["i", "s", "f"], coerce_float=True
    )
    pd.testing.assert_frame_equal(got, expected)
