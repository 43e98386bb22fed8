"""The seeded generator of the invented demo scenario.

:func:`generate_scenario` writes the sample files (a time tree and a
posterior set in NEXUS, three trait sources, a synonym table, trait
definitions) and the ground truth that says which names are corrupted and
how, which values are planted faults and which tree defects were planted.
The same seed gives byte-identical files.

The scenario: the Velquiridae, an invented clade of small ground-dwelling
animals, measured by four invented collections (Tarvonia, Kelbrook,
Veldmar, Quessary). Nothing in it is a real taxon, person or institution.
Its names come from :mod:`curation.demo.naming`, its trees from
:mod:`curation.demo.phylogeny`, like the benchmarks' data.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
from pydantic import BaseModel
from rapidfuzz import process
from rapidfuzz.distance import Levenshtein

from curation.demo import naming
from curation.demo.archives import ArchiveTable, csv_text, write_archive
from curation.demo.phylogeny import TimeTree, simulate_pure_birth
from curation.demo.scenario import (
    CHECKLIST_FILE,
    DEFAULT_SEED,
    DWCA_FILE,
    LONG_FILE,
    ROOT_AGE,
    STATE_VARIANTS,
    STATES,
    TRAITS,
    WIDE_FILE,
    Species,
)
from curation.demo.sources import (
    draw_specimens,
    plant_faults,
    render_values,
    write_sources,
)
from curation.demo.treefiles import write_tree_files
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


class ScenarioFiles(BaseModel):
    """Paths of everything :func:`generate_scenario` wrote."""

    folder: Path
    tree: Path
    posterior: Path
    traits_wide: Path
    traits_long: Path
    darwin_core: Path
    synonyms: Path
    checklist: Path
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
) -> tuple[TimeTree, list[Species], list[Species]]:
    genus_count = max(2, min(len(naming.GENERA), round(tips / 14)))
    tree = simulate_pure_birth(tips, rng, root_age=ROOT_AGE, groups=genus_count)
    genera = list(naming.GENERA[:genus_count])
    taken: list[str] = []
    species: list[Species] = []
    tip_nodes = tree.tips()
    for node in tip_nodes:
        genus, gender = genera[int(tree.group[node])]
        epithet, kind = _unique_epithet(rng, genus, gender, taken)
        taken.append(f"{genus} {epithet}")
        species.append(Species(genus, gender, epithet, kind, _authority(rng), None, int(node)))
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
    extras: list[Species] = []
    for _ in range(max(2, tips // 30)):
        genus, gender = genera[int(rng.integers(len(genera)))]
        epithet, kind = _unique_epithet(rng, genus, gender, taken)
        taken.append(f"{genus} {epithet}")
        extras.append(Species(genus, gender, epithet, kind, _authority(rng), None))
    return tree, species, extras


# --------------------------------------------------------------------------
# traits on the tree


def _species_traits(
    tree: TimeTree, species: list[Species], extras: list[Species], rng: np.random.Generator
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


def _make_synonyms(
    species: list[Species], extras: list[Species], rng: np.random.Generator
) -> tuple[pd.DataFrame, dict[str, str]]:
    """Synonyms: genus transfers (homotypic: the same type in another
    combination) and replaced epithets (heterotypic). Returns them with
    columns synonym (as written, sometimes with an authority), bare name,
    authority, status and accepted_name; and, per accepted name, the
    synonym the sources write."""
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
            synonym, status = f"{old_genus} {epithet}", "homotypicSynonym"
        else:
            epithet, _ = _unique_epithet(rng, sp.genus, sp.gender, taken)
            synonym, status = f"{sp.genus} {epithet}", "heterotypicSynonym"
        taken.append(synonym)
        author = _authority(rng) if rng.random() < 0.3 else ""
        rows.append(
            {
                "synonym": f"{synonym} {author}".strip(),
                "bare": synonym,
                "authority": author,
                "status": status,
                "accepted_name": sp.canonical,
            }
        )
        used[sp.canonical] = synonym
    for sp in extras[:1]:
        old_genus, old_gender = naming.OLD_GENERA[0]
        epithet = naming.agree(sp.epithet, sp.kind, sp.gender, old_gender)
        synonym = f"{old_genus} {epithet}"
        rows.append(
            {
                "synonym": synonym,
                "bare": synonym,
                "authority": "",
                "status": "homotypicSynonym",
                "accepted_name": sp.canonical,
            }
        )
    table = pd.DataFrame(rows).sort_values("synonym", kind="stable").reset_index(drop=True)
    return table, used


def _write_checklist(
    path: Path, species: list[Species], extras: list[Species], synonyms: pd.DataFrame
) -> None:
    """A Darwin Core Taxon checklist: every accepted species with its
    authorship, and the synonyms pointing at them by acceptedNameUsageID
    (Darwin Core terms, TDWG)."""
    accepted = sorted(species + extras, key=lambda sp: sp.canonical)
    ids = {sp.canonical: f"vq-{i + 1:04d}" for i, sp in enumerate(accepted)}
    rows = [
        {
            "taxonID": ids[sp.canonical],
            "scientificName": sp.canonical,
            "scientificNameAuthorship": sp.authority,
            "genus": sp.genus,
            "specificEpithet": sp.epithet,
            "taxonRank": "species",
            "taxonomicStatus": "accepted",
            "acceptedNameUsageID": "",
        }
        for sp in accepted
    ]
    for i, row in enumerate(synonyms.itertuples(), len(accepted) + 1):
        genus, epithet = str(row.bare).split(" ", 1)
        rows.append(
            {
                "taxonID": f"vq-{i:04d}",
                "scientificName": row.bare,
                "scientificNameAuthorship": row.authority,
                "genus": genus,
                "specificEpithet": epithet,
                "taxonRank": "species",
                "taxonomicStatus": row.status,
                "acceptedNameUsageID": ids[str(row.accepted_name)],
            }
        )
    write_archive(
        path,
        ArchiveTable("Taxon", "taxon.txt", pd.DataFrame(rows)),
        [],
        package="demo-velquiridae-checklist",
        title="Checklist of the Velquiridae (invented demo data)",
        creator="Sarquist",
    )


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
- `{checklist}`: the same synonyms in a Darwin Core Taxon checklist
  (taxonomicStatus, acceptedNameUsageID), with every accepted species.
- `traits.toml`: trait definitions (units, scales, ranges, states).
- `truth/names.csv`: what every written name really is (its tip, or none).
- `truth/faults.csv`: every planted fault in the trait sources, by file,
  row and trait.
- `truth/trees.json`: every planted tree defect (nodes named by two tips).
- `truth/species.csv`: the species values the specimens were drawn from.

In `truth/faults.csv`, `row` counts data rows from 1 after the header and
`line` is the line in the file (for the archive: in `member`). Fault kinds:
`unit_slip` (a value in another unit than written), `outlier`, `impossible`
(negative or zero), `unparsed` (a number with a qualifier), `unknown_unit`,
`incompatible_unit`, `state_conflict`, `duplicate` (the later copy of a
specimen another source holds: same institution and catalogue number),
`exact_duplicate` (a repeated row) and `missing` (no value written).
In `truth/names.csv`, `true_tip` is empty for names with no tip
(`no_tip`: a species not in the tree; `sp_qualifier`: a genus only).
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
        tips: number of tips of the dated tree (at least 30).
        posterior_trees: number of trees in the posterior sample (at least 5).

    Returns:
        The paths written (:class:`ScenarioFiles`).

    Raises:
        InputError: ``tips`` or ``posterior_trees`` too small for the defects
            the scenario plants.
    """
    if tips < 30:
        raise InputError(
            f"tips={tips} is too few for the planted defects",
            field="tips",
            hint="give --tips 30 or more",
        )
    if posterior_trees < 5:
        raise InputError(
            f"posterior_trees={posterior_trees} is too few for a burn-in and planted defects",
            field="posterior_trees",
            hint="give --posterior-trees 5 or more",
        )
    root = Path(folder)
    (root / "truth").mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)

    base, species, extras = _build_clade(rng, tips)
    _, tree_truth = write_tree_files(root, rng, base, posterior_trees)
    values = _species_traits(base, species, extras, rng)
    synonym_table, synonyms = _make_synonyms(species, extras, rng)
    cells, name_truth = draw_specimens(species, extras, values, synonyms, rng)
    render_values(cells, rng)
    plant_faults(cells, rng)
    faults = write_sources(root, cells, rng, name_truth)

    table = synonym_table[["synonym", "accepted_name"]]
    (root / "synonyms.csv").write_text(csv_text(table, ","), encoding="utf-8", newline="\n")
    _write_checklist(root / CHECKLIST_FILE, species, extras, synonym_table)
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
    (root / "truth" / "names.csv").write_text(csv_text(names, ","), encoding="utf-8", newline="\n")
    fault_frame = pd.DataFrame(faults).sort_values(["file", "row", "trait"], kind="stable")
    (root / "truth" / "faults.csv").write_text(
        csv_text(fault_frame, ","), encoding="utf-8", newline="\n"
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
        csv_text(pd.DataFrame(species_rows), ","), encoding="utf-8", newline="\n"
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
        checklist=CHECKLIST_FILE,
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
        checklist=root / CHECKLIST_FILE,
        trait_definitions=root / "traits.toml",
        truth_names=truth / "names.csv",
        truth_faults=truth / "faults.csv",
        truth_trees=truth / "trees.json",
        truth_species=truth / "species.csv",
        readme=root / "README.md",
        seed=seed,
    )
