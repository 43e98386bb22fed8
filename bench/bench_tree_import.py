"""Benchmark of reading and importing a posterior sample of trees.

An invented, seeded posterior sample (made by ``generate_tree_set`` of
``curation.demo.phylogeny``: NEXUS with TAXA, TRANSLATE, tree header
comments [&lnP=...] and a branch comment [&rate=...] on every branch, as
Bayesian samplers write them) is read by tipledger's own reader and by
DendroPy (``TreeList.get`` with ``preserve_underscores=True``), the baseline,
side by side. The full import into a SQLite store is timed too, and the
reader with a burn-in and thinning.

Targets: our reader at least as fast as DendroPy reading the same file, and
an import of 500 trees of 200 tips well under a minute on 2 cores.
"""

from __future__ import annotations

import statistics
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

TREES = 500
TIPS = 200
REPEATS = 3


def _median_seconds(action: Callable[[], object], repeats: int = REPEATS) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def run() -> list[dict]:
    import dendropy

    from curation.demo.phylogeny import generate_tree_set
    from curation.imports.trees import import_trees, read_tree_file
    from curation.store import create_store

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "posterior.nex"
        path.write_text(generate_tree_set(TREES, TIPS, seed=7), encoding="utf-8")
        size = f"{TREES} trees x {TIPS} tips"

        ours = _median_seconds(lambda: read_tree_file(path))
        baseline = _median_seconds(
            lambda: dendropy.TreeList.get(path=str(path), schema="nexus", preserve_underscores=True)
        )
        thinned = _median_seconds(lambda: read_tree_file(path, burn_in=TREES // 10, keep_every=10))

        counter = iter(range(REPEATS))

        def import_once() -> None:
            with create_store(Path(folder) / f"store{next(counter)}.db") as store:
                import_trees(store, path)

        imported = _median_seconds(import_once)
    return [
        {
            "benchmark": "tree import",
            "measure": f"read NEXUS, {size} (ours)",
            "value": ours,
            "unit": "s",
            "target": "<= DendroPy",
        },
        {
            "benchmark": "tree import",
            "measure": f"read NEXUS, {size} (DendroPy)",
            "value": baseline,
            "unit": "s",
            "target": "baseline",
        },
        {
            "benchmark": "tree import",
            "measure": "ratio DendroPy / ours",
            "value": baseline / ours,
            "unit": "x",
            "target": ">= 1",
        },
        {
            "benchmark": "tree import",
            "measure": "read, burn-in 10%, keep every 10th",
            "value": thinned,
            "unit": "s",
            "target": "< read all / 5",
        },
        {
            "benchmark": "tree import",
            "measure": f"import into SQLite, {size}",
            "value": imported,
            "unit": "s",
            "target": "< 60",
        },
    ]


if __name__ == "__main__":
    for row in run():
        print(row)
