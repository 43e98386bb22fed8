"""Benchmark: importing a long trait table of 1,000,000 rows into a SQLite
store, beside the baseline of only reading the same file with
``pandas.read_csv`` (the floor any importer of the file pays).

Reports the median wall time of the import, the time per million rows,
the ratio to the baseline and the peak memory of the import (tracemalloc:
Python allocations, which include pandas' buffers).

Usage: python -m bench.bench_imports [ROWS]
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd

ROWS = 1_000_000
REPEATS = 3


def write_long_table(path: Path, rows: int, seed: int = 0) -> None:
    """Write an invented long trait table: taxon, specimen, sex, trait, value, unit,
    with about 1 % missing and 0.5 % unparsable values."""
    rng = np.random.default_rng(seed)
    taxa = np.array([f"Velutomys species{i:03d}" for i in range(500)], dtype=object)
    traits = np.array(["body mass", "tail length", "ear length", "hind foot"], dtype=object)
    units = np.array(["g", "mm", "mm", "mm"], dtype=object)
    which = rng.integers(0, len(traits), rows)
    values = np.round(rng.lognormal(3.0, 0.5, rows), 2).astype(str).astype(object)
    faults = rng.random(rows)
    values[faults < 0.01] = ""
    values[(faults >= 0.01) & (faults < 0.015)] = "ca. 20"
    frame = pd.DataFrame(
        {
            "taxon": taxa[rng.integers(0, len(taxa), rows)],
            "specimen": [f"NMX {i}" for i in range(rows)],
            "sex": np.array(["female", "male", ""], dtype=object)[rng.integers(0, 3, rows)],
            "trait": traits[which],
            "value": values,
            "unit": units[which],
        }
    )
    frame.to_csv(path, index=False)


def _time_import(folder: Path, table: Path, attempt: int, *, trace: bool) -> tuple[float, int]:
    from curation.imports.traits import import_traits
    from curation.store import create_store

    with create_store(folder / f"bench-{attempt}-{trace}.db") as store:
        if trace:
            tracemalloc.start()
        start = time.perf_counter()
        import_traits(store, table, layout="long")
        elapsed = time.perf_counter() - start
        peak = 0
        if trace:
            peak = tracemalloc.get_traced_memory()[1]
            tracemalloc.stop()
    return elapsed, peak


def run(rows: int = ROWS) -> list[dict]:
    """Return the benchmark rows (see bench/run.py)."""
    with tempfile.TemporaryDirectory() as name:
        folder = Path(name)
        table = folder / "long.csv"
        write_long_table(table, rows)
        baseline = []
        for _ in range(REPEATS):
            start = time.perf_counter()
            pd.read_csv(table, dtype=str, keep_default_na=False)
            baseline.append(time.perf_counter() - start)
        times = [_time_import(folder, table, i, trace=False)[0] for i in range(REPEATS)]
        _, peak = _time_import(folder, table, 99, trace=True)
        size_mb = table.stat().st_size / 1e6
    median = statistics.median(times)
    base = statistics.median(baseline)
    name = f"import-traits long {rows:,} rows"
    return [
        {"benchmark": name, "measure": "file size", "value": size_mb, "unit": "MB", "target": ""},
        {
            "benchmark": name,
            "measure": "baseline: pandas.read_csv only (median)",
            "value": base,
            "unit": "s",
            "target": "",
        },
        {
            "benchmark": name,
            "measure": "import into SQLite (median)",
            "value": median,
            "unit": "s",
            "target": "< 60 s per million rows",
        },
        {
            "benchmark": name,
            "measure": "import / baseline",
            "value": median / base,
            "unit": "x",
            "target": "",
        },
        {
            "benchmark": name,
            "measure": "peak Python memory of the import",
            "value": peak / 1e6,
            "unit": "MB",
            "target": "< 2000 MB",
        },
    ]


if __name__ == "__main__":
    for row in run(int(sys.argv[1]) if len(sys.argv) > 1 else ROWS):
        print(row)
