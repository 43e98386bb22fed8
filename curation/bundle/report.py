"""``report.html``: one self-contained page that works offline.

Drawn with inline SVG written here (no scripts, fonts or images fetched),
so the page makes no network request and is the same bytes on every run.
"""

from __future__ import annotations

import html
from typing import Any

import numpy as np
import pandas as pd

from curation.bundle.inputs import BundleInputs
from curation.bundle.overview import TreeOverview, overview_tree
from curation.bundle.tables import NAME_OUTCOMES, BundleTables, applied_repairs
from curation.trees.arrays import TreeArrays

__all__ = [
    "MAX_DRAWN_TIPS",
    "OVERVIEW_CLADES",
    "STAGE_COLOURS",
    "finding_summary",
    "histogram_svg",
    "overview_svg",
    "render_report",
    "tree_svg",
]

MAX_DRAWN_TIPS = 2000
# Clades drawn for a tree of more than MAX_DRAWN_TIPS tips.
OVERVIEW_CLADES = 150
STAGE_COLOURS = {
    "exact": "#1b7837",
    "canonical": "#5aae61",
    "synonym": "#2166ac",
    "gender": "#67a9cf",
    "spelling": "#984ea3",
    "fuzzy": "#e08214",
    "reviewed": "#8c510a",
    "none": "#999999",
}

CSS = """
body{font-family:sans-serif;margin:2em;max-width:70em;color:#222}
table{border-collapse:collapse;font-size:0.85em;margin:0.5em 0 1.5em}
td,th{border:1px solid #ccc;padding:2px 6px;text-align:left;vertical-align:top}
th{background:#eee} .num{text-align:right} .warn{color:#b35806} .err{color:#b2182b}
.legend span{display:inline-block;margin-right:1em} svg{max-width:100%;height:auto}
"""


def _e(value: object) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def _fmt(value: object) -> str:
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
        return ""
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def _layout(tree: TreeArrays) -> tuple[np.ndarray, np.ndarray]:
    """x (depth) and y (row) of every node for a right-facing drawing."""
    x = tree.depths()
    n = tree.node_count
    y = np.zeros(n)
    low = np.full(n, np.inf)
    high = np.full(n, -np.inf)
    tips = tree.tips
    y[tips] = np.arange(len(tips), dtype=float)
    low[tips] = y[tips]
    high[tips] = y[tips]
    for node in range(n - 1, 0, -1):  # postorder: children before parents
        if not tree.is_tip[node]:
            y[node] = (low[node] + high[node]) / 2
        parent = tree.parent[node]
        low[parent] = min(low[parent], y[node])
        high[parent] = max(high[parent], y[node])
    if n and not tree.is_tip[0]:
        y[0] = (low[0] + high[0]) / 2
    return x, y


def _positions(
    tree: TreeArrays, depth: float | None, row: int, left: int, width: int
) -> tuple[np.ndarray, np.ndarray, float]:
    """Pixel x and y of every node, and pixels per unit of branch length,
    for a drawing ``width`` wide spanning ``depth`` (default: the deepest
    node) with ``row`` pixels per tip."""
    x, y = _layout(tree)
    if depth is None:
        depth = float(x.max()) if len(x) else 0.0
    scale = width / max(depth, 1e-12)
    return left + x * scale, 10 + y * row, scale


def _branch_paths(tree: TreeArrays, px: np.ndarray, py: np.ndarray) -> list[str]:
    """SVG paths of every branch: a horizontal line per edge and a vertical
    line joining each node's children."""
    parts = []
    for node in range(1, tree.node_count):
        parent = tree.parent[node]
        parts.append(
            f'<path d="M{px[parent]:.1f},{py[node]:.1f}H{px[node]:.1f}" stroke="#444" fill="none"/>'
        )
    low = np.full(tree.node_count, np.inf)
    high = np.full(tree.node_count, -np.inf)
    np.minimum.at(low, tree.parent[1:], py[1:])
    np.maximum.at(high, tree.parent[1:], py[1:])
    for node in np.flatnonzero(~tree.is_tip):
        parts.append(
            f'<path d="M{px[node]:.1f},{low[node]:.1f}V{high[node]:.1f}" '
            'stroke="#444" fill="none"/>'
        )
    return parts


