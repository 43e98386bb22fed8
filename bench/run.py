"""Run every benchmark in this folder and print one table.

Each ``bench_*.py`` module defines ``run() -> list[dict]`` whose rows carry
``benchmark``, ``measure``, ``value``, ``unit`` and ``target``. Timings are
medians of repeated runs; compare the ratios, since shared machines are
noisy.

Usage: python bench/run.py [NAME ...]   (NAME filters benchmark modules)
"""

from __future__ import annotations

import importlib.util
import os
import platform
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main(argv: list[str]) -> int:
    sys.path.insert(0, str(HERE.parent))
    rows: list[dict] = []
    for path in sorted(HERE.glob("bench_*.py")):
        if argv and not any(name in path.stem for name in argv):
            continue
        spec = importlib.util.spec_from_file_location(path.stem, path)
        assert spec is not None and spec.loader is not None
        module = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(module)
        print(f"running {path.name} ...", flush=True)
        rows.extend(module.run())
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
