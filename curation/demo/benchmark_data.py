"""Benchmark-sized invented data, made in memory from a seed.

- :func:`generate_names`: tip labels and written names with corruptions
  and their truth (the names stage: 50,000 names against 50,000 tips).
- :func:`generate_tree`: an ultrametric Newick tree (the trees stage:
  100,000 tips) whose genera are clades.
- :func:`generate_measurements`: a measurements table shaped like the
  store's (the traits and bundle stages: 1,000,000 rows, 20 traits, 50,000
  species), with planted faults marked in a ``planted`` column.

Names are built from the same syllables as the demo scenario, vectorised
with NumPy so that 100,000 of them take well under a second.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from curation.demo import naming
from curation.demo.phylogeny import simulate_pure_birth, write_newick_body
from curation.demo.treefiles import nexus_text, numbered_tips, perturbed_copy

__all__ = [
    "BenchmarkNames",
    "benchmark_trait_definitions",
    "generate_measurements",
    "generate_names",
    "generate_tip_labels",
    "generate_tree",
    "generate_tree_set",
]

BENCH_SEED = 20261202


def _genera(count: int, rng: np.random.Generator) -> tuple[list[str], list[str]]:
    names: list[str] = []
    genders: list[str] = []
    seen: set[str] = set()
    while len(names) < count:
        name, gender = naming.invent_genus(rng)
        if name not in seen:
            seen.add(name)
            names.append(name)
            genders.append(gender)
    return names, genders


def _binomials(
    groups: np.ndarray, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Unique binomials for tips grouped into genera by ``groups``.

    Returns genus, epithet, gender and epithet class per tip."""
    count = int(groups.max()) + 1 if len(groups) else 0
    names, genders = _genera(count, rng)
    genus = np.asarray(names, dtype=object)[groups]
    gender = np.asarray(genders, dtype=object)[groups]
    epithet, kind = naming.invent_epithets(gender, rng)
    # Redraw the few epithets that repeat within a genus until none does.
    while True:
        full = pd.Series(genus + " " + epithet)
        again = full.duplicated().to_numpy()
        if not again.any():
            return genus, epithet, gender, kind
        epithet[again], kind[again] = naming.invent_epithets(gender[again], rng)


