"""Benchmark: making and verifying a bundle of a 50,000-tip tree with 20
traits from 1,000,000 measurements (invented benchmark data of the demo
generator), without the covariance matrix.

The store is built once through the real importers, trait definitions and
name matching (its build time is printed, not judged). Each bundle and
each verify then runs in a fresh Python process so that its peak resident
memory (the child's own VmHWM, imports included) is its own; times are
wall-clock medians of the repeats.

Targets: bundle < 30 s, peak memory < 2 GB; verify < 10 s.

The issue names no baseline, so two are measured beside the targets for
scale: the traits stage alone (converting, flagging and aggregating the
same measurements, which every bundle runs), and coreutils ``sha256sum -c``
of the bundle's checksum list (the least any verification must do).

Usage: python -m bench.bench_bundle [TIPS ROWS]
"""

from __future__ import annotations

import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TIPS = 50_000
ROWS = 1_000_000
TRAITS = 20
REPEATS = 3
REPO = Path(__file__).resolve().parents[1]

CHILD = """
import sys, time
from curation.bundle import BundleOptions, make_bundle, verify_bundle
from curation.store import open_store
what, store, folder, tree = sys.argv[1:5]
start = time.perf_counter()
if what == "bundle":
    with open_store(store) as opened:
        options = BundleOptions(tree_id=int(tree), diagnostics=False)
        make_bundle(opened, folder, options, replace=True)
elif what == "traits":
    from curation.store.models import Tree
    from curation.traits import aggregate_species, measurements_frame
    with open_store(store) as opened:
        with opened.reading() as session:
            tree_set = session.get(Tree, int(tree)).tree_set_id
        aggregate_species(measurements_frame(opened, tree_set))
else:
    report = verify_bundle(folder)
    assert report.ok, report.problems[:5]
seconds = time.perf_counter() - start
# The high-water mark of this process's own memory map: ru_maxrss would
# also count the parent's pages that the child shared before exec.
with open("/proc/self/status") as status:
    peak_kb = next(int(line.split()[1]) for line in status if line.startswith("VmHWM:"))
print(seconds, peak_kb)
"""


def build_store(folder: Path, tips: int, rows: int) -> tuple[str, int, float]:
    """Build the benchmark store; return (url, tree id, seconds taken)."""
    from sqlalchemy import select

    from curation.demo.benchmark_data import benchmark_trait_definitions, generate_measurements
    from curation.demo.phylogeny import generate_tree
    from curation.imports.traits import import_traits
    from curation.imports.trees import import_trees
    from curation.names.decisions import reconcile_names
    from curation.store import create_store
    from curation.store.models import Tree
    from curation.traits import define_traits
    from curation.trees.arrays import TreeArrays, parse_newick, to_newick

    start = time.perf_counter()
    frame = generate_measurements(tips, TRAITS, rows)
    # The generator's measurements name their own species: give the tree's
    # tips those labels (and invented fillers for species never measured).
    tree = parse_newick(generate_tree(tips))
    measured = sorted(set(frame["tip_label"].dropna()))
    fillers = [f"Fillerus_species_{i}" for i in range(tips - len(measured))]
    labels = list(tree.labels)
    for node, label in zip(tree.tips, measured + fillers, strict=True):
        labels[int(node)] = label
    tree = TreeArrays(tree.parent, tree.edge_length, labels, tree.rooted)
    tree_file = folder / "tree.nwk"
    tree_file.write_text(to_newick(tree) + "\n", encoding="utf-8")
    table = frame[["written_name", "specimen_id", "institution", "trait", "value_written", "unit"]]
    table = table.rename(columns={"written_name": "taxon", "value_written": "value"})
    table.to_csv(folder / "measurements.csv", index=False)
    definitions = benchmark_trait_definitions(TRAITS).to_dict(orient="records")
    (folder / "traits.json").write_text(json.dumps(definitions), encoding="utf-8")
    url = f"sqlite:///{folder / 'bench.db'}"
    with create_store(url) as store:
        tree_set = import_trees(store, tree_file).tree_set_id
        define_traits(store, folder / "traits.json")
        import_traits(store, folder / "measurements.csv", layout="long")
        reconcile_names(store, tree_set)
        with store.reading() as session:
            tree_id = int(session.scalar(select(Tree.id).where(Tree.tree_set_id == tree_set)))
    return url, tree_id, time.perf_counter() - start


