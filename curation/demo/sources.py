"""The three trait sources of the demo scenario: specimens drawn per
source, the faults each kind of source is prone to, and the layouts they
are written in (a wide CSV, a long Windows-1252 TSV, a Darwin Core
Archive)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from curation.demo import naming
from curation.demo.archives import ArchiveTable, csv_text, write_archive
from curation.demo.scenario import (
    DWCA_FILE,
    LONG_FILE,
    STATE_VARIANTS,
    STATES,
    TRAITS,
    WIDE_FILE,
    Cell,
    Species,
)

__all__ = ["draw_specimens", "plant_faults", "render_values", "write_sources"]


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


def draw_specimens(
    species: list[Species],
    extras: list[Species],
    values: dict[str, dict[str, float | str]],
    synonyms: dict[str, str],
    rng: np.random.Generator,
) -> tuple[list[Cell], dict[str, tuple[str, str]]]:
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
    cells: list[Cell] = []
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
            written, kind = naming.write_name(
                kind,
                sp.genus,
                sp.epithet,
                rng,
                gender=sp.gender,
                epithet_class=sp.kind,
                authority=sp.authority,
                tip_label=sp.tip_label,
                synonym=synonyms.get(sp.canonical),
            )
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
                        Cell(
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
                    Cell(
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


def _source_unit(cell: Cell, rng: np.random.Generator) -> str:
    target = str(TRAITS[cell.trait]["unit"])
    if cell.source == LONG_FILE:
        if target == "g":
            return "kg"
        return "mm" if rng.random() < 0.15 else "cm"
    return target


def render_values(cells: list[Cell], rng: np.random.Generator) -> None:
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


def plant_faults(cells: list[Cell], rng: np.random.Generator) -> None:
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

    def pick(source: str, traits: tuple[str, ...] = tuple(TRAITS)) -> Cell:
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

    # One contributor's species all in mm under a cm heading: its values
    # in that source disagree with the other sources by a factor of 10.
    per_source: dict[tuple[str, str], list[int]] = {}
    for i, c in enumerate(cells):
        if c.canonical and c.trait == "body_length":
            per_source.setdefault((c.canonical, c.source), []).append(i)
    conflicted = sorted(
        name
        for (name, source), rows in per_source.items()
        if source == LONG_FILE
        and len(rows) >= 3
        and len(per_source.get((name, WIDE_FILE), [])) >= 4
        and not any((name, t) in faulted_groups for t in lengths)
    )
    chosen = conflicted[int(rng.integers(len(conflicted)))] if conflicted else None
    for i, cell in enumerate(cells):
        if (cell.canonical, cell.source) == (chosen, LONG_FILE) and cell.trait in lengths:
            cell.written = _number_text(float(cell.value), "cm", comma=True)
            cell.kind = "source_conflict"
            cell.detail = "this source's lengths of the species are in mm under cm (factor 10)"
            taken.add(i)
    faulted_groups.update((chosen, t) for t in lengths)

    missing = {WIDE_FILE: "", LONG_FILE: "NA", DWCA_FILE: ""}
    for i, cell in enumerate(cells):
        if i not in taken and not cell.kind and rng.random() < 0.02:
            cell.written, cell.kind, cell.detail = missing[cell.source], "missing", "no value"


_SEX_WORD = {"F": "female", "M": "male"}


def write_sources(
    folder: Path, cells: list[Cell], rng: np.random.Generator, truth: dict[str, tuple[str, str]]
) -> list[dict[str, object]]:
    """Write the three trait sources; return the ground truth of every
    planted fault (file, row, line, trait ...)."""
    faults: list[dict[str, object]] = []

    def fault(file: str, member: str, row: int, header_lines: int, cell: Cell, unit: str) -> None:
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
    by_specimen: dict[int, list[Cell]] = {}
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
    (folder / WIDE_FILE).write_text(csv_text(frame, ","), encoding="utf-8", newline="\n")

    # (2) long TSV in cm and kg, decimal commas, Windows-1252.
    long = [c for c in cells if c.source == LONG_FILE]
    long_specimens = sorted({c.specimen for c in long})
    order = [int(i) for i in rng.permutation(long_specimens)]
    grouped: dict[int, list[Cell]] = {}
    for c in long:
        grouped.setdefault(c.specimen, []).append(c)
    rows: list[tuple[Cell, bool]] = []
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
    (folder / LONG_FILE).write_bytes(csv_text(frame, "\t").encode("cp1252"))

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
                Cell(
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
    write_archive(
        folder / DWCA_FILE,
        ArchiveTable("Occurrence", "occurrence.txt", pd.DataFrame(occurrences)),
        [ArchiveTable("MeasurementOrFact", "measurementorfact.txt", pd.DataFrame(facts))],
        package="demo-ihlv-velquiridae",
        title="Velquiridae specimens of the Institute of Highland Life, Veldmar (invented)",
        creator="Obenhale",
    )
    return faults