def generate_tip_labels(n: int, *, seed: int = BENCH_SEED) -> list[str]:
    """Return ``n`` unique invented tip labels (``Genus_epithet``, about 1 in
    8 with a voucher suffix ``_V1234``), about 25 per genus."""
    rng = np.random.default_rng(seed)
    groups = rng.integers(max(1, n // 25), size=n)
    genus, epithet, _, _ = _binomials(groups, rng)
    return _labels(genus, epithet, rng)


def _labels(genus: np.ndarray, epithet: np.ndarray, rng: np.random.Generator) -> list[str]:
    n = len(genus)
    labels = genus + "_" + epithet
    voucher = rng.random(n) < 0.12
    suffix = np.char.add("_V", rng.integers(1000, 9999, size=n).astype(str)).astype(object)
    return list(np.where(voucher, labels + suffix, labels))


@dataclass
class BenchmarkNames:
    """Tips, written names and the truth for the names benchmark.

    Attributes:
        tips: unique tip labels.
        written: written names, one per row of ``truth``.
        truth: written_name, true_tip ('' when the name has no tip), kind.
        synonyms: synonym, accepted_name (canonical ``Genus epithet``).
    """

    tips: list[str]
    written: list[str]
    truth: pd.DataFrame
    synonyms: pd.DataFrame


_KINDS = [
    ("exact", 0.45),
    ("authority", 0.12),
    ("underscore", 0.08),
    ("tip_label", 0.04),
    ("case_spacing", 0.04),
    ("typo", 0.10),
    ("spelling_variant", 0.04),
    ("gender_variant", 0.04),
    ("synonym", 0.03),
    ("cf_qualifier", 0.02),
    ("sp_qualifier", 0.02),
    ("no_tip", 0.02),
]


def generate_names(n: int, *, seed: int = BENCH_SEED, tips: int | None = None) -> BenchmarkNames:
    """Return ``tips`` tip labels (default ``n``) and ``n`` written names
    drawn from them with the corruptions of the demo scenario (typos,
    authorities, underscores, gender variants, synonyms, qualifiers) and
    some names of species with no tip.

    Returns:
        A :class:`BenchmarkNames`; the same seed gives the same names.
    """
    rng = np.random.default_rng(seed)
    n_tips = n if tips is None else tips
    groups = rng.integers(max(1, n_tips // 25), size=n_tips + n)
    genus, epithet, gender, kind_of = _binomials(groups, rng)
    # The last n binomials are spare: species that are measured but have no tip.
    labels = _labels(genus[:n_tips], epithet[:n_tips], rng)
    kinds = np.asarray([k for k, _ in _KINDS], dtype=object)
    weights = np.array([w for _, w in _KINDS])
    drawn = kinds[rng.choice(len(kinds), size=n, p=weights / weights.sum())]
    source = rng.integers(n_tips, size=n)
    old_genera = [g for g, _ in naming.OLD_GENERA]
    written: list[str] = []
    true_tip: list[str] = []
    synonym_rows: list[dict[str, str]] = []
    synonym_of: dict[str, str] = {}
    for i in range(n):
        kind = str(drawn[i])
        t = int(source[i])
        g, e, label = str(genus[t]), str(epithet[t]), labels[t]
        tip = label
        if kind == "authority":
            text = f"{g} {e} {naming.AUTHORS[i % len(naming.AUTHORS)]}, {1800 + i % 200}"
        elif kind == "underscore":
            text = f"{g}_{e}"
        elif kind == "tip_label":
            text = label
        elif kind == "case_spacing":
            text = f"{g.lower()}  {e}" if i % 2 else f"{g.upper()} {e.upper()}"
        elif kind == "typo":
            text = f"{g} {naming.misspell(e, rng)}"
        elif kind == "spelling_variant":
            variant = naming.spelling_variant(e, rng)
            text = f"{g} {variant}" if variant else f"{g} {e}"
            kind = kind if variant else "exact"
        elif kind == "gender_variant" and kind_of[t] == "adj1":
            text = f"{g} {naming.gender_variant(e, 'adj1', str(gender[t]))}"
        elif kind == "synonym":
            text = f"{old_genera[i % len(old_genera)]} {e}"
            accepted = f"{g} {e}"
            if synonym_of.setdefault(text, accepted) != accepted:
                # One synonym, one accepted name: write this one plainly.
                text, kind = accepted, "exact"
            elif len(synonym_of) > len(synonym_rows):
                synonym_rows.append({"synonym": text, "accepted_name": accepted})
        elif kind == "cf_qualifier":
            text = f"{g} cf. {e}"
        elif kind == "sp_qualifier":
            text, tip = f"{g} sp.", ""
        elif kind == "no_tip":
            spare = n_tips + i
            text, tip = f"{genus[spare]} {epithet[spare]}", ""
        else:
            text, kind = f"{g} {e}", "exact"
        drawn[i] = kind
        written.append(text)
        true_tip.append(tip)
    truth = pd.DataFrame({"written_name": written, "true_tip": true_tip, "kind": drawn})
    synonyms = pd.DataFrame(synonym_rows, columns=["synonym", "accepted_name"])
    return BenchmarkNames(labels, written, truth, synonyms)


def generate_tree(n_tips: int, *, seed: int = BENCH_SEED, decimals: int = 6) -> str:
    """Return a pure-birth ultrametric tree of ``n_tips`` tips as one line of
    Newick text (``[&R] (...);``), root age 100, lengths written with
    ``decimals`` digits; genera (about 25 tips each) are clades."""
    rng = np.random.default_rng(seed)
    tree = simulate_pure_birth(n_tips, rng, root_age=100.0, groups=max(1, n_tips // 25))
    tips = tree.tips()
    genus, epithet, _, _ = _binomials(tree.group[tips], rng)
    for node, label in zip(tips, _labels(genus, epithet, rng), strict=True):
        tree.labels[int(node)] = label
    body, _ = write_newick_body(tree, decimals=decimals)
    return f"[&R] {body};"


def generate_tree_set(
    n_trees: int, n_tips: int, *, seed: int = BENCH_SEED, decimals: int = 5
) -> str:
    """Return NEXUS text of a posterior-like sample: ``n_trees`` trees over
    the same ``n_tips`` tips (TAXA and TRANSLATE blocks), each a perturbed
    copy of one pure-birth tree (a few interchanges, jittered ages), with
    ``[&lnP=...]`` header and ``[&rate=...]`` branch comments.
    """
    rng = np.random.default_rng(seed)
    base = simulate_pure_birth(n_tips, rng, root_age=100.0, groups=max(1, n_tips // 25))
    tips = base.tips()
    genus, epithet, _, _ = _binomials(base.group[tips], rng)
    for node, label in zip(tips, _labels(genus, epithet, rng), strict=True):
        base.labels[int(node)] = label
    labels = sorted(base.labels[int(n)] for n in tips)
    translate = {label: i + 1 for i, label in enumerate(labels)}
    lines = []
    for index in range(n_trees):
        tree = perturbed_copy(base, rng, int(rng.integers(0, 4)), 0.08)
        rates = rng.lognormal(-4.5, 0.3, size=len(tree.parent))
        comments = {n: f"[&rate={rates[n]:.4f}]" for n in range(1, len(tree.parent))}
        body, _ = write_newick_body(
            tree, decimals=decimals, names=numbered_tips(tree, translate), comments=comments
        )
        lnp = -6150.0 + float(rng.normal(0, 6))
        lines.append(f"    TREE STATE_{index * 1000} [&lnP={lnp:.2f}] = [&R] {body};")
    return nexus_text(lines, labels, "Invented benchmark tree set.", translate)


def benchmark_trait_definitions(n_traits: int) -> pd.DataFrame:
    """Definitions of the benchmark traits: name, kind, unit, scale,
    minimum, maximum. Even traits are lengths (mm, ln scale), odd ones
    masses (g, log10 scale)."""
    names = [f"trait_{i:02d}" for i in range(n_traits)]
    length = np.arange(n_traits) % 2 == 0
    return pd.DataFrame(
        {
            "name": names,
            "kind": "continuous",
            "unit": np.where(length, "mm", "g"),
            "scale": np.where(length, "ln", "log10"),
            "minimum": 0.0,
            "maximum": np.where(length, 1.0e4, 1.0e7),
        }
    )


def generate_measurements(
    n_species: int, n_traits: int, n_rows: int, *, seed: int = BENCH_SEED
) -> pd.DataFrame:
    """Return ``n_rows`` measurements of ``n_traits`` traits over
    ``n_species`` species, shaped like the store's measurements table.

    Columns: trait_source_id (1-3; source 2 writes cm and kg, the others mm
    and g), row_number, written_name, tip_label, specimen_id, institution,
    trait, value_written, value_number, unit, sex, life_stage, status
    (ok|missing), reason, planted ('' or unit_slip, outlier, duplicate,
    missing). Specimens carry up to five traits each.
    """
    rng = np.random.default_rng(seed)
    groups = rng.integers(max(1, n_species // 25), size=n_species)
    genus, epithet, _, _ = _binomials(groups, rng)
    labels = np.asarray(_labels(genus, epithet, rng), dtype=object)
    canonical = genus + " " + epithet
    per_specimen = max(1, min(5, n_traits))
    n_specimens = -(-n_rows // per_specimen)
    specimen = np.repeat(np.arange(n_specimens), per_specimen)[:n_rows]
    of_specimen = rng.integers(n_species, size=n_specimens)
    source_of = rng.integers(1, 4, size=n_specimens)
    catalogue_of = np.arange(1000, 1000 + n_specimens)
    institution_of = np.array(["ZMTV", "NCKB", "IHLV"], dtype=object)[source_of - 1]
    # Duplicates: some specimens of source 3 published again by source 1
    # (same institution, catalogue number and species).
    again = (source_of == 1) & (rng.random(n_specimens) < 0.002)
    originals = np.flatnonzero(source_of == 3)
    if again.any() and len(originals):
        copied = rng.choice(originals, size=int(again.sum()))
        of_specimen[again] = of_specimen[copied]
        catalogue_of[again] = catalogue_of[copied]
        institution_of[again] = "IHLV"
    species = of_specimen[specimen]
    first_trait = rng.integers(n_traits, size=n_specimens)[specimen]
    trait = (first_trait + np.arange(n_rows) % per_specimen) % n_traits
    source = source_of[specimen]

    length = trait % 2 == 0
    means = rng.normal(np.log(50.0), 0.8, size=(n_species, n_traits))
    means[:, 1::2] = 3 * (means[:, 1::2] - np.log(50.0)) + np.log(20.0)
    log_value = means[species, trait] + rng.normal(0.0, 0.08, size=n_rows)
    value = np.exp(log_value)  # in mm or g

    big_unit = source == 2
    unit = np.where(length, np.where(big_unit, "cm", "mm"), np.where(big_unit, "kg", "g"))
    factor = np.where(big_unit, np.where(length, 10.0, 1000.0), 1.0)
    number = value / factor
    planted = np.full(n_rows, "", dtype=object)
    draw = rng.random(n_rows)
    slip = draw < 0.002
    number[slip] *= 10.0
    planted[slip] = "unit_slip"
    outlier = (draw >= 0.002) & (draw < 0.004)
    number[outlier] *= 3.5
    planted[outlier] = "outlier"
    missing = (draw >= 0.004) & (draw < 0.009)
    planted[missing] = "missing"

    institution = institution_of[specimen]
    catalogue = catalogue_of[specimen].astype(str).astype(object)
    planted[again[specimen] & (planted == "")] = "duplicate"

    decimals = np.where(big_unit, 4, 2)
    written = pd.Series(np.round(number, 4)).astype(str).to_numpy(dtype=object)
    written = np.where(decimals == 2, pd.Series(np.round(number, 2)).astype(str), written)
    value_number = np.where(missing, np.nan, number)
    written = np.where(missing, "NA", written)
    sex = np.where(rng.random(n_specimens)[specimen] < 0.5, "female", "male")
    frame = pd.DataFrame(
        {
            "trait_source_id": source,
            "row_number": np.arange(1, n_rows + 1),
            "written_name": canonical[species],
            "tip_label": labels[species],
            "specimen_id": catalogue,
            "institution": institution,
            "trait": np.char.add("trait_", np.char.zfill(trait.astype(str), 2)),
            "value_written": written,
            "value_number": value_number,
            "unit": unit,
            "sex": sex,
            "life_stage": "adult",
            "status": np.where(missing, "missing", "ok"),
            "reason": np.where(missing, "no value", None),
            "planted": planted,
        }
    )
    # Few distinct values: categories keep a million rows well under 1 GB.
    for column in (
        "institution",
        "trait",
        "unit",
        "sex",
        "life_stage",
        "status",
        "reason",
        "planted",
    ):
        frame[column] = frame[column].astype("category")
    return frame