def _child(what: str, url: str, bundle: Path, tree_id: int) -> tuple[float, float]:
    """Run one step in a fresh process; return (seconds, peak RSS in MB)."""
    # From the repository's folder, so that ``curation`` imports as the
    # package there.
    done = subprocess.run(
        [sys.executable, "-c", CHILD, what, url, str(bundle), str(tree_id)],
        capture_output=True,
        text=True,
        cwd=REPO,
        check=False,
    )
    if done.returncode != 0:
        raise RuntimeError(f"{what} failed:\n{done.stderr}")
    seconds, peak_kb = done.stdout.strip().splitlines()[-1].split()
    return float(seconds), int(peak_kb) / 1024


def _sha256sum(bundle: Path) -> float:
    """Seconds coreutils takes to check the bundle's checksum list."""
    start = time.perf_counter()
    subprocess.run(["sha256sum", "--quiet", "-c", "SHA256SUMS"], cwd=bundle, check=True)
    return time.perf_counter() - start


def run(tips: int = TIPS, rows: int = ROWS) -> list[dict]:
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        url, tree_id, built = build_store(folder, tips, rows)
        bundle = folder / "bundle"
        made = [_child("bundle", url, bundle, tree_id) for _ in range(REPEATS)]
        checked = [_child("verify", url, bundle, tree_id) for _ in range(REPEATS)]
        stage = [_child("traits", url, bundle, tree_id)[0] for _ in range(REPEATS)]
        summed = [_sha256sum(bundle) for _ in range(REPEATS)]
    name = "bundle"
    size = f"{tips:,} tips, {TRAITS} traits, {rows:,} rows"
    return [
        {
            "benchmark": name,
            "measure": f"store build ({size})",
            "value": built,
            "unit": "s",
            "target": "(setup, not judged)",
        },
        {
            "benchmark": name,
            "measure": "make-bundle (no matrix, no diagnostics), median wall",
            "unit": "s",
            "value": statistics.median(t for t, _ in made),
            "target": "< 30 s",
        },
        {
            "benchmark": name,
            "measure": "baseline: traits stage alone (convert, flag, aggregate)",
            "unit": "s",
            "value": statistics.median(stage),
            "target": "(scale)",
        },
        {
            "benchmark": name,
            "measure": "make-bundle / traits stage alone",
            "unit": "x",
            "value": statistics.median(t for t, _ in made) / statistics.median(stage),
            "target": "(scale)",
        },
        {
            "benchmark": name,
            "measure": "make-bundle, peak RSS (largest run)",
            "unit": "MB",
            "value": max(m for _, m in made),
            "target": "< 2048 MB",
        },
        {
            "benchmark": name,
            "measure": "verify-bundle, median wall",
            "unit": "s",
            "value": statistics.median(t for t, _ in checked),
            "target": "< 10 s",
        },
        {
            "benchmark": name,
            "measure": "verify-bundle, peak RSS (largest run)",
            "unit": "MB",
            "value": max(m for _, m in checked),
            "target": "(informative)",
        },
        {
            "benchmark": name,
            "measure": "baseline: sha256sum -c of the bundle",
            "unit": "s",
            "value": statistics.median(summed),
            "target": "(scale)",
        },
        {
            "benchmark": name,
            "measure": "verify-bundle / sha256sum -c",
            "unit": "x",
            "value": statistics.median(t for t, _ in checked) / statistics.median(summed),
            "target": "(scale)",
        },
    ]


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:3]]
    for row in run(*args):
        print(f"{row['measure']:50} {row['value']:10.2f} {row['unit']:3} {row['target']}")