def _svg(parts: list[str], width: int, height: int, label: str) -> str:
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" '
        f'height="{height}" viewBox="0 0 {width} {height}" '
        f'role="img" aria-label="{_e(label)}">' + "".join(parts) + "</svg>"
    )


def tree_svg(tree: TreeArrays, tip_stage: dict[str, str], with_data: set[str]) -> str:
    """Return an SVG drawing of ``tree``: branches, tip labels, and a mark
    per tip coloured by the match stage of its name (grey: no name) and
    filled when the tip has trait data (hollow: missing data)."""
    row, left, width = 14, 10, 600
    px, py, _ = _positions(tree, None, row, left, width)
    parts = _branch_paths(tree, px, py)
    for node in tree.tips:
        label = tree.labels[node]
        colour = STAGE_COLOURS.get(tip_stage.get(label, "none"), "#e7298a")
        fill = colour if label in with_data else "white"
        parts.append(
            f'<circle cx="{px[node] + 5:.1f}" cy="{py[node]:.1f}" r="4" stroke="{colour}" '
            f'stroke-width="2" fill="{fill}"><title>{_e(label)}: '
            f"{_e(tip_stage.get(label, 'no name'))}, "
            f"{'data' if label in with_data else 'missing data'}</title></circle>"
        )
        parts.append(
            f'<text x="{px[node] + 12:.1f}" y="{py[node] + 4:.1f}" font-size="11">'
            f"{_e(label)}</text>"
        )
    return _svg(parts, left + width + 260, 20 + len(tree.tips) * row, "tree")


def overview_svg(overview: TreeOverview) -> str:
    """Return an SVG drawing of a tree's overview: the opened part of the
    tree, and per shown clade a wedge reaching as far as its tips, shaded by
    the share of its tips with trait data, labelled with its name and
    counts (a single tip is drawn as a tip)."""
    tree = overview.tree
    row, left, width = 16, 10, 600
    depth = float(overview.reach.max()) if len(overview.reach) else 0.0
    px, py, scale = _positions(tree, depth, row, left, width)
    parts = _branch_paths(tree, px, py)
    for node in tree.tips:
        tips, data, named = (
            int(a[node]) for a in (overview.tips, overview.with_data, overview.named)
        )
        share = data / tips if tips else 0.0
        end = left + overview.reach[node] * scale
        if tips == 1:
            text = f"{tree.labels[node]}: {'data' if data else 'missing data'}"
            if not named:
                text += ", no name"
        else:
            text = f"{overview.subjects[node]}: {data} with data, {named} named"
        parts.append(
            f'<path d="M{px[node]:.1f},{py[node]:.1f}L{end:.1f},{py[node] - 6:.1f}'
            f'V{py[node] + 6:.1f}Z" fill="#1b7837" fill-opacity="{0.1 + 0.9 * share:.2f}" '
            f'stroke="#444"><title>{_e(text)}</title></path>'
        )
        parts.append(
            f'<text x="{end + 6:.1f}" y="{py[node] + 4:.1f}" font-size="11">{_e(text)}</text>'
        )
    return _svg(parts, left + width + 520, 20 + len(tree.tips) * row, "tree overview")


