"""What the parts of the demo generator share: the traits of the invented
scenario, the file names, and the species and measurement cells that flow
from the clade to the written sources."""

from __future__ import annotations

import re
from dataclasses import dataclass

__all__ = [
    "CHECKLIST_FILE",
    "VOUCHER_SUFFIX",
    "ZIP_TIME",
    "DEFAULT_SEED",
    "DWC",
    "DWCA_FILE",
    "LONG_FILE",
    "POSTERIOR_DECIMALS",
    "ROOT_AGE",
    "STATES",
    "STATE_VARIANTS",
    "TRAITS",
    "TREE_DECIMALS",
    "WIDE_FILE",
    "Cell",
    "Species",
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
    "diurnal": ["Diurnal", "day-active", "DIURNAL"],
    "nocturnal": ["Nocturnal", "noct.", "night-active"],
    "cathemeral": ["Cathemeral", "cathemeral (both)"],
}

WIDE_FILE = "traits_wide.csv"
LONG_FILE = "traits_long.tsv"
DWCA_FILE = "occurrences_dwca.zip"
CHECKLIST_FILE = "checklist_dwca.zip"
DWC = "http://rs.tdwg.org/dwc/terms/"
VOUCHER_SUFFIX = re.compile(r"_(V\d{4}|2)$")
# Fixed time inside the zip so that the archive is byte-identical per seed.
ZIP_TIME = (2026, 1, 1, 0, 0, 0)


@dataclass
class Species:
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


@dataclass
class Cell:
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
