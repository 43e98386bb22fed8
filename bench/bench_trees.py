"""Benchmark of the tree checks.

1. A 100,000-tip tree: every check (no matrix), including reading the
   Newick text into the array view, against DendroPy only parsing the same
   text, side by side in one run; target: at most 1.5 times DendroPy.
2. A set of 1,000 trees of 500 tips in a store: ``check_trees`` end to end
   (reading the trees from the store, checking, storing the findings with
   one ledger event); target: under 30 s.
Timings are medians of repeats; peak memory is measured by tracemalloc in a
separate pass (tracing slows the code) and as the process's peak RSS.
"""

from __future__ import annotations

import resource
import statistics
import tempfile
import time
import tracemalloc
from pathlib import Path

import dendropy
import numpy as np

from curation.demo.phylogeny import random_tree
from curation.store import create_store
from curation.store.models import TreeSet
from curation.trees.arrays import TreeArrays, parse_newick, to_newick
from curation.trees.checks import check_tree, check_trees
from curation.trees.stored import add_tree

REPEATS = 3


def checked_tree(tips: int, seed: int) -> TreeArrays:
    """A random pure-birth tree, made uneven (terminal branches lengthened
    at random) with a few polytomies and zero-length tips, so that the
    checks find things; lengths written to 6 significant digits."""
    return random_tree(
        tips,
        np.random.default_rng(seed),
        model="pure_birth",
        collapse=0.001,
        tip_noise=0.5,
        zero_tips=0.001,
    )


def _median_seconds(work, repeats: int = REPEATS) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        work()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def _big_tree_rows() -> list[dict]:
    text = to_newick(checked_tree(100_000, 1), precision=6)

    def dendropy_parse() -> None:
        dendropy.Tree.get(data=text, schema="newick", preserve_underscores=True)

    def ours() -> None:
        check_tree(parse_newick(text))

    parsed = parse_newick(text)

    def ours_checks_only() -> None:
        check_tree(parsed)

    # Interleave the two so that machine noise hits both alike.
    dendro_times, our_times = [], []
    for _ in range(REPEATS):
        dendro_times.append(_median_seconds(dendropy_parse, 1))
        our_times.append(_median_seconds(ours, 1))
    dendro = statistics.median(dendro_times)
    mine = statistics.median(our_times)
    checks_only = _median_seconds(ours_checks_only)
    findings = len(check_tree(parse_newick(text)))
    tracemalloc.start()
    check_tree(parse_newick(text))
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return [
        row("100k-tip tree", "DendroPy parse only", dendro, "s", ""),
        row("100k-tip tree", "tipledger parse + all checks", mine, "s", ""),
        row("100k-tip tree", "tipledger all checks on parsed arrays", checks_only, "s", ""),
        row("100k-tip tree", "ratio ours / DendroPy parse", mine / dendro, "x", "<= 1.5"),
        row("100k-tip tree", "findings reported", findings, "", ""),
        row("100k-tip tree", "peak traced memory, parse + checks", peak / 2**20, "MiB", ""),
    ]


def _tree_set_rows() -> list[dict]:
    with tempfile.TemporaryDirectory() as folder:
        store = create_store(Path(folder) / "bench.db")
        with store.transaction() as session:
            tree_set = TreeSet(name="bench posterior", tree_count=0)
            session.add(tree_set)
            session.flush()
            for k in range(1000):
                tree = checked_tree(500, 100 + k)
                add_tree(
                    session, tree_set, tree, index_in_file=k, newick=to_newick(tree, precision=6)
                )
            set_id = tree_set.id
        seconds = _median_seconds(lambda: check_trees(store, set_id))
        report = check_trees(store, set_id)
        store.close()
    return [
        row("1,000 trees x 500 tips", "check_trees end to end (store)", seconds, "s", "< 30"),
        row("1,000 trees x 500 tips", "stored findings per check", len(report.findings), "", ""),
    ]


def row(benchmark: str, measure: str, value: float, unit: str, target: str) -> dict:
    return {
        "benchmark": benchmark,
        "measure": measure,
        "value": value,
        "unit": unit,
        "target": target,
    }


def run() -> list[dict]:
    """Run both benchmarks and return their rows (see bench/run.py)."""
    rows = _big_tree_rows() + _tree_set_rows()
    peak_rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux
    rows.append(row("process", "peak resident memory", peak_rss, "MiB", ""))
    return rows


if __name__ == "__main__":
    for line in run():
        print(line)