def histogram_svg(values: np.ndarray, flagged: np.ndarray, label: str) -> str:
    """Return an SVG histogram of ``values`` with the ``flagged`` ones drawn
    as red ticks below the bars."""
    values = values[np.isfinite(values)]
    flagged = flagged[np.isfinite(flagged)]
    if values.size == 0:
        return "<p>No values.</p>"
    low, high = float(values.min()), float(values.max())
    if flagged.size:
        low, high = min(low, float(flagged.min())), max(high, float(flagged.max()))
    if high == low:
        high = low + 1.0
    counts, _edges = np.histogram(values, bins=30, range=(low, high))
    width, height, left = 480, 120, 40
    bar = width / len(counts)
    top = max(int(counts.max()), 1)
    parts = [
        f'<rect x="{left + i * bar:.1f}" y="{10 + height - c / top * height:.1f}" '
        f'width="{bar - 1:.1f}" height="{c / top * height:.1f}" fill="#6baed6"/>'
        for i, c in enumerate(counts)
    ]
    for value in np.sort(flagged):
        xv = left + (value - low) / (high - low) * width
        parts.append(
            f'<line x1="{xv:.1f}" x2="{xv:.1f}" y1="{height + 14}" y2="{height + 26}" '
            'stroke="#d7301f" stroke-width="2"/>'
        )
    parts.append(f'<text x="{left}" y="{height + 42}" font-size="11">{_e(f"{low:.4g}")}</text>')
    parts.append(
        f'<text x="{left + width}" y="{height + 42}" font-size="11" text-anchor="end">'
        f"{_e(f'{high:.4g}')}</text>"
    )
    parts.append(f'<text x="{left}" y="{height + 56}" font-size="11">{_e(label)}</text>')
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{width + 2 * left}" '
        f'height="{height + 64}" '
        f'viewBox="0 0 {width + 2 * left} {height + 64}" role="img">' + "".join(parts) + "</svg>"
    )


def _table(frame: pd.DataFrame, limit: int = 300) -> str:
    if frame.empty:
        return "<p>None.</p>"
    head = "".join(f"<th>{_e(c)}</th>" for c in frame.columns)
    rows = []
    for values in frame.head(limit).itertuples(index=False):
        cells = "".join(
            f'<td class="num">{_e(_fmt(v))}</td>'
            if isinstance(v, (int, float))
            else f"<td>{_e(_fmt(v))}</td>"
            for v in values
        )
        rows.append(f"<tr>{cells}</tr>")
    more = (
        f"<p>… and {len(frame) - limit} more (see the CSV file).</p>" if len(frame) > limit else ""
    )
    return f"<table><tr>{head}</tr>{''.join(rows)}</table>{more}"


def finding_summary(findings: pd.DataFrame) -> pd.DataFrame:
    """Return one row per kind of finding and what was done about it: code,
    severity, action and how many findings, errors first."""
    columns = ["code", "severity", "action", "findings"]
    if findings.empty:
        return pd.DataFrame(columns=columns)
    counts = findings.groupby(["code", "severity", "action"], sort=True).size()
    frame = counts.rename("findings").reset_index()
    rank = frame["severity"].map({"error": 0, "warning": 1}).fillna(2)
    order = np.lexsort((frame["code"].to_numpy(), rank.to_numpy()))
    return frame.iloc[order].reset_index(drop=True)[columns]


