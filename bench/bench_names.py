"""Name matching: speed on 50,000 written names against 50,000 tips, beside
difflib (the baseline a user would write) and rapidfuzz's raw cdist over
the same candidate pairs (the floor); and quality on ground truths of
corrupted names (precision of automatic acceptances, recall per stage):
the benchmark names of ``curation.demo.naming.generate_names`` (the timed
set), a harsher mix of the same generator (``HARSH_KINDS``: genus typos,
double typos, more species without a tip; "own corpus") and the demo
scenario itself, reconciled through the store as the demo does. Both
corpora are measured again with changes of genus accepted automatically
(``MatchOptions.accept_genus_changes``; by default they wait for review).

Run: python bench/run.py names   (or python -m bench.bench_names)
"""

from __future__ import annotations

import difflib
import resource
import statistics
import tempfile
import time

import numpy as np
import pandas as pd
from rapidfuzz import process
from rapidfuzz.distance import OSA

from curation.demo.naming import HARSH_KINDS, generate_names
from curation.demo.pipeline import demo_name_decisions
from curation.names.decisions import candidates_of
from curation.names.match import (
    GENUS_CHANGED,
    MatchOptions,
    allowed_edits,
    candidate_blocks,
    fold_spelling,
    match_names,
)
from curation.names.parse import parse_name, parse_names

N_TIPS = 50_000
N_NAMES = 50_000
REPEATS = 3
DIFFLIB_NAMES = 1_000  # timed against all 50,000 tips (about 5 minutes), then scaled


def _peak_rss_mb() -> float:
    # ru_maxrss is in kilobytes on Linux: the process's high-water mark.
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _floor_seconds(written: pd.DataFrame, tips: list[str], result: pd.DataFrame) -> float:
    """Time rapidfuzz's cdist alone over the fuzzy stage's candidate pairs
    (the genus blocks and the epithet blocks), with no other work."""
    options = MatchOptions()
    reached = result[result["stage"].isin(["fuzzy", "genus", "unmatched"])]
    wp = parse_names(reached["written_name"])
    wp = wp[wp["genus"].notna() & wp["epithet"].notna()]
    tp = parse_names(pd.Series(tips))
    tp = tp[tp["genus"].notna()]

    def parts(frame: pd.DataFrame, fold: bool) -> pd.DataFrame:
        both = (frame["epithet"].fillna("") + " " + frame["infraspecific"].fillna("")).str.strip()
        genus = frame["genus"].fillna("").str.lower()
        both = both.str.lower()
        if fold:
            genus, both = fold_spelling(genus), fold_spelling(both)
        return pd.DataFrame({"g": genus.to_numpy(), "e": both.to_numpy()})

    cut = int(allowed_edits(np.array([40]), options)[0]) + options.review_extra_edits
    work = []
    for fold in (True, False):  # the matcher scores both forms
        wf, tf = parts(wp, fold), parts(tp, fold)
        blocks = candidate_blocks(wf, tf, options)
        work.append(
            (
                wf["g"].unique().tolist(),
                tf["g"].unique().tolist(),
                wf["e"].to_numpy(dtype=object),
                tf["e"].to_numpy(dtype=object),
                blocks,
            )
        )
    start = time.perf_counter()
    for w_genera, t_genera, w_e, t_e, blocks in work:
        process.cdist(
            w_genera, t_genera, scorer=OSA.distance, score_cutoff=cut, dtype=np.int8, workers=-1
        )
        for rows, cols, _ in blocks:
            process.cdist(
                w_e[rows].tolist(), t_e[cols].tolist(), scorer=OSA.distance, score_cutoff=cut
            )
    return time.perf_counter() - start


def quality(written: pd.DataFrame, result: pd.DataFrame) -> pd.DataFrame:
    """Per stage: names, automatic acceptances, precision of those, recall
    (true tip accepted automatically or ranked first for review) and the
    share of names with a true tip accepted to it automatically."""
    merged = written.drop_duplicates("written_name").merge(result, on="written_name")
    rows = []
    for stage, group in [("all", merged), *merged.groupby("stage")]:
        auto = group[group["status"] == "accepted"]
        truth = group[group["true_tip"].notna()]
        rows.append(
            {
                "stage": stage,
                "names": len(group),
                "accepted": len(auto),
                "precision": float((auto["tip_label"] == auto["true_tip"]).mean())
                if len(auto)
                else float("nan"),
                "recall": float((truth["tip_label"] == truth["true_tip"]).mean())
                if len(truth)
                else float("nan"),
                "automatic": float(
                    (
                        (truth["status"] == "accepted") & (truth["tip_label"] == truth["true_tip"])
                    ).mean()
                )
                if len(truth)
                else float("nan"),
                "among_candidates": float(
                    np.mean(
                        [
                            t in {c[0] for c in cands}
                            for t, cands in zip(truth["true_tip"], truth["candidates"], strict=True)
                        ]
                    )
                )
                if len(truth)
                else float("nan"),
            }
        )
    return pd.DataFrame(rows)


def demo_coverage() -> dict[str, float]:
    """Run the demo's steps up to the names stage on a new store and
    compare the decisions with the scenario's ground truth: false automatic
    acceptances, and names with a true tip that are neither accepted to it
    nor pending with it among their candidates."""
    with tempfile.TemporaryDirectory() as folder:
        truth, decided = demo_name_decisions(folder)
    merged = truth.merge(decided, on="written_name", how="left")
    accepted = merged["status"] == "accepted"
    right = accepted & (merged["tip_label"] == merged["true_tip"])
    waiting = [
        status == "pending" and tip in {c[0] for c in candidates_of(note)}
        for status, tip, note in zip(
            merged["status"], merged["true_tip"], merged["note"], strict=True
        )
    ]
    has_tip = merged["true_tip"] != ""
    covered = (right | pd.Series(waiting, index=merged.index))[has_tip]
    return {
        "names": float(len(truth)),
        "false_automatic": float((accepted & ~right).sum()),
        "not_covered": float((~covered).sum()),
    }


