"""Benchmark-sized invented measurements, made in memory from a seed.

- :func:`generate_measurements`: a measurements table shaped like the
  store's (the traits and bundle stages: 1,000,000 rows, 20 traits, 50,000
  species), with planted faults marked in a ``planted`` column.
- :func:`benchmark_trait_definitions`: the definitions of its traits.

The species' names come from :mod:`curation.demo.naming` (which also makes
benchmark names: ``generate_names``), trees from
:mod:`curation.demo.phylogeny` (``generate_tree``, ``generate_tree_set``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from curation.demo.naming import BENCH_SEED, invent_binomials, label_binomials

__all__ = ["benchmark_trait_definitions", "generate_measurements"]


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
    genus, epithet, _, _ = invent_binomials(groups, rng)
    labels = np.asarray(label_binomials(genus, epithet, rng), dtype=object)
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
