"""Run every benchmark in this folder and print one table.

Each ``bench_*.py`` module defines ``run() -> list[dict]`` whose rows carry
``benchmark``, ``measure``, ``value``, ``unit`` and ``target``. Timings are
medians of repeated runs; compare the ratios, since shared machines are
noisy.

Each module runs in a process of its own (``python -m bench.run --module
bench.bench_x`` from the repository's folder, so that ``bench`` and
``curation`` import as packages), so that a memory figure one benchmark
takes of its process (its high-water mark) cannot include what an earlier
benchmark used.

Usage: python bench/run.py [NAME ...]   (NAME filters benchmark modules)
"""

from __future__ import annotations

import importlib
import json
import os
import platform
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parent


def _run_module(name: str) -> list[dict]:
    """Import the benchmark module ``name`` and return its rows (in this
    process)."""
    return importlib.import_module(name).run()  # type: ignore[no-any-return]


def _run_in_child(name: str) -> list[dict]:
    """Run one benchmark module in a fresh Python process; return its rows."""
    done = subprocess.run(
        [sys.executable, "-m", "bench.run", "--module", name],
        stdout=subprocess.PIPE,
        text=True,
        check=True,
        cwd=REPO,
    )
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv: list[str]) -> int:
    if argv[:1] == ["--module"]:
        rows = _run_module(argv[1])
        print(json.dumps(rows, default=lambda v: v.item() if hasattr(v, "item") else str(v)))
        return 0
    rows: list[dict] = []
    for path in sorted(HERE.glob("bench_*.py")):
        if argv and not any(name in path.stem for name in argv):
            continue
        print(f"running {path.name} ...", flush=True)
        rows.extend(_run_in_child(f"bench.{path.stem}"))
    machine = f"{platform.machine()}, {os.cpu_count()} cores"
    print(f"\nmachine: {machine}, Python {platform.python_version()}")
    header = f"{'benchmark':28} {'measure':44} {'value':>12} {'unit':6} target"
    print(header)
    print("-" * len(header))
    for row in rows:
        value = row["value"]
        shown = f"{value:12.3f}" if isinstance(value, float) else f"{value!s:>12}"
        print(
            f"{row['benchmark']:28} {row['measure']:44} {shown} {row.get('unit', ''):6} "
            f"{row.get('target', '')}"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
