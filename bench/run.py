"""Run every benchmark in this folder and print one table.

Each ``bench_*.py`` module defines ``run() -> list[dict]`` whose rows carry
``benchmark``, ``measure``, ``value``, ``unit`` and ``target``. Timings are
medians of repeated runs; compare the ratios, since shared machines are
noisy.

Each module runs in a process of its own, so that a memory figure one
benchmark takes of its process (its high-water mark) cannot include what
an earlier benchmark used.

Usage: python bench/run.py [NAME ...]   (NAME filters benchmark modules)
"""

from __future__ import annotations

import importlib.util
import json
import os
import platform
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent


def _run_module(path: Path) -> list[dict]:
    """Import ``path`` and return its rows (in this process)."""
    sys.path.insert(0, str(HERE.parent))
    spec = importlib.util.spec_from_file_location(path.stem, path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.run()


def _run_in_child(path: Path) -> list[dict]:
    """Run one benchmark module in a fresh Python process; return its rows."""
    done = subprocess.run(
        [sys.executable, str(Path(__file__).resolve()), "--module", str(path)],
        stdout=subprocess.PIPE,
        text=True,
        check=True,
    )
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv: list[str]) -> int:
    if argv[:1] == ["--module"]:
        rows = _run_module(Path(argv[1]))
        print(json.dumps(rows, default=lambda v: v.item() if hasattr(v, "item") else str(v)))
        return 0
    rows: list[dict] = []
    for path in sorted(HERE.glob("bench_*.py")):
        if argv and not any(name in path.stem for name in argv):
            continue
        print(f"running {path.name} ...", flush=True)
        rows.extend(_run_in_child(path))
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