def run() -> list[dict]:
    bench = generate_names(N_NAMES, tips=N_TIPS)
    tips = bench.tips
    names = bench.written
    synonyms = bench.synonyms.rename(columns={"accepted_name": "accepted"})
    written = bench.truth.assign(true_tip=bench.truth["true_tip"].replace("", None))
    times = []
    result = pd.DataFrame()
    for _ in range(REPEATS):
        parse_name.cache_clear()  # every run parses from scratch
        start = time.perf_counter()
        result = match_names(names, tips, synonyms)
        times.append(time.perf_counter() - start)
    ours = statistics.median(times)
    peak = _peak_rss_mb()

    sample = names[:DIFFLIB_NAMES]
    start = time.perf_counter()
    for name in sample:
        difflib.get_close_matches(name, tips, n=5, cutoff=0.8)
    difflib_full = (time.perf_counter() - start) * N_NAMES / len(sample)
    floor = statistics.median(_floor_seconds(written, tips, result) for _ in range(REPEATS))

    rows = [
        {
            "benchmark": "names: match 50k x 50k",
            "measure": f"all stages, median of {REPEATS}",
            "value": ours,
            "unit": "s",
            "target": "< 10 s",
        },
        {
            "benchmark": "names: match 50k x 50k",
            "measure": "peak resident memory of the process",
            "value": peak,
            "unit": "MB",
            "target": "< 2048 MB",
        },
        {
            "benchmark": "names: match 50k x 50k",
            "measure": f"difflib.get_close_matches, {DIFFLIB_NAMES} names scaled",
            "value": difflib_full,
            "unit": "s",
            "target": "baseline",
        },
        {
            "benchmark": "names: match 50k x 50k",
            "measure": "rapidfuzz cdist alone over our candidate pairs",
            "value": floor,
            "unit": "s",
            "target": "floor",
        },
        {
            "benchmark": "names: match 50k x 50k",
            "measure": "speed-up over difflib",
            "value": difflib_full / ours,
            "unit": "x",
            "target": "",
        },
    ]
    harsh = generate_names(N_NAMES, tips=N_TIPS, seed=1, kinds=HARSH_KINDS, per_genus=10)
    own_tips = harsh.tips
    own = harsh.truth.assign(true_tip=harsh.truth["true_tip"].replace("", None))
    own_result = match_names(own["written_name"], own_tips)
    # The same corpora with changes of genus accepted automatically (the
    # option), to show what sending them to review costs and gains.
    loose = MatchOptions(accept_genus_changes=True)
    corpora = [
        ("demo generator", quality(written, result), True),
        ("own corpus", quality(own, own_result), True),
        (
            "demo generator, genus changes accepted",
            quality(written, match_names(names, tips, synonyms, loose)),
            False,
        ),
        (
            "own corpus, genus changes accepted",
            quality(own, match_names(own["written_name"], own_tips, options=loose)),
            False,
        ),
    ]
    for corpus, held in [("demo generator", result), ("own corpus", own_result)]:
        rows.append(
            {
                "benchmark": f"names quality: {corpus}",
                "measure": "names waiting for review for a change of genus",
                "value": int(held["reason"].str.startswith(GENUS_CHANGED).sum()),
                "unit": "",
                "target": "",
            }
        )
    for corpus, table, every_stage in corpora:
        for row in table.itertuples(index=False):
            overall = row.stage == "all"
            if not (overall or every_stage):
                continue
            rows.append(
                {
                    "benchmark": f"names quality: {corpus}",
                    "measure": f"{row.stage}: precision of {row.accepted} automatic",
                    "value": 100 * row.precision,
                    "unit": "%",
                    "target": ">= 99.5 %" if overall else "",
                }
            )
            rows.append(
                {
                    "benchmark": f"names quality: {corpus}",
                    "measure": f"{row.stage}: recall (first) over {row.names} names",
                    "value": 100 * row.recall,
                    "unit": "%",
                    "target": ">= 98 %" if overall else "",
                }
            )
            if overall:
                rows.append(
                    {
                        "benchmark": f"names quality: {corpus}",
                        "measure": "all: true tip accepted automatically",
                        "value": 100 * row.automatic,
                        "unit": "%",
                        "target": "",
                    }
                )
                rows.append(
                    {
                        "benchmark": f"names quality: {corpus}",
                        "measure": "all: true tip among the candidates",
                        "value": 100 * row.among_candidates,
                        "unit": "%",
                        "target": "",
                    }
                )
    demo = demo_coverage()
    rows.append(
        {
            "benchmark": "names quality: demo scenario",
            "measure": f"false automatic acceptances of {demo['names']:.0f} names",
            "value": int(demo["false_automatic"]),
            "unit": "",
            "target": "0",
        }
    )
    rows.append(
        {
            "benchmark": "names quality: demo scenario",
            "measure": "true tip neither accepted nor a candidate",
            "value": int(demo["not_covered"]),
            "unit": "",
            "target": "0",
        }
    )
    return rows


if __name__ == "__main__":
    for row in run():
        print(row)