def render_report(
    inputs: BundleInputs,
    tables: BundleTables,
    trees: list[TreeArrays],
    diagnostics: list[dict[str, Any]],
) -> str:
    """Return the HTML of ``report.html``."""
    accounting = tables.accounting
    tips = accounting[accounting["kind"] == "tip"]
    names = accounting[accounting["kind"] == "written name"]
    tip_stage = {}
    accepted = inputs.names[inputs.names["status"] == "accepted"]
    for row in accepted.sort_values("written_name").itertuples(index=False):
        stage = "reviewed" if row.stage in {"review", "sheet", "manual"} else row.stage
        tip_stage.setdefault(row.tip_label, stage)
    with_data = set(inputs.species["tip_label"].unique()) if not inputs.species.empty else set()
    summary = pd.DataFrame(
        [
            ("tips on the chosen tree", len(tips)),
            ("tips in the bundle", len(tables.keep)),
            ("tips with trait data", int((tips["status"] == "matched").sum())),
            ("written names", len(names)),
            *(
                (f"written names {outcome}", int((names["status"] == outcome).sum()))
                for outcome in NAME_OUTCOMES
            ),
            (
                "measurements not yet flagged",
                int((accounting["status"] == "not yet flagged").sum()),
            ),
            ("traits", len(tables.traits)),
            ("findings", len(tables.findings)),
            ("repairs applied", len(applied_repairs(inputs.repairs))),
        ],
        columns=["what", "count"],
    )
    coverage = []
    for row in tables.traits.itertuples(index=False):
        n_col = f"{row.trait}_n"
        covered = int((tables.species[n_col].fillna(0) > 0).sum()) if n_col in tables.species else 0
        coverage.append((row.trait, row.kind, row.scale, row.unit, covered, len(tips)))
    coverage_frame = pd.DataFrame(
        coverage,
        columns=["trait", "kind", "scale", "unit", "tips with data", "tips on the chosen tree"],
    )
    sections = [
        "<h2>Summary</h2>",
        _table(summary),
        "<h2>Coverage per trait</h2>",
        _table(coverage_frame),
        "<h2>Tree</h2>",
    ]
    tree = trees[0]
    if tree.tips.size <= MAX_DRAWN_TIPS:
        legend = "".join(
            f'<span><svg width="12" height="12"><circle cx="6" cy="6" r="5" fill="{c}"/>'
            f"</svg> {_e(s)}</span>"
            for s, c in STAGE_COLOURS.items()
        )
        sections += [
            f'<p class="legend">Match stage of each tip\'s name: {legend} '
            "(hollow: missing data).</p>",
            tree_svg(tree, tip_stage, with_data),
        ]
    else:
        named = set(tip_stage)
        overview = overview_tree(tree, with_data, named, limit=OVERVIEW_CLADES)
        sections += [
            f"<p>The bundle's tree has {tree.tips.size} tips, too many to draw one by one: it is "
            f"drawn as {overview.tree.tips.size} clades, each a wedge "
            "as long as its tips reach, darker the more of its tips have trait data.</p>",
            overview_svg(overview),
        ]
    if len(trees) > 1:
        sections.append(f"<p>The bundle holds {len(trees)} trees; the first is drawn.</p>")
    sections.append("<h2>Trait distributions</h2>")
    measured = tables.measurements
    # Rows of each trait found once (a bundle may hold a million measurements).
    rows_of = measured.groupby("trait", sort=False).indices
    every_value = measured["value"].to_numpy(dtype=float)
    is_flagged = (measured["flags"].fillna("") != "").to_numpy(dtype=bool)
    for row in tables.traits.itertuples(index=False):
        if row.kind == "discrete":
            continue
        rows = rows_of.get(row.trait, np.zeros(0, dtype=np.int64))
        values = every_value[rows]
        marks = values[is_flagged[rows]]
        sections.append(f"<h3>{_e(row.trait)}</h3>")
        sections.append(
            histogram_svg(
                values,
                marks,
                f"measurements ({row.unit or 'as written'}); red: flagged ({marks.size})",
            )
        )
    sections.append("<h2>Phylogenetic diagnostics</h2>")
    if diagnostics:
        frame = pd.DataFrame(
            [
                {
                    "trait": d["trait"],
                    "tips used": d["tips_used"],
                    "ordinary mean": d.get("ordinary_mean"),
                    "phylogenetic mean": d.get("phylogenetic_mean"),
                    "Brownian rate (REML)": d.get("rate_reml"),
                    "Pagel's lambda": (d.get("pagel_lambda") or {}).get("lam")
                    if isinstance(d.get("pagel_lambda"), dict)
                    else None,
                    "Blomberg's K": (d.get("blomberg") or {}).get("k")
                    if isinstance(d.get("blomberg"), dict)
                    else None,
                }
                for d in diagnostics
            ]
        )
        sections.append(_table(frame))
        sections += [
            f"<p><b>{_e(d['trait'])}</b>: {_e(d.get('sentence', ''))}</p>" for d in diagnostics
        ]
    else:
        sections.append("<p>Not computed for this bundle.</p>")
    sections += [
        "<h2>Findings and what was done</h2>",
        "<p>By kind:</p>",
        _table(finding_summary(tables.findings)),
        "<p>Each finding:</p>",
        _table(tables.findings.drop(columns=["details"], errors="ignore")),
        "<h2>Repairs applied</h2>",
        _table(pd.DataFrame(inputs.repairs).drop(columns=["parameters"], errors="ignore")),
        "<h2>Names not matched: rejected, waiting for review, not yet reconciled</h2>",
        _table(
            names[~names["status"].isin(["matched", "missing data"])][["name", "status", "reason"]]
        ),
    ]
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        "<title>tipledger bundle report</title>"
        f"<style>{CSS}</style></head><body><h1>Bundle report</h1>"
        + "\n".join(sections)
        + "</body></html>\n"
    )
