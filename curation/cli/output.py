"""Printing library results in the terminal: DataFrames as tables."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

import pandas as pd
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from curation.cli.app import console

__all__ = ["print_counts", "print_frame", "print_store_summary", "progress_bar"]


def print_frame(title: str, frame: pd.DataFrame, *, limit: int = 50) -> None:
    """Print up to ``limit`` rows of ``frame`` as a table titled ``title``."""
    if frame.empty:
        console.print(f"{title}: none")
        return
    table = Table(title=f"{title} ({len(frame)})", title_justify="left")
    for column in frame.columns:
        table.add_column(str(column))
    for row in frame.head(limit).itertuples(index=False):
        table.add_row(*("" if pd.isna(v) else str(v) for v in row))
    console.print(table)
    if len(frame) > limit:
        console.print(f"... {len(frame) - limit} more rows")


def print_counts(counts: dict[str, Any]) -> None:
    """Print a flat or one-level nested mapping of counts, one per line."""
    for key, value in counts.items():
        if isinstance(value, dict):
            shown = ", ".join(f"{k}: {v}" for k, v in value.items()) or "none"
            console.print(f"{key.replace('_', ' ')}: {shown}")
        else:
            console.print(f"{key.replace('_', ' ')}: {value}")


def print_store_summary(summary: Any) -> None:
    """Print a :class:`~curation.store.summary.StoreSummary`: its counts, then
    what is not settled (stale names, flags and bundles)."""
    print_counts(summary.model_dump(exclude={"staleness", "bundles"}))
    stale = summary.stale_lines()
    if stale:
        console.print("Not settled:")
        for line in stale:
            console.print(f"  - {line}", markup=False)
    elif summary.staleness:
        console.print(
            "Not settled: nothing (every written name has a decision, every measurement "
            "is flagged, every bundle is up to date)"
        )


@contextmanager
def progress_bar(what: str) -> Iterator[Callable[[int, int], None]]:
    """Yield a ``progress(done, total)`` callback for a library function,
    drawn as a bar (cleared when done) once the total is known."""
    with Progress(
        TextColumn(what),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        console=console,
        transient=True,
    ) as bar:
        task = bar.add_task(what, total=None)

        def update(done: int, total: int) -> None:
            bar.update(task, completed=done, total=total)

        yield update
