"""Trait curation at scale: 1,000,000 measurements of 20 traits over 50,000
species through conversion, fault flags, species values and the audit,
beside a plain pandas groupby of mean, SD and median on the same rows (the
floor: what aggregation alone costs, with no conversion or checks).

Each repeat runs in a fresh child process so that its peak resident memory
is its own. Run: python bench/run.py traits   (or python -m bench.bench_traits)
"""

from __future__ import annotations

import json
import statistics
import subprocess
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]

N_ROWS = 1_000_000
N_TRAITS = 20
N_SPECIES = 50_000
REPEATS = 3
TIME_TARGET = 20.0
MEMORY_TARGET_MB = 2048.0


def _own_peak_mb() -> float:
    """This process's own memory high-water mark (VmHWM): ru_maxrss of a
    child would also count the parent's pages it shared before exec."""
    with open("/proc/self/status") as status:
        kb = next(int(line.split()[1]) for line in status if line.startswith("VmHWM:"))
    return kb / 1024


def _child() -> None:
    import pandas as pd

    from curation.demo.benchmark_data import benchmark_trait_definitions, generate_measurements
    from curation.traits.audit import audit_frame
    from curation.traits.frame import prepare_frame
    from curation.traits.species import aggregate_species

    raw = generate_measurements(N_SPECIES, N_TRAITS, N_ROWS)
    raw["id"] = range(1, len(raw) + 1)
    raw["priority"] = raw["trait_source_id"] * 10
    definitions = benchmark_trait_definitions(N_TRAITS)
    definitions["states"] = [[] for _ in range(len(definitions))]
    definitions["state_map"] = [{} for _ in range(len(definitions))]
    definitions["description"] = ""
    tips = sorted(raw["tip_label"].dropna().unique())
    names = pd.DataFrame({"trait_source_id": [1, 2, 3], "name": ["s1", "s2", "s3"]})

    start = time.perf_counter()
    frame = prepare_frame(raw, definitions)
    prepared = time.perf_counter()
    values = aggregate_species(frame)
    aggregated = time.perf_counter()
    audit_frame(frame, tips, names)
    audited = time.perf_counter()

    floor_start = time.perf_counter()
    ok = raw[raw["status"] == "ok"]
    ok.groupby(["tip_label", "trait"])["value_number"].agg(["size", "mean", "std", "median"])
    floor = time.perf_counter() - floor_start

    planted = raw["planted"].isin(["unit_slip", "outlier", "duplicate"])
    caught = frame.loc[planted.to_numpy(), "excluded"].mean()
    clean = (raw["planted"] == "") & (raw["status"] == "ok")
    flagged_clean = frame.loc[clean.to_numpy(), "excluded"].mean()
    print(
        json.dumps(
            {
                "convert_and_flag": prepared - start,
                "species_values": aggregated - prepared,
                "audit": audited - aggregated,
                "total": audited - start,
                "floor": floor,
                "species_rows": len(values),
                "planted_caught": float(caught),
                "clean_excluded": float(flagged_clean),
                "peak_mb": _own_peak_mb(),
            }
        )
    )


def run() -> list[dict]:
    results = []
    peaks = []
    for _ in range(REPEATS):
        done = subprocess.run(
            [sys.executable, "-m", "bench.bench_traits", "--child"],
            capture_output=True,
            text=True,
            check=True,
            cwd=REPO,
        )
        results.append(json.loads(done.stdout.strip().splitlines()[-1]))
        peaks.append(results[-1]["peak_mb"])

    def median(key: str) -> float:
        return statistics.median(r[key] for r in results)

    total = median("total")
    rows = [
        {
            "benchmark": "traits",
            "measure": f"{name.replace('_', ' ')} (median of {REPEATS})",
            "value": median(name),
            "unit": "s",
            "target": "",
        }
        for name in ("convert_and_flag", "species_values", "audit")
    ]
    rows += [
        {
            "benchmark": "traits",
            "measure": "total: 1M rows, 20 traits, 50k species",
            "value": total,
            "unit": "s",
            "target": f"< {TIME_TARGET:g} s",
        },
        {
            "benchmark": "traits",
            "measure": "floor: pandas groupby mean/SD/median only",
            "value": median("floor"),
            "unit": "s",
            "target": "",
        },
        {
            "benchmark": "traits",
            "measure": "ratio total / floor",
            "value": total / median("floor"),
            "unit": "x",
            "target": "",
        },
        {
            "benchmark": "traits",
            "measure": "peak resident memory (max over runs)",
            "value": max(peaks),
            "unit": "MB",
            "target": f"< {MEMORY_TARGET_MB:g} MB",
        },
        {
            "benchmark": "traits",
            "measure": "planted slips/outliers/duplicates excluded",
            "value": median("planted_caught"),
            "unit": "share",
            # About one value per species and trait here, so within-species
            # rules rarely apply; the demo's planted faults are all caught
            # (tests/test_traits_demo.py).
            "target": "(informative)",
        },
        {
            "benchmark": "traits",
            "measure": "clean values excluded",
            "value": median("clean_excluded"),
            "unit": "share",
            "target": "<= 0.01",
        },
    ]
    return rows


if __name__ == "__main__":
    if "--child" in sys.argv:
        _child()
    else:
        for row in run():
            print(row)
