"""The seeded generator of the invented demo scenario.

:func:`generate_scenario` writes the sample files (a time tree and a
posterior set in NEXUS, three trait sources, a synonym table, trait
definitions) and the ground truth that says which names are corrupted and
how, which values are planted faults and which tree defects were planted.
The same seed gives byte-identical files.

The scenario: the Velquiridae, an invented clade of small ground-dwelling
animals, measured by four invented collections (Tarvonia, Kelbrook,
Veldmar, Quessary). Nothing in it is a real taxon, person or institution.
Benchmark-sized data comes from :mod:`curation.demo.benchmark_data`.
"""

from __future__ import annotations

import io
import json
import re
import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from pydantic import BaseModel
from rapidfuzz import process
from rapidfuzz.distance import Levenshtein

from curation.demo import naming
from curation.demo.phylogeny import (
    TimeTree,
    children_lists,
    collapse_branch,
    simulate_pure_birth,
    write_newick_body,
)
from curation.errors import InputError
from curation.trees.arrays import path_sums

__all__ = [
    "DEFAULT_SEED",
    "DWCA_FILE",
    "LONG_FILE",
    "ScenarioFiles",
    "TRAITS",
    "WIDE_FILE",
    "generate_scenario",
    "scenario_files",
]

DEFAULT_SEED = 20261202

TREE_DECIMALS = 4
POSTERIOR_DECIMALS = 5
ROOT_AGE = 40.0

# Continuous traits: name, target unit, scale, allowed range, log-scale
# sd within a species. Discrete: activity.
TRAITS: dict[str, dict[str, object]] = {
    "body_length": {"unit": "mm", "scale": "ln", "range": (5.0, 800.0), "sd": 0.05},
    "tail_length": {"unit": "mm", "scale": "raw", "range": (1.0, 900.0), "sd": 0.06},
    "head_width": {"unit": "mm", "scale": "raw", "range": (0.5, 150.0), "sd": 0.05},
    "body_mass": {"unit": "g", "scale": "log10", "range": (0.05, 20000.0), "sd": 0.12},
}
STATES = ["diurnal", "nocturnal", "cathemeral"]
STATE_VARIANTS = {
    "diurnal": ["Diurnal", "day-active", "diurnal "],
    "nocturnal": ["Nocturnal", "noct.", "night-active"],
    "cathemeral": ["Cathemeral", "cathemeral (both)"],
}

WIDE_FILE = "traits_wide.csv"
LONG_FILE = "traits_long.tsv"
DWCA_FILE = "occurrences_dwca.zip"
DWC = "http://rs.tdwg.org/dwc/terms/"
_SUFFIX = re.compile(r"_(V\d{4}|2)$")
# Fixed time inside the zip so that the archive is byte-identical per seed.
_ZIP_TIME = (2026, 1, 1, 0, 0, 0)


class ScenarioFiles(BaseModel):
    """Paths of everything :func:`generate_scenario` wrote."""

    folder: Path
    tree: Path
    posterior: Path
    traits_wide: Path
    traits_long: Path
    darwin_core: Path
    synonyms: Path
    trait_definitions: Path
    truth_names: Path
    truth_faults: Path
    truth_trees: Path
    truth_species: Path
    readme: Path
    seed: int

    def all_files(self) -> list[Path]:
        """Every file written, in a fixed order."""
        return [
            value
            for key, value in self.__dict__.items()
            if isinstance(value, Path) and key != "folder"
        ]


@dataclass
class _Species:
    genus: str
    gender: str
    epithet: str
    kind: str  # adj1 | adj3 | genitive | fixed
    authority: str
    tip_label: str | None  # None: measured but not in the tree
    node: int = -1

    @property
    def canonical(self) -> str:
        return f"{self.genus} {self.epithet}"


# --------------------------------------------------------------------------
# the clade


def _authority(rng: np.random.Generator) -> str:
    author = naming.AUTHORS[rng.integers(len(naming.AUTHORS))]
    year = int(rng.integers(1788, 1998))
    text = f"{author}, {year}"
    # A name moved out of its original genus cites its author in parentheses.
    return f"({text})" if rng.random() < 0.3 else text


def _unique_epithet(
    rng: np.random.Generator, genus: str, gender: str, taken: list[str]
) -> tuple[str, str]:
    # Keep every full name at least 4 edits from every other, so that a
    # planted corruption (1-2 edits) never comes close to another species.
    for _ in range(500):
        epithet, kind = naming.invent_epithet(rng, gender)
        if not 5 <= len(epithet) <= 12:
            continue
        full = f"{genus} {epithet}"
        if (
            not taken
            or process.extractOne(full, taken, scorer=Levenshtein.distance, score_cutoff=3) is None
        ):
            return epithet, kind
    raise RuntimeError(f"could not invent a distinct epithet in {genus}")  # pragma: no cover


def _build_clade(
    rng: np.random.Generator, tips: int
) -> tuple[TimeTree, list[_Species], list[_Species]]:
    genus_count = max(2, min(len(naming.GENERA), round(tips / 14)))
    tree = simulate_pure_birth(tips, rng, root_age=ROOT_AGE, groups=genus_count)
    genera = list(naming.GENERA[:genus_count])
    taken: list[str] = []
    species: list[_Species] = []
    tip_nodes = tree.tips()
    for node in tip_nodes:
        genus, gender = genera[int(tree.group[node])]
        epithet, kind = _unique_epithet(rng, genus, gender, taken)
        taken.append(f"{genus} {epithet}")
        species.append(_Species(genus, gender, epithet, kind, _authority(rng), None, int(node)))
    # One hyphenated epithet ("of New Tarvonia"), which NEXUS must quote.
    special = species[int(rng.integers(len(species)))]
    special.epithet, special.kind = "novae-tarvoniae", "fixed"
    # Tip labels: most plain, some with a voucher or accession suffix.
    for sp in species:
        label = f"{sp.genus}_{sp.epithet}"
        draw = rng.random()
        if draw < 0.12:
            label += f"_V{int(rng.integers(1000, 9999))}"
        elif draw < 0.16:
            label += "_2"
        sp.tip_label = label
        tree.labels[sp.node] = label
    # Species measured by the collections but not sampled in the tree.
    extras: list[_Species] = []
    for _ in range(max(2, tips // 30)):
        genus, gender = genera[int(rng.integers(len(genera)))]
        epithet, kind = _unique_epithet(rng, genus, gender, taken)
        taken.append(f"{genus} {epithet}")
        extras.append(_Species(genus, gender, epithet, kind, _authority(rng), None))
    return tree, species, extras


# --------------------------------------------------------------------------
# tree defects and NEXUS


def _nexus_token(text: str) -> str:
    if text.replace("_", "").replace(".", "").isalnum():
        return text
    return "'" + text.replace("'", "''") + "'"


def _plant_tree_defects(tree: TimeTree, rng: np.random.Generator) -> dict[str, list[int]]:
    children = children_lists(tree)
    internal = [n for n in range(1, len(tree.parent)) if children[n]]
    # Candidates away from the root (no basal trifurcation), with distinct parents.
    chosen: list[int] = []
    used: set[int] = set()
    for node in rng.permutation(internal):
        node = int(node)
        up = int(tree.parent[node])
        if up == 0 or node in used or up in used:
            continue
        chosen.append(node)
        used.update({node, up, *children[node]})
        if len(chosen) == 5:
            break
    polytomy_children = chosen[:3]
    zero_internal = chosen[3:5]
    polytomies = [int(tree.parent[n]) for n in polytomy_children]
    for node in polytomy_children:
        collapse_branch(tree, node)
    for node in zero_internal:
        tree.height[node] = tree.height[tree.parent[node]]
    children = children_lists(tree)
    cherries = [
        n
        for n in range(1, len(tree.parent))
        if tree.alive[n]
        and len(children[n]) == 2
        and all(not children[c] for c in children[n])
        and n not in used
        and int(tree.parent[n]) not in used
    ]
    cherry = int(cherries[int(rng.integers(len(cherries)))])
    tree.height[cherry] = 0.0
    return {
        "polytomies": polytomies,
        "zero_internal": zero_internal,
        "zero_terminal": children[cherry],
    }


def _nexus(
    tree_lines: list[str], labels: list[str], comment: str, translate: dict[str, int]
) -> str:
    lines = ["#NEXUS", "", f"[{comment}]", "", "BEGIN TAXA;"]
    lines.append(f"    DIMENSIONS NTAX={len(labels)};")
    lines.append("    TAXLABELS")
    lines += [f"        {_nexus_token(label)}" for label in labels]
    lines += ["    ;", "END;", "", "BEGIN TREES;", "    TRANSLATE"]
    entries = [f"        {translate[label]} {_nexus_token(label)}" for label in labels]
    lines += [entry + ("," if i < len(entries) - 1 else "") for i, entry in enumerate(entries)]
    lines += ["    ;"]
    lines += tree_lines
    lines += ["END;", ""]
    return "\n".join(lines)


def _tip_names(tree: TimeTree, translate: dict[str, int]) -> dict[int, str]:
    return {int(n): str(translate[tree.labels[n]]) for n in tree.tips()}


def _pair_labels(tree: TimeTree, pairs: dict[int, tuple[int, int]], node: int) -> list[str]:
    a, b = pairs[node]
    return [tree.labels[a], tree.labels[b]]


def _max_spread(tree: TimeTree, decimals: int) -> float:
    # Root-to-tip distances from the lengths as written (rounded).
    children = children_lists(tree)
    depth = {0: 0.0}
    stack = [0]
    spread: list[float] = []
    while stack:
        node = stack.pop()
        for child in children[node]:
            length = round(float(tree.height[node] - tree.height[child]), decimals)
            depth[child] = depth[node] + length
            stack.append(child)
        if not children[node]:
            spread.append(depth[node])
    return float(max(spread) - min(spread))


def _posterior_tree(
    base: TimeTree, rng: np.random.Generator, swaps: int, jitter: float
) -> TimeTree:
    tree = base.copy()
    for _ in range(swaps):
        # Nearest-neighbour interchange, kept only where the heights allow it.
        node = int(rng.integers(1, len(tree.parent)))
        children = children_lists(tree)
        up = int(tree.parent[node])
        if not children[node] or up < 0:
            continue
        siblings = [c for c in children[up] if c != node]
        moved = children[node][int(rng.integers(len(children[node])))]
        sibling = siblings[0]
        if tree.height[sibling] < tree.height[node]:
            tree.parent[moved], tree.parent[sibling] = up, node
    # Jitter the ages: scale each node's gap above its oldest child.
    children = children_lists(tree)
    new_height = tree.height.copy()
    for node in range(len(tree.parent) - 1, -1, -1):
        kids = children[node]
        if not kids:
            continue
        oldest = max(tree.height[c] for c in kids)
        new_oldest = max(new_height[c] for c in kids)
        gap = (tree.height[node] - oldest) * float(rng.lognormal(0.0, jitter))
        new_height[node] = new_oldest + gap
    tree.height = new_height
    return tree


def _write_trees(
    folder: Path, rng: np.random.Generator, base: TimeTree, posterior_trees: int
) -> tuple[TimeTree, dict[str, object]]:
    labels = sorted(base.labels[n] for n in base.tips())
    translate = {label: i + 1 for i, label in enumerate(labels)}

    main = base.copy()
    planted = _plant_tree_defects(main, rng)
    body, pairs = write_newick_body(main, decimals=TREE_DECIMALS, names=_tip_names(main, translate))
    text = _nexus(
        [f"    TREE dated_consensus = [&R] {body};"],
        labels,
        "Invented demo scenario: dated tree of the Velquiridae (fictional clade). Ages in Myr.",
        translate,
    )
    (folder / "tree.nex").write_text(text, encoding="utf-8", newline="\n")
    children = children_lists(main)
    tree_truth: dict[str, object] = {
        "file": "tree.nex",
        "tips": len(labels),
        "rooted": True,
        "root_age": ROOT_AGE,
        "decimals": TREE_DECIMALS,
        "max_root_to_tip_spread": round(_max_spread(main, TREE_DECIMALS), 10),
        "polytomies": [
            {"tips": _pair_labels(main, pairs, n), "children": len(children[n])}
            for n in planted["polytomies"]
        ],
        "zero_length_internal": [
            {"tips": _pair_labels(main, pairs, n)} for n in planted["zero_internal"]
        ],
        "zero_length_terminal": sorted(main.labels[n] for n in planted["zero_terminal"]),
        "voucher_labels": sorted(label for label in labels if _SUFFIX.search(label)),
        "quoted_labels": sorted(label for label in labels if _nexus_token(label) != label),
    }

    burn_in = max(1, posterior_trees // 5)
    kept = np.arange(burn_in, posterior_trees)
    polytomy_trees = sorted(int(i) for i in rng.choice(kept, min(3, len(kept)), replace=False))
    zero_trees = sorted(int(i) for i in rng.choice(kept, min(4, len(kept)), replace=False))
    lines: list[str] = []
    names: list[str] = []
    for index in range(posterior_trees):
        if index < burn_in:
            # Early samples: far from the plateau, and their topologies drift.
            swaps, jitter = 40 - (30 * index) // burn_in, 0.4
            lnp = -9400.0 + (3200.0 * index) / burn_in + float(rng.normal(0, 40))
        else:
            swaps, jitter = int(rng.integers(0, 4)), 0.08
            lnp = -6150.0 + float(rng.normal(0, 6))
        tree = _posterior_tree(base, rng, swaps, jitter)
        children = children_lists(tree)
        internal = [n for n in range(1, len(tree.parent)) if children[n] and tree.parent[n] > 0]
        if index in polytomy_trees:
            shortest = min(internal, key=lambda n: tree.height[tree.parent[n]] - tree.height[n])
            collapse_branch(tree, shortest)
        if index in zero_trees:
            living = [n for n in internal if tree.alive[n]]
            node = living[int(rng.integers(len(living)))]
            tree.height[node] = tree.height[tree.parent[node]]
        rates = {
            int(n): f"[&rate={float(rng.lognormal(-4.5, 0.3)):.4f}]"
            for n in range(1, len(tree.parent))
            if tree.alive[n]
        }
        body, _ = write_newick_body(
            tree, decimals=POSTERIOR_DECIMALS, names=_tip_names(tree, translate), comments=rates
        )
        name = f"STATE_{index * 10000}"
        names.append(name)
        lines.append(f"    TREE {name} [&lnP={lnp:.2f}] = [&R] {body};")
    text = _nexus(
        lines,
        labels,
        "Invented demo scenario: posterior sample of dated trees (fictional clade).",
        translate,
    )
    (folder / "posterior.nex").write_text(text, encoding="utf-8", newline="\n")
    tree_truth["posterior"] = {
        "file": "posterior.nex",
        "trees": posterior_trees,
        "tips": len(labels),
        "burn_in": burn_in,
        "decimals": POSTERIOR_DECIMALS,
        "tree_names": names,
        "polytomy_trees": polytomy_trees,
        "zero_length_internal_trees": zero_trees,
    }
    return main, tree_truth


# --------------------------------------------------------------------------
# traits on the tree


def _species_traits(
    tree: TimeTree, species: list[_Species], extras: list[_Species], rng: np.random.Generator
) -> dict[str, dict[str, float | str]]:
    """True species values: Brownian motion on the log scale along the tree
    (Felsenstein 1985), allometric mass, and an activity state by genus."""
    parent = tree.parent.copy()
    parent[0] = 0
    span = np.where(tree.parent >= 0, tree.height[np.maximum(tree.parent, 0)] - tree.height, 0.0)

    def walk(sigma: float) -> np.ndarray:
        steps = rng.normal(0.0, 1.0, size=len(parent)) * sigma * np.sqrt(span)
        return path_sums(parent, steps)

    ln_length = np.log(80.0) + walk(0.08)
    ln_mass = 3.0 * (ln_length - np.log(80.0)) + np.log(25.0) + walk(0.04)
    ln_tail = ln_length + np.log(0.9) + walk(0.03)
    ln_head = ln_length + np.log(0.16) + walk(0.02)
    genus_states = {g: STATES[int(rng.integers(len(STATES)))] for g, _ in naming.GENERA}
    values: dict[str, dict[str, float | str]] = {}
    for sp in species:
        n = sp.node
        state = genus_states[sp.genus]
        if rng.random() < 0.1:
            state = STATES[int(rng.integers(len(STATES)))]
        values[sp.canonical] = {
            "body_length": float(np.exp(ln_length[n])),
            "tail_length": float(np.exp(ln_tail[n])),
            "head_width": float(np.exp(ln_head[n])),
            "body_mass": float(np.exp(ln_mass[n])),
            "activity": state,
        }
    for sp in extras:
        ln = np.log(80.0) + rng.normal(0, 0.5)
        values[sp.canonical] = {
            "body_length": float(np.exp(ln)),
            "tail_length": float(np.exp(ln + np.log(0.9))),
            "head_width": float(np.exp(ln + np.log(0.16))),
            "body_mass": float(np.exp(3 * (ln - np.log(80.0)) + np.log(25.0))),
            "activity": genus_states[sp.genus],
        }
    return values


# --------------------------------------------------------------------------
# written names


_NAME_KINDS = [
    ("exact", 0.50),
    ("authority", 0.13),
    ("underscore", 0.06),
    ("tip_label", 0.05),
    ("case_spacing", 0.04),
    ("typo", 0.07),
    ("spelling_variant", 0.04),
    ("gender_variant", 0.04),
    ("synonym", 0.04),
    ("cf_qualifier", 0.02),
    ("subspecies", 0.01),
]


def _write_name(
    sp: _Species, kind: str, rng: np.random.Generator, synonyms: dict[str, str]
) -> tuple[str, str]:
    """Return (written name, kind actually used) for species ``sp``."""
    g, e = sp.genus, sp.epithet
    if kind == "authority":
        return f"{g} {e} {sp.authority}", kind
    if kind == "underscore":
        return f"{g}_{e}", kind
    if kind == "tip_label" and sp.tip_label and sp.tip_label != f"{g}_{e}":
        return sp.tip_label, kind
    if kind == "case_spacing":
        forms = [f"{g.upper()} {e.upper()}", f"{g.lower()}  {e}", f" {g} {e.capitalize()} "]
        return forms[int(rng.integers(len(forms)))], kind
    if kind == "typo":
        if rng.random() < 0.25:
            return f"{naming.misspell(g, rng)} {e}", kind
        return f"{g} {naming.misspell(e, rng)}", kind
    if kind == "spelling_variant":
        variant = naming.spelling_variant(e, rng)
        if variant:
            return f"{g} {variant}", kind
    if kind == "gender_variant":
        variant = naming.gender_variant(e, sp.kind, sp.gender)
        if variant:
            return f"{g} {variant}", kind
    if kind == "synonym" and sp.canonical in synonyms:
        return synonyms[sp.canonical], kind
    if kind == "cf_qualifier":
        return f"{g} cf. {e}", kind
    if kind == "subspecies":
        rank = ["subsp.", "ssp."][int(rng.integers(2))]
        return f"{g} {e} {rank} {naming.invent_epithet(rng, sp.gender)[0]}", kind
    return f"{g} {e}", "exact"


def _make_synonyms(
    species: list[_Species], extras: list[_Species], rng: np.random.Generator
) -> tuple[pd.DataFrame, dict[str, str]]:
    """A synonym table: genus transfers and replaced epithets. Returns the
    table and, per accepted name, the synonym sources write."""
    rows: list[dict[str, str]] = []
    used: dict[str, str] = {}
    chosen = rng.choice(
        len(species), size=min(len(species), max(4, len(species) // 12)), replace=False
    )
    taken = [sp.canonical for sp in species + extras]
    for i in sorted(int(c) for c in chosen):
        sp = species[i]
        if rng.random() < 0.5:
            old_genus, old_gender = naming.OLD_GENERA[int(rng.integers(len(naming.OLD_GENERA)))]
            epithet = naming.agree(sp.epithet, sp.kind, sp.gender, old_gender)
            synonym = f"{old_genus} {epithet}"
        else:
            epithet, _ = _unique_epithet(rng, sp.genus, sp.gender, taken)
            synonym = f"{sp.genus} {epithet}"
        taken.append(synonym)
        written = synonym + (f" {_authority(rng)}" if rng.random() < 0.3 else "")
        rows.append({"synonym": written, "accepted_name": sp.canonical})
        used[sp.canonical] = synonym
    for sp in extras[:1]:
        old_genus, old_gender = naming.OLD_GENERA[0]
        epithet = naming.agree(sp.epithet, sp.kind, sp.gender, old_gender)
        rows.append({"synonym": f"{old_genus} {epithet}", "accepted_name": sp.canonical})
    table = pd.DataFrame(rows).sort_values("synonym", kind="stable").reset_index(drop=True)
    return table, used


# --------------------------------------------------------------------------
# specimens and measurements


@dataclass
class _Cell:
    source: str
    specimen: int  # index of the specimen within its source
    written_name: str
    institution: str
    catalog_number: str
    sex: str
    trait: str
    value: float | str  # true value in the trait's target unit (or a state)
    canonical: str
    written: str = ""
    unit: str = ""
    kind: str = ""  # planted fault, '' when clean
    detail: str = ""


def _specimens(
    species: list[_Species],
    extras: list[_Species],
    values: dict[str, dict[str, float | str]],
    synonyms: dict[str, str],
    rng: np.random.Generator,
) -> tuple[list[_Cell], dict[str, tuple[str, str]]]:
    """Draw specimens per source, their written names and their true values.

    Returns the cells (one per specimen and trait) and the truth of each
    written name: (canonical name, kind)."""
    sources = {
        WIDE_FILE: (["ZMTV", "QRSM"], 0.65, (2, 7), [*TRAITS, "activity"]),
        LONG_FILE: (["NCKB"], 0.40, (1, 5), ["body_length", "tail_length", "body_mass"]),
        DWCA_FILE: (["IHLV"], 0.40, (2, 6), ["body_length", "head_width", "body_mass", "activity"]),
    }
    kinds = [k for k, _ in _NAME_KINDS]
    weights = np.array([w for _, w in _NAME_KINDS])
    weights = weights / weights.sum()
    catalogue = {code: int(rng.integers(1000, 5000)) for code, _ in naming.INSTITUTIONS}
    truth: dict[str, tuple[str, str]] = {}
    cells: list[_Cell] = []
    no_data = {
        sp.canonical for sp in rng.choice(species, size=max(1, len(species) // 25), replace=False)
    }  # type: ignore[arg-type]
    pool = [sp for sp in species if sp.canonical not in no_data] + extras
    for source, (codes, coverage, (low, high), traits) in sources.items():
        specimen = 0
        for sp in pool:
            if rng.random() > coverage and sp.tip_label is not None:
                continue
            kind = kinds[int(rng.choice(len(kinds), p=weights))]
            # Sources that predate a revision keep the old name; voucher
            # labels leak into tables copied from the tree.
            if sp.canonical in synonyms and rng.random() < 0.5:
                kind = "synonym"
            elif sp.tip_label and sp.tip_label != sp.canonical.replace(" ", "_"):
                kind = "tip_label" if rng.random() < 0.25 else kind
            written, kind = _write_name(sp, kind, rng, synonyms)
            # One string, one truth: a corruption that happens to equal a
            # form of another species is written plainly instead.
            if written in truth and truth[written][0] != sp.canonical:
                written, kind = sp.canonical, "exact"
            truth.setdefault(written, (sp.canonical, kind if sp.tip_label else "no_tip"))
            for _ in range(int(rng.integers(low, high))):
                code = codes[int(rng.integers(len(codes)))]
                catalogue[code] += int(rng.integers(1, 9))
                sex = "F" if rng.random() < 0.5 else "M"
                for trait in traits:
                    true = values[sp.canonical][trait]
                    if trait in TRAITS:
                        sd = float(TRAITS[trait]["sd"])  # type: ignore[arg-type]
                        dimorphism = 1.03 if sex == "F" else 1.0
                        true = float(true) * dimorphism * float(np.exp(rng.normal(0.0, sd)))
                    cells.append(
                        _Cell(
                            source,
                            specimen,
                            written,
                            code,
                            str(catalogue[code]),
                            sex,
                            trait,
                            true,
                            sp.canonical,
                        )
                    )
                specimen += 1
        # Specimens identified only to genus: no tip can be theirs.
        for _ in range(2):
            sp = pool[int(rng.integers(len(pool)))]
            written = (
                f"{sp.genus} sp."
                if rng.random() < 0.5
                else f"{sp.genus} sp. {int(rng.integers(1, 9))}"
            )
            truth.setdefault(written, ("", "sp_qualifier"))
            code = codes[0]
            catalogue[code] += 1
            for trait in traits:
                true = values[sp.canonical][trait]
                cells.append(
                    _Cell(
                        source, specimen, written, code, str(catalogue[code]), "M", trait, true, ""
                    )
                )
            specimen += 1
    return cells, truth


# --------------------------------------------------------------------------
# planted faults and the three layouts

_DECIMALS = {"mm": 1, "cm": 2, "g": 2, "kg": 5}


def _number_text(number: float, unit: str, *, comma: bool = False) -> str:
    text = f"{number:.{_DECIMALS.get(unit, 2)}f}"
    return text.replace(".", ",") if comma else text


def _in_unit(value: float, unit: str) -> float:
    # Target units are mm and g; exact factors (1 cm = 10 mm, 1 kg = 1000 g).
    return value / {"mm": 1.0, "g": 1.0, "cm": 10.0, "kg": 1000.0}[unit]


def _source_unit(cell: _Cell, rng: np.random.Generator) -> str:
    target = str(TRAITS[cell.trait]["unit"])
    if cell.source == LONG_FILE:
        if target == "g":
            return "kg"
        return "mm" if rng.random() < 0.15 else "cm"
    return target


def _render_values(cells: list[_Cell], rng: np.random.Generator) -> None:
    for cell in cells:
        if cell.trait not in TRAITS:
            state = str(cell.value)
            if rng.random() < 0.3:
                variants = STATE_VARIANTS[state]
                state = variants[int(rng.integers(len(variants)))]
            cell.written = state
            continue
        cell.unit = _source_unit(cell, rng)
        cell.written = _number_text(
            _in_unit(float(cell.value), cell.unit), cell.unit, comma=cell.source == LONG_FILE
        )


def _plant_faults(cells: list[_Cell], rng: np.random.Generator) -> None:
    """Mark and corrupt cells: unit slips, outliers, impossible and
    unparsable values, unknown and incompatible units, conflicting states
    and missing values (what each source is prone to)."""
    counts: dict[tuple[str, str], int] = {}
    for cell in cells:
        if cell.canonical and cell.trait in TRAITS:
            counts[(cell.canonical, cell.trait)] = counts.get((cell.canonical, cell.trait), 0) + 1
    # Faults go where the species has enough values to judge them against.
    eligible = [
        i
        for i, c in enumerate(cells)
        if c.trait in TRAITS and c.canonical and counts[(c.canonical, c.trait)] >= 6
    ]
    taken: set[int] = set()
    faulted_groups: set[tuple[str, str]] = set()

    def pick(source: str, traits: tuple[str, ...] = tuple(TRAITS)) -> _Cell:
        options = [
            i
            for i in eligible
            if cells[i].source == source
            and cells[i].trait in traits
            and i not in taken
            and (cells[i].canonical, cells[i].trait) not in faulted_groups
        ]
        index = int(options[int(rng.integers(len(options)))])
        taken.add(index)
        cell = cells[index]
        # One fault per species and trait, so that each stands out clearly.
        faulted_groups.add((cell.canonical, cell.trait))
        return cell

    comma = {WIDE_FILE: False, LONG_FILE: True, DWCA_FILE: False}
    lengths = ("body_length", "tail_length", "head_width")

    def slip(source: str, factor: float, detail: str, traits: tuple[str, ...]) -> None:
        cell = pick(source, traits)
        number = _in_unit(float(cell.value), cell.unit) * factor
        cell.written = _number_text(number, "cm" if factor < 1 else cell.unit, comma=comma[source])
        cell.kind, cell.detail = "unit_slip", detail

    for _ in range(3):
        slip(WIDE_FILE, 0.1, "written in cm under a mm heading (factor 10)", lengths)
    slip(WIDE_FILE, 1 / 25.4, "written in inches under a mm heading (factor 25.4)", lengths)
    for _ in range(2):
        slip(LONG_FILE, 10.0, "written in mm but labelled cm (factor 10)", lengths)
    cell = pick(DWCA_FILE, ("body_mass",))
    cell.unit, cell.kind = "kg", "unit_slip"
    cell.detail = "written in g but labelled kg (factor 1000)"

    for source, n in ((WIDE_FILE, 2), (LONG_FILE, 2), (DWCA_FILE, 1)):
        for _ in range(n):
            cell = pick(source)
            factor = float(rng.choice([2.7, 3.3, 4.2, 0.3, 0.36]))
            number = _in_unit(float(cell.value), cell.unit) * factor
            cell.written = _number_text(number, cell.unit, comma=comma[source])
            cell.kind, cell.detail = "outlier", f"true value times {factor}"

    cell = pick(WIDE_FILE, lengths)
    cell.written = "-" + cell.written
    cell.kind, cell.detail = "impossible", "negative length"
    cell = pick(LONG_FILE, ("body_mass",))
    cell.written, cell.kind, cell.detail = "0", "impossible", "zero mass"

    for source, forms in ((WIDE_FILE, ["ca. {}", "{}?"]), (LONG_FILE, [">{}"])):
        for form in forms:
            cell = pick(source)
            cell.written = form.format(cell.written)
            cell.kind, cell.detail = "unparsed", "a number with a qualifier"

    cell = pick(DWCA_FILE, lengths)
    cell.unit, cell.kind, cell.detail = "mmm", "unknown_unit", "unit 'mmm' is not a unit"
    cell = pick(DWCA_FILE, lengths)
    cell.unit, cell.kind, cell.detail = "g", "incompatible_unit", "a length given in grams"

    # A specimen whose activity contradicts the rest of its species.
    states: dict[str, list[int]] = {}
    for i, c in enumerate(cells):
        if c.trait == "activity" and c.canonical and c.source == WIDE_FILE:
            states.setdefault(c.canonical, []).append(i)
    crowded = sorted(name for name, rows in states.items() if len(rows) >= 4)
    cell = cells[states[crowded[int(rng.integers(len(crowded)))]][0]]
    other = [s for s in STATES if s != cell.value]
    cell.written = other[int(rng.integers(len(other)))]
    cell.kind, cell.detail = "state_conflict", f"true state {cell.value}"

    missing = {WIDE_FILE: "", LONG_FILE: "NA", DWCA_FILE: ""}
    for i, cell in enumerate(cells):
        if i not in taken and not cell.kind and rng.random() < 0.02:
            cell.written, cell.kind, cell.detail = missing[cell.source], "missing", "no value"


def _csv_text(frame: pd.DataFrame, sep: str) -> str:
    buffer = io.StringIO()
    frame.to_csv(buffer, sep=sep, index=False, lineterminator="\n")
    return buffer.getvalue()


_SEX_WORD = {"F": "female", "M": "male"}


def _write_sources(
    folder: Path, cells: list[_Cell], rng: np.random.Generator, truth: dict[str, tuple[str, str]]
) -> list[dict[str, object]]:
    """Write the three trait sources; return the ground truth of every
    planted fault (file, row, line, trait ...)."""
    faults: list[dict[str, object]] = []

    def fault(file: str, member: str, row: int, header_lines: int, cell: _Cell, unit: str) -> None:
        if cell.kind:
            faults.append(
                {
                    "file": file,
                    "member": member,
                    "row": row,
                    "line": row + header_lines,
                    "trait": cell.trait,
                    "written_name": cell.written_name,
                    "institution": cell.institution,
                    "catalog_number": cell.catalog_number,
                    "value_written": cell.written,
                    "unit_written": unit,
                    "kind": cell.kind,
                    "detail": cell.detail,
                }
            )

    # (1) wide CSV, one row per specimen, mm and g in the headings.
    wide = [c for c in cells if c.source == WIDE_FILE]
    by_specimen: dict[int, list[_Cell]] = {}
    for c in wide:
        by_specimen.setdefault(c.specimen, []).append(c)
    order = [int(i) for i in rng.permutation(sorted(by_specimen))]
    headings = {
        "body_length": "body_length_mm",
        "tail_length": "tail_length_mm",
        "head_width": "head_width_mm",
        "body_mass": "body_mass_g",
        "activity": "activity",
    }
    records = []
    wide_rows: dict[int, int] = {}
    for row, specimen in enumerate(order, 1):
        first = by_specimen[specimen][0]
        wide_rows[specimen] = row
        record = {
            "taxon": first.written_name,
            "institution": first.institution,
            "catalog_number": first.catalog_number,
            "sex": first.sex,
        }
        for c in by_specimen[specimen]:
            record[headings[c.trait]] = c.written
            fault(WIDE_FILE, "", row, 1, c, headings[c.trait].rsplit("_", 1)[-1])
        records.append(record)
    frame = pd.DataFrame(
        records, columns=["taxon", "institution", "catalog_number", "sex", *headings.values()]
    )
    (folder / WIDE_FILE).write_text(_csv_text(frame, ","), encoding="utf-8", newline="\n")

    # (2) long TSV in cm and kg, decimal commas, Windows-1252.
    long = [c for c in cells if c.source == LONG_FILE]
    long_specimens = sorted({c.specimen for c in long})
    order = [int(i) for i in rng.permutation(long_specimens)]
    grouped: dict[int, list[_Cell]] = {}
    for c in long:
        grouped.setdefault(c.specimen, []).append(c)
    rows: list[tuple[_Cell, bool]] = []
    for specimen in order:
        rows += [(c, False) for c in grouped[specimen]]
    clean = [i for i, (c, _) in enumerate(rows) if not c.kind]
    for position in sorted((int(i) for i in rng.choice(clean, 2, replace=False)), reverse=True):
        rows.insert(position + 1, (rows[position][0], True))
    records = []
    for row, (c, copy) in enumerate(rows, 1):
        records.append(
            {
                "species": c.written_name,
                "museum": c.institution,
                "catalogue_no": c.catalog_number,
                "sex": _SEX_WORD[c.sex],
                "trait": c.trait,
                "value": c.written,
                "unit": c.unit,
            }
        )
        if copy:
            faults.append(
                {
                    "file": LONG_FILE,
                    "member": "",
                    "row": row,
                    "line": row + 1,
                    "trait": c.trait,
                    "written_name": c.written_name,
                    "institution": c.institution,
                    "catalog_number": c.catalog_number,
                    "value_written": c.written,
                    "unit_written": c.unit,
                    "kind": "exact_duplicate",
                    "detail": f"repeats row {row - 1}",
                }
            )
        else:
            fault(LONG_FILE, "", row, 1, c, c.unit)
    frame = pd.DataFrame(records)
    (folder / LONG_FILE).write_bytes(_csv_text(frame, "\t").encode("cp1252"))

    # (3) Darwin Core Archive: Occurrence core + MeasurementOrFact extension,
    # plus some specimens of the wide source published again (duplicates).
    dwc = [c for c in cells if c.source == DWCA_FILE]
    grouped = {}
    for c in dwc:
        grouped.setdefault(c.specimen, []).append(c)
    dwc_traits = ["body_length", "head_width", "body_mass", "activity"]
    unfaulted = sorted(
        s
        for s, cs in by_specimen.items()
        if cs[0].canonical and not any(c.kind for c in cs) and cs[0].institution == "ZMTV"
    )
    copies = [int(s) for s in rng.choice(unfaulted, min(6, len(unfaulted)), replace=False)]
    next_specimen = max(grouped) + 1
    for specimen in copies:
        originals = {c.trait: c for c in by_specimen[specimen]}
        first = by_specimen[specimen][0]
        copied = []
        for trait in dwc_traits:
            c = originals[trait]
            copied.append(
                _Cell(
                    DWCA_FILE,
                    next_specimen,
                    first.canonical,
                    c.institution,
                    c.catalog_number,
                    c.sex,
                    trait,
                    c.value,
                    c.canonical,
                    c.written,
                    c.unit,
                    "duplicate",
                    f"same specimen as {WIDE_FILE} row {wide_rows[specimen]}",
                )
            )
        truth.setdefault(first.canonical, (first.canonical, "exact"))
        grouped[next_specimen] = copied
        next_specimen += 1
    order = [int(i) for i in rng.permutation(sorted(grouped))]
    occurrences = []
    facts = []
    for specimen in order:
        first = grouped[specimen][0]
        occurrence_id = f"urn:catalog:{first.institution}:{first.catalog_number}"
        occurrences.append(
            {
                "occurrenceID": occurrence_id,
                "institutionCode": first.institution,
                "catalogNumber": first.catalog_number,
                "scientificName": first.written_name,
                "sex": _SEX_WORD[first.sex],
                "lifeStage": "adult",
                "recordedBy": naming.COLLECTORS[int(rng.integers(len(naming.COLLECTORS)))],
                "basisOfRecord": "PreservedSpecimen",
            }
        )
        for c in grouped[specimen]:
            facts.append(
                {
                    "id": occurrence_id,
                    "measurementID": f"{occurrence_id}:m{len(facts) + 1}",
                    "measurementType": c.trait,
                    "measurementValue": c.written,
                    "measurementUnit": c.unit,
                }
            )
            fault(DWCA_FILE, "measurementorfact.txt", len(facts), 1, c, c.unit)
    _write_archive(folder / DWCA_FILE, pd.DataFrame(occurrences), pd.DataFrame(facts))
    return faults


def _meta_xml(occurrence_columns: list[str], fact_columns: list[str]) -> str:
    """meta.xml as the Darwin Core text guide describes it (TDWG,
    https://dwc.tdwg.org/text/): a core with an id, an extension with a
    coreid, and each field mapped to its term URI."""

    def fields(columns: list[str], skip: int) -> list[str]:
        return [
            f'    <field index="{i}" term="{DWC}{name}"/>'
            for i, name in enumerate(columns)
            if i >= skip
        ]

    attributes = (
        'encoding="UTF-8" fieldsTerminatedBy="\\t" linesTerminatedBy="\\n" '
        'fieldsEnclosedBy="" ignoreHeaderLines="1"'
    )
    lines = [
        '<?xml version="1.0" encoding="UTF-8"?>',
        '<archive xmlns="http://rs.tdwg.org/dwc/text/" metadata="eml.xml">',
        f'  <core {attributes} rowType="{DWC}Occurrence">',
        "    <files><location>occurrence.txt</location></files>",
        '    <id index="0"/>',
        *fields(occurrence_columns, 0),
        "  </core>",
        f'  <extension {attributes} rowType="{DWC}MeasurementOrFact">',
        "    <files><location>measurementorfact.txt</location></files>",
        '    <coreid index="0"/>',
        *fields(fact_columns, 1),
        "  </extension>",
        "</archive>",
        "",
    ]
    return "\n".join(lines)


_EML = """<?xml version="1.0" encoding="UTF-8"?>
<eml:eml xmlns:eml="eml://ecoinformatics.org/eml-2.1.1"
         packageId="demo-ihlv-velquiridae" system="tipledger-demo">
  <dataset>
    <title>Velquiridae specimens of the Institute of Highland Life, Veldmar
      (invented demo data)</title>
    <creator><individualName><surName>Obenhale</surName></individualName></creator>
    <intellectualRights><para>Invented data for demonstration; CC0.</para></intellectualRights>
  </dataset>
</eml:eml>
"""


def _write_archive(path: Path, occurrences: pd.DataFrame, facts: pd.DataFrame) -> None:
    members = {
        "meta.xml": _meta_xml(list(occurrences.columns), list(facts.columns)),
        "eml.xml": _EML,
        "occurrence.txt": _csv_text(occurrences, "\t"),
        "measurementorfact.txt": _csv_text(facts, "\t"),
    }
    with zipfile.ZipFile(path, "w") as archive:
        for name, text in members.items():
            info = zipfile.ZipInfo(name, date_time=_ZIP_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            archive.writestr(info, text.encode("utf-8"))


# --------------------------------------------------------------------------
# definitions, truth and the whole scenario


def _toml_string(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)


def _definitions_toml() -> str:
    descriptions = {
        "body_length": "snout to vent, adult specimens",
        "tail_length": "vent to tail tip, intact tails",
        "head_width": "widest point behind the eyes",
        "body_mass": "fresh or preserved mass",
    }
    lines = [
        "# Trait definitions of the invented demo scenario (the Velquiridae).",
        "# Continuous traits: target unit, analysis scale (raw, ln, log10) and the",
        "# allowed range in the target unit. Discrete traits: states and the",
        "# written variants that mean each state.",
        "",
    ]
    for name, spec in TRAITS.items():
        low, high = spec["range"]  # type: ignore[misc]
        lines += [
            "[[trait]]",
            f"name = {_toml_string(name)}",
            'kind = "continuous"',
            f"unit = {_toml_string(str(spec['unit']))}",
            f"scale = {_toml_string(str(spec['scale']))}",
            f"minimum = {low}",
            f"maximum = {high}",
            f"description = {_toml_string(descriptions[name])}",
            "",
        ]
    lines += [
        "[[trait]]",
        'name = "activity"',
        'kind = "discrete"',
        "states = [" + ", ".join(_toml_string(s) for s in STATES) + "]",
        'description = "when the animals are active"',
        "",
        "[trait.state_map]",
    ]
    for state, variants in STATE_VARIANTS.items():
        lines += [f"{_toml_string(v)} = {_toml_string(state)}" for v in variants]
    lines.append("")
    return "\n".join(lines)


_README = """# The demo scenario (invented)

Everything here is made up by `tipledger generate-scenario --seed {seed}`:
the Velquiridae are a fictional clade, the collections (ZMTV, NCKB, IHLV,
QRSM), their towns and the people named are fictional too.

- `tree.nex`: a dated tree of {tips} tips (NEXUS with a TRANSLATE block);
  its planted defects are listed in `truth/trees.json`.
- `posterior.nex`: {trees} posterior trees with `[&lnP=...]` and
  `[&rate=...]` comments; the first {burn_in} are burn-in.
- `{wide}`: source 1, one row per specimen, lengths in mm and mass in g,
  names with authorities (UTF-8).
- `{long}`: source 2, one row per measurement, cm and kg, decimal commas,
  Windows-1252.
- `{dwca}`: source 3, a Darwin Core Archive (Occurrence core with the
  MeasurementOrFact extension).
- `synonyms.csv`: synonym and accepted name.
- `traits.toml`: trait definitions (units, scales, ranges, states).
- `truth/names.csv`: what every written name really is (its tip, or none).
- `truth/faults.csv`: every planted fault in the trait sources, by file,
  row and trait.
- `truth/trees.json`: every planted tree defect (nodes named by two tips).
- `truth/species.csv`: the species values the specimens were drawn from.

Rows are counted from 1 after the header line (`line` is the line in the file).
"""


def generate_scenario(
    folder: str | Path,
    *,
    seed: int = DEFAULT_SEED,
    tips: int = 200,
    posterior_trees: int = 50,
) -> ScenarioFiles:
    """Write the invented demo scenario into ``folder`` (created if needed).

    Args:
        seed: seed of the NumPy random generator; the same seed, tips and
            posterior_trees give byte-identical files.
        tips: number of tips of the dated tree (at least 20).
        posterior_trees: number of trees in the posterior sample (at least 5).

    Returns:
        The paths written (:class:`ScenarioFiles`).

    Raises:
        InputError: ``tips`` or ``posterior_trees`` too small for the defects
            the scenario plants.
    """
    if tips < 20:
        raise InputError(
            f"tips={tips} is too few for the planted defects",
            field="tips",
            value=tips,
            hint="give --tips 20 or more",
        )
    if posterior_trees < 5:
        raise InputError(
            f"posterior_trees={posterior_trees} is too few for a burn-in and planted defects",
            field="posterior_trees",
            value=posterior_trees,
            hint="give --posterior-trees 5 or more",
        )
    root = Path(folder)
    (root / "truth").mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)

    base, species, extras = _build_clade(rng, tips)
    _, tree_truth = _write_trees(root, rng, base, posterior_trees)
    values = _species_traits(base, species, extras, rng)
    synonym_table, synonyms = _make_synonyms(species, extras, rng)
    cells, name_truth = _specimens(species, extras, values, synonyms, rng)
    _render_values(cells, rng)
    _plant_faults(cells, rng)
    faults = _write_sources(root, cells, rng, name_truth)

    (root / "synonyms.csv").write_text(
        _csv_text(synonym_table, ","), encoding="utf-8", newline="\n"
    )
    (root / "traits.toml").write_text(_definitions_toml(), encoding="utf-8", newline="\n")

    tip_of = {sp.canonical: sp.tip_label for sp in species}
    sources_of: dict[str, set[str]] = {}
    for cell in cells:
        sources_of.setdefault(cell.written_name, set()).add(cell.source)
    names = pd.DataFrame(
        [
            {
                "written_name": written,
                "true_tip": tip_of.get(canonical) or "",
                "accepted_name": canonical,
                "kind": kind,
                "sources": ";".join(sorted(sources_of.get(written, {DWCA_FILE}))),
            }
            for written, (canonical, kind) in sorted(name_truth.items())
        ]
    )
    (root / "truth" / "names.csv").write_text(_csv_text(names, ","), encoding="utf-8", newline="\n")
    fault_frame = pd.DataFrame(faults).sort_values(["file", "row", "trait"], kind="stable")
    (root / "truth" / "faults.csv").write_text(
        _csv_text(fault_frame, ","), encoding="utf-8", newline="\n"
    )
    (root / "truth" / "trees.json").write_text(
        json.dumps(tree_truth, indent=2, ensure_ascii=False) + "\n", encoding="utf-8", newline="\n"
    )
    species_rows = []
    for sp in species + extras:
        for trait, value in values[sp.canonical].items():
            unit = str(TRAITS[trait]["unit"]) if trait in TRAITS else ""
            shown = f"{value:.6g}" if isinstance(value, float) else value
            species_rows.append(
                {
                    "accepted_name": sp.canonical,
                    "tip_label": sp.tip_label or "",
                    "trait": trait,
                    "value": shown,
                    "unit": unit,
                }
            )
    (root / "truth" / "species.csv").write_text(
        _csv_text(pd.DataFrame(species_rows), ","), encoding="utf-8", newline="\n"
    )
    posterior = tree_truth["posterior"]
    readme = _README.format(
        seed=seed,
        tips=tips,
        trees=posterior_trees,
        burn_in=posterior["burn_in"],  # type: ignore[index]
        wide=WIDE_FILE,
        long=LONG_FILE,
        dwca=DWCA_FILE,
    )
    (root / "README.md").write_text(readme, encoding="utf-8", newline="\n")
    return scenario_files(root, seed=seed)


def scenario_files(folder: str | Path, *, seed: int = DEFAULT_SEED) -> ScenarioFiles:
    """The paths :func:`generate_scenario` writes into ``folder`` (whether or
    not they exist yet)."""
    root = Path(folder)
    truth = root / "truth"
    return ScenarioFiles(
        folder=root,
        tree=root / "tree.nex",
        posterior=root / "posterior.nex",
        traits_wide=root / WIDE_FILE,
        traits_long=root / LONG_FILE,
        darwin_core=root / DWCA_FILE,
        synonyms=root / "synonyms.csv",
        trait_definitions=root / "traits.toml",
        truth_names=truth / "names.csv",
        truth_faults=truth / "faults.csv",
        truth_trees=truth / "trees.json",
        truth_species=truth / "species.csv",
        readme=root / "README.md",
        seed=seed,
    )
