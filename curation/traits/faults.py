"""Faults in measurements: flagged, never deleted.

Each kind of fault is one row of :data:`FAULT_TABLE` (a :class:`FaultKind`),
beside its rule below: the rule (a function of the shared
:class:`Evidence`), whether it is found per measurement or per species and
trait, the severity and message of its findings, and whether a flagged
value leaves species values. Everything else is derived from the table:
:data:`FAULT_KINDS` (the flag columns, in table order), :data:`SPECIES_KINDS`
and :data:`EXCLUDING`; :mod:`curation.traits.review` only renders the
table's messages, :mod:`curation.traits.frame` asks :func:`excluding_kind`
why a value leaves. A curator's review overrides either way.

Every rule works on a whole measurements frame with vectorised pandas
(``groupby``/``transform``); no rule loops over rows. :func:`find_faults`
walks the table in order, so a rule may read the flags of the kinds above
it. Thresholds are the options of :class:`FaultOptions`.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from functools import cached_property
from types import MappingProxyType
from typing import Literal

import numpy as np
import pandas as pd
from pydantic import BaseModel

from curation.findings import Severity

__all__ = [
    "EXCLUDING",
    "FAULT_KINDS",
    "FAULT_TABLE",
    "SPECIES_KINDS",
    "Evidence",
    "FaultKind",
    "FaultOptions",
    "excluding_kind",
    "find_faults",
]

SLIP_FACTORS = (10.0, 100.0, 1000.0, 25.4)
#: Whether a flagged value leaves species values: ``always``; ``if_named``,
#: only when its row names the specimen (institution and catalogue number);
#: ``never`` (reported for review only).
Exclusion = Literal["always", "if_named", "never"]
#: Whether a kind is found per measurement or per species and trait.
Level = Literal["measurement", "species"]


class FaultOptions(BaseModel):
    """Thresholds of the fault rules (see each rule's notes)."""

    outlier_threshold: float = 5.0
    outlier_min_n: int = 5
    slip_tolerance: float = 0.08
    genus_threshold: float = 5.0
    genus_min_species: int = 4
    conflict_ratio: float = 1.5


@dataclass
class Evidence:
    """What the rules share for one prepared frame: its key codes and
    derived arrays, each computed once when a rule first asks for it; the
    flags of the kinds found so far (``flags``, by kind); and the measures
    rules leave beside their flags (``measures``: ``slip_factor``,
    ``robust_z``, ``repeated_value``)."""

    frame: pd.DataFrame
    options: FaultOptions
    flags: dict[str, np.ndarray] = field(default_factory=dict)
    measures: dict[str, np.ndarray] = field(default_factory=dict)

    @cached_property
    def codes(self) -> pd.DataFrame:
        """Integer codes of trait, species group and genus."""
        return _key_codes(self.frame)

    @cached_property
    def value(self) -> np.ndarray:
        """The values converted to the trait's unit (NaN where none)."""
        return self.frame["value"].to_numpy(dtype=float)

    @cached_property
    def continuous(self) -> np.ndarray:
        return self.frame["kind"].to_numpy() == "continuous"

    @cached_property
    def has_value(self) -> np.ndarray:
        """A number of a continuous trait was read."""
        return self.continuous & self.frame["number_ok"].to_numpy() & ~np.isnan(self.value)

    @cached_property
    def unit_problem(self) -> np.ndarray:
        return self.frame["unit_problem"].to_numpy(dtype=object) != ""

    @cached_property
    def usable(self) -> np.ndarray:
        """A number in a unit converted to the trait's."""
        return self.has_value & ~self.unit_problem

    @cached_property
    def duplicates(self) -> pd.DataFrame:
        """See :func:`_duplicates`."""
        return _duplicates(self.frame, self.codes)

    @cached_property
    def clean(self) -> np.ndarray:
        """Usable, possible, in range, positive and no repeated value of a
        specimen: the values the within-species rules compare (a second
        copy must not weigh in the species median). Needs the flags of
        ``impossible`` and ``out_of_range``."""
        return (
            self.usable
            & ~self.flags["impossible"]
            & ~self.flags["out_of_range"]
            & (self.value > 0)
            & ~self.duplicates["repeated_value"].to_numpy()
        )

    @cached_property
    def logs(self) -> pd.Series:
        """The natural log of the clean values (NaN elsewhere)."""
        clean = self.clean
        return pd.Series(
            np.where(clean, np.log(np.where(clean, self.value, 1.0)), np.nan),
            index=self.frame.index,
        )

    @cached_property
    def pair(self) -> pd.Series:
        """One integer code per species and trait, hashed once for every rule."""
        codes = self.codes
        return pd.Series(
            pd.factorize(codes["group"].to_numpy() * (codes["trait"].max() + 1) + codes["trait"])[0]
            if len(self.frame)
            else np.zeros(0, dtype=np.int64),
            index=self.frame.index,
        )

    @cached_property
    def spread(self) -> _Spread:
        """See :func:`_within_species`."""
        return _within_species(self)

    @cached_property
    def discrete(self) -> np.ndarray:
        """A state of a discrete trait was read."""
        return ~self.continuous & self.frame["state"].notna().to_numpy()


@dataclass(frozen=True)
class _Spread:
    n: np.ndarray  # clean values in the measurement's species and trait
    deviation: np.ndarray  # |log value - species median of logs|
    robust_z: np.ndarray  # NaN where not computed


def _key_codes(frame: pd.DataFrame) -> pd.DataFrame:
    """Integer codes of trait, species group and genus (reused when the
    frame carries them as ``trait_code``/``group_code``/``genus_code``)."""
    if "trait_code" in frame:
        return pd.DataFrame(
            {
                "trait": frame["trait_code"].to_numpy(),
                "group": frame["group_code"].to_numpy(),
                "genus": frame["genus_code"].to_numpy(),
            },
            index=frame.index,
        )
    return pd.DataFrame(
        {
            "trait": pd.factorize(frame["trait"])[0],
            "group": pd.factorize(frame["group"])[0],
            "genus": pd.factorize(frame["genus"])[0],
        },
        index=frame.index,
    )


def _group_median(values: pd.Series, keys: list[pd.Series]) -> pd.Series:
    return values.groupby(keys, sort=False, dropna=False).transform("median")


def _within_species(evidence: Evidence) -> _Spread:
    """Score each clean value within its species and trait on the natural
    log scale: a robust z ``|x - median| / (1.4826 MAD)`` (Hampel's
    median/MAD rule; Hampel 1974, JASA 69:383; Leys et al. 2013, J Exp Soc
    Psychol 49:764), only in groups of at least ``outlier_min_n`` values.
    The MAD is floored at half the trait's typical within-species scale, so
    that a tight small sample does not flag ordinary values, and at the
    step of the last digit written (relative to the median), so that values
    recorded to 0.1 do not look spread by less."""
    frame, options, clean = evidence.frame, evidence.options, evidence.clean
    logs, keys = evidence.logs, [evidence.pair]
    n = logs.notna().groupby(keys, sort=False).transform("sum").to_numpy()
    median = _group_median(logs, keys)
    deviation = (logs - median).abs()
    mad = _group_median(deviation, keys) * 1.4826
    # A floor per trait: half the typical within-species spread.
    typical = (
        mad.where(n >= options.outlier_min_n).groupby(evidence.codes["trait"]).transform("median")
    )
    # And a floor from the precision written: values recorded to 0.1 cannot
    # spread less than one step, whatever a tied sample's MAD says.
    step = _written_step(frame) * frame["factor"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        relative = pd.Series(step / np.exp(median.to_numpy()), index=frame.index)
    resolution = relative.where(clean).groupby(keys, sort=False).transform("median").to_numpy()
    scale = np.fmax(mad.to_numpy(), 0.5 * typical.fillna(0).to_numpy())
    scale = np.fmax(scale, np.nan_to_num(resolution, nan=0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        z = deviation.to_numpy() / scale
    z = np.where(np.isfinite(z), z, np.where(deviation.to_numpy() > 0, np.inf, 0.0))
    z = np.where(clean & (n >= options.outlier_min_n), z, np.nan)
    return _Spread(n=n, deviation=deviation.to_numpy(), robust_z=z)


def _written_step(frame: pd.DataFrame) -> np.ndarray:
    """Return the step of the last digit written (0.1 for ``"4.2"``, 1 for ``"42"``)."""
    text = np.asarray(frame["value_written"].fillna("").astype(str).to_numpy(), dtype=str)
    text = np.strings.strip(text)
    point = np.maximum(np.strings.rfind(text, "."), np.strings.rfind(text, ","))
    length = np.strings.str_len(text)
    decimals = np.where(point >= 0, length - point - 1, 0)
    return np.power(10.0, -decimals.astype(float))


def _tidy_codes(series: pd.Series, *, upper: bool = False) -> np.ndarray:
    """Codes of the values stripped (and upper-cased), -1 for blank or
    missing; each distinct value is tidied once, not each row."""
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    tidy = pd.Index(uniques, dtype=object).astype(str).str.strip()
    if upper:
        tidy = tidy.str.upper()
    tidy_codes, tidy_values = pd.factorize(tidy)
    blank = np.asarray(tidy_values == "", dtype=bool)
    tidy_codes = np.where(blank[tidy_codes], -1, tidy_codes) if len(tidy_codes) else tidy_codes
    return np.where(codes >= 0, tidy_codes[np.maximum(codes, 0)] if len(tidy_codes) else -1, -1)


def _duplicates(frame: pd.DataFrame, codes: pd.DataFrame) -> pd.DataFrame:
    """Flag specimens measured again and rows repeated within a source.

    ``duplicate_specimen``: the specimen (institution and catalogue number)
    is also in a more preferred source, or this trait of it was measured
    before in the same source. ``repeated_value`` marks the ones that repeat
    a trait already measured on the specimen: those leave species values.
    ``exact_duplicate``: the later copies of a row repeated within a source.
    """
    institution = _tidy_codes(frame["institution"], upper=True)
    specimen = _tidy_codes(frame["specimen_id"])
    named = (institution >= 0) & (specimen >= 0)
    order = np.lexsort(
        (frame["id"].to_numpy(), frame["trait_source_id"].to_numpy(), frame["priority"].to_numpy())
    )
    width = int(specimen.max()) + 2 if len(frame) else 1
    who = pd.Series((institution.astype(np.int64) + 1) * width + specimen + 1)
    source = frame["trait_source_id"].to_numpy()
    # The preferred source of each specimen is the first in (priority, source) order.
    first_source = pd.Series(source[order]).groupby(who.to_numpy()[order]).transform("first")
    elsewhere = np.zeros(len(frame), dtype=bool)
    elsewhere[order] = first_source.to_numpy() != source[order]
    traits = int(codes["trait"].max()) + 1 if len(frame) else 1
    measured = pd.Series(who.to_numpy() * traits + codes["trait"].to_numpy())
    repeated = np.zeros(len(frame), dtype=bool)
    repeated[order] = pd.Series(measured.to_numpy()[order]).duplicated(keep="first").to_numpy()
    repeated &= named
    elsewhere &= named

    # Exact duplicate rows: only rows all of whose measurements repeat
    # (same source, name, specimen, trait and number) can be; those few are
    # compared in full by an order-free sum of their measurements' hashes.
    number = frame["value_number"].to_numpy(dtype=float)
    candidate_key = pd.DataFrame(
        {
            "source": source,
            "group": codes["group"].to_numpy(),
            "who": who.to_numpy(),
            "trait": codes["trait"].to_numpy(),
            "number": np.nan_to_num(number, nan=-1.5e308),
        }
    )
    candidate = candidate_key.duplicated(keep=False).to_numpy()
    rows = pd.DataFrame({"source": source, "row": frame["row_number"].to_numpy(), "c": candidate})
    whole = rows.groupby(["source", "row"], sort=False)["c"].transform("all").to_numpy()
    exact = np.zeros(len(frame), dtype=bool)
    if whole.any():
        fields = [
            "written_name",
            "specimen_id",
            "institution",
            "trait",
            "value_written",
            "unit",
            "sex",
            "life_stage",
        ]
        subset = frame.loc[whole, fields].astype("string")
        hashed = pd.util.hash_pandas_object(subset, index=False).to_numpy()
        part = rows.loc[whole, ["source", "row"]].assign(h=hashed)
        grouped = part.groupby(["source", "row"], sort=True)["h"]
        per_row = pd.DataFrame({"sum": grouped.sum(), "count": grouped.size()}).reset_index()
        per_row["dup"] = per_row.duplicated(["source", "sum", "count"], keep="first")
        flagged = part.merge(per_row[["source", "row", "dup"]], on=["source", "row"], how="left")
        exact[whole] = flagged["dup"].to_numpy(dtype=bool)
    return pd.DataFrame(
        {
            "duplicate_specimen": repeated | elsewhere,
            "repeated_value": repeated,
            "exact_duplicate": exact,
        },
        index=frame.index,
    )


# --- the rules, one per kind, in the order of the table ---------------------


def _unconverted(evidence: Evidence) -> np.ndarray:
    """A number whose unit could not be converted to the trait's unit
    (``unit_problem`` of :func:`curation.traits.units.convert_values`)."""
    return evidence.has_value & evidence.unit_problem


def _impossible(evidence: Evidence) -> np.ndarray:
    """A negative value, or zero or below on a log scale."""
    value = evidence.value
    log_scale = evidence.frame["scale"].isin(["ln", "log10"]).to_numpy()
    return evidence.usable & ((value < 0) | (log_scale & (value <= 0)))


def _out_of_range(evidence: Evidence) -> np.ndarray:
    """A possible value outside the definition's minimum and maximum."""
    value = evidence.value
    low = evidence.frame["minimum"].to_numpy(dtype=float)
    high = evidence.frame["maximum"].to_numpy(dtype=float)
    with np.errstate(invalid="ignore"):
        return evidence.usable & ~evidence.flags["impossible"] & ((value < low) | (value > high))


def _unit_slip(evidence: Evidence) -> np.ndarray:
    """The ratio of a clean value to its species median (groups of three or
    more) within ``slip_tolerance`` of 10, 100, 1000 or 25.4, either
    direction; the first factor that fits is left as ``slip_factor``."""
    clean, spread = evidence.clean, evidence.spread
    slip = np.zeros(len(evidence.frame), dtype=bool)
    slip_factor = np.full(len(evidence.frame), np.nan)
    tolerance = np.log1p(evidence.options.slip_tolerance)
    for factor in SLIP_FACTORS:  # four fixed factors, not rows
        near = clean & (spread.n >= 3) & (np.abs(spread.deviation - np.log(factor)) < tolerance)
        slip_factor = np.where(near & ~slip, factor, slip_factor)
        slip |= near
    evidence.measures["slip_factor"] = slip_factor
    return slip


def _outlier(evidence: Evidence) -> np.ndarray:
    """A robust z within the species and trait (see :func:`_within_species`,
    left as ``robust_z``) above ``outlier_threshold``, unless the value is a
    unit slip."""
    z = evidence.spread.robust_z
    evidence.measures["robust_z"] = z
    with np.errstate(invalid="ignore"):
        high = np.nan_to_num(z, nan=0.0) > evidence.options.outlier_threshold
    return high & ~evidence.flags["unit_slip"]


def _duplicate_specimen(evidence: Evidence) -> np.ndarray:
    """The same institution and catalogue number in a more preferred source
    (lowest priority, then earliest source), or the same trait of a
    specimen measured twice in one source (see :func:`_duplicates`). Only a
    value that repeats a trait already measured on the specimen (left as
    ``repeated_value``) leaves species values; the copy from the most
    preferred source stays."""
    evidence.measures["repeated_value"] = evidence.duplicates["repeated_value"].to_numpy()
    return evidence.duplicates["duplicate_specimen"].to_numpy()


def _exact_duplicate(evidence: Evidence) -> np.ndarray:
    """A row repeated within one source (all its measurements equal); the
    later copies are flagged. Without a catalogue number, two equal rows
    may be two animals measured alike, so only a row naming its specimen
    leaves species values."""
    return evidence.duplicates["exact_duplicate"].to_numpy()


def _unknown_state(evidence: Evidence) -> np.ndarray:
    """A written state that is no defined state nor mapped variant."""
    return evidence.discrete & ~evidence.frame["state_ok"].to_numpy(dtype=bool)


def _state_conflict(evidence: Evidence) -> np.ndarray:
    """Several known states within one species and trait: the values not of
    the majority state are flagged (in a tie, all of them)."""
    known = evidence.discrete & ~evidence.flags["unknown_state"]
    states = evidence.frame["state"].where(known)
    keys = [evidence.pair]
    count = states.groupby([*keys, states], sort=False, dropna=False).transform("size")
    distinct = states.groupby(keys, sort=False).transform("nunique")
    top = count.where(known).groupby(keys, sort=False).transform("max")
    conflicted = known & (distinct.to_numpy() > 1)
    at_top = (count == top).groupby(keys, sort=False).transform("sum")
    tie = (at_top / top).to_numpy() > 1
    return conflicted & ((count.to_numpy() < top.to_numpy()) | tie)


def _far_from_genus(evidence: Evidence) -> np.ndarray:
    """The species median against the medians of the other species of its
    genus (first word of the tip label): a robust z (as in
    :func:`_within_species`, the spread floored at half the trait's typical
    one) above ``genus_threshold``, in genera of ``genus_min_species`` or
    more species. Only values no rule above excludes are compared (the
    clean ones that are no unit slip nor outlier)."""
    frame, codes, options = evidence.frame, evidence.codes, evidence.options
    kept = evidence.clean & ~evidence.flags["unit_slip"] & ~evidence.flags["outlier"]
    logs = evidence.logs.where(kept)
    species = pd.DataFrame(
        {"genus": codes["genus"], "group": codes["group"], "trait": codes["trait"], "x": logs}
    ).dropna(subset=["x"])
    if species.empty:
        return np.zeros(len(frame), dtype=bool)
    medians = species.groupby(["genus", "trait", "group"], sort=False)["x"].median().reset_index()
    keys = [medians["genus"], medians["trait"]]
    size = medians.groupby(keys)["x"].transform("size")
    centre = medians.groupby(keys)["x"].transform("median")
    dev = (medians["x"] - centre).abs()
    spread = dev.groupby(keys).transform("median") * 1.4826
    typical = spread.groupby(medians["trait"]).transform("median")
    floor = np.fmax(spread.to_numpy(), 0.5 * typical.fillna(0).to_numpy())
    with np.errstate(divide="ignore", invalid="ignore"):
        z = dev.to_numpy() / floor
    far = (size.to_numpy() >= options.genus_min_species) & (
        np.nan_to_num(z, nan=0.0) > options.genus_threshold
    )
    far_pairs = medians.loc[far, ["group", "trait"]]
    if far_pairs.empty:
        return np.zeros(len(frame), dtype=bool)
    marked = codes[["group", "trait"]].merge(
        far_pairs.assign(hit=True), how="left", on=["group", "trait"]
    )
    return marked["hit"].fillna(False).to_numpy(dtype=bool) & logs.notna().to_numpy()


def _source_conflict(evidence: Evidence) -> np.ndarray:
    """Per-source means of one species and trait whose largest/smallest
    ratio exceeds ``conflict_ratio``. The clean values are compared, unit
    slips included: a source that wrote a whole species in another unit is
    a conflict, not a slip."""
    values = pd.Series(evidence.value, index=evidence.frame.index).where(evidence.clean)
    positive = values.where(values > 0)
    keys = [evidence.pair]
    means = positive.groupby([*keys, evidence.frame["trait_source_id"]], sort=False).transform(
        "mean"
    )
    high = means.groupby(keys, sort=False).transform("max")
    low = means.groupby(keys, sort=False).transform("min")
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = (high / low).to_numpy()
    return positive.notna().to_numpy() & (
        np.nan_to_num(ratio, nan=1.0) > evidence.options.conflict_ratio
    )


# --- the table --------------------------------------------------------------


@dataclass(frozen=True)
class FaultKind:
    """One kind of fault: its rule, the findings it gives and whether a
    flagged value leaves species values."""

    #: The flag column, and the finding code ``trait.<name>``.
    name: str
    #: The rule: one boolean per measurement of the frame (True: flagged).
    rule: Callable[[Evidence], np.ndarray]
    #: The finding's message: a template formatted with the measurement's
    #: fields (per measurement) or with ``tip``, ``trait`` and the options'
    #: fields (per species); or templates by finding code, for a kind whose
    #: code is the value of ``code_column``.
    message: str | Mapping[str, str]
    #: Whether a finding is given per measurement, or once per species and trait.
    level: Level = "measurement"
    severity: Severity = Severity.error
    #: Whether a flagged value leaves species values (see :data:`Exclusion`).
    excludes: Exclusion = "always"
    #: The column marking which flagged values leave, when not all do.
    leaving: str = ""
    #: The column whose value is the finding code (``message`` is then a mapping).
    code_column: str = ""

    def template(self, row: Mapping[str, object]) -> tuple[str, str]:
        """Return the finding code (without ``trait.``) and message
        template of a flagged measurement ``row``."""
        if isinstance(self.message, str):
            return self.name, self.message
        code = str(row[self.code_column])
        return code, self.message[code]


#: Every kind of fault, in the order the rules run, flags are spelled and
#: findings are listed. Species-level kinds exclude nothing, since the rule
#: cannot tell which values are wrong.
FAULT_TABLE: tuple[FaultKind, ...] = (
    FaultKind(
        "unconverted",
        _unconverted,
        MappingProxyType(
            {
                "unknown_unit": (
                    "unit {unit!r} is not a unit pint knows; the value stays unconverted"
                ),
                "incompatible_unit": "unit {unit!r} cannot be converted to {target!r}",
                "no_unit": "no unit is written, and the trait is measured in {target!r}",
            }
        ),
        code_column="unit_problem",
    ),
    FaultKind(
        "impossible",
        _impossible,
        "{value_written!r} {unit} is impossible for a trait on the {scale} scale",
    ),
    FaultKind(
        "out_of_range",
        _out_of_range,
        "{value:.6g} {target} is outside the allowed range {minimum:g} to {maximum:g}",
    ),
    FaultKind(
        "unit_slip",
        _unit_slip,
        "{value:.6g} {target} is about {slip_factor:g} times off the species median",
    ),
    FaultKind(
        "outlier",
        _outlier,
        "{value:.6g} {target} is an outlier within its species (robust z {robust_z:.1f})",
    ),
    FaultKind(
        "duplicate_specimen",
        _duplicate_specimen,
        "specimen {institution} {specimen_id} is measured again (kept once)",
        severity=Severity.warning,
        leaving="repeated_value",
    ),
    FaultKind(
        "exact_duplicate",
        _exact_duplicate,
        "row {row_number} repeats an earlier row of the same source",
        severity=Severity.info,
        excludes="if_named",
    ),
    FaultKind(
        "unknown_state",
        _unknown_state,
        "{value_written!r} is not a defined state of {trait!r}",
    ),
    FaultKind(
        "state_conflict",
        _state_conflict,
        "the measurements of {tip} disagree on the state of {trait}",
        level="species",
        severity=Severity.warning,
        excludes="never",
    ),
    FaultKind(
        "far_from_genus",
        _far_from_genus,
        "{tip} lies far from the other species of its genus for {trait}",
        level="species",
        severity=Severity.warning,
        excludes="never",
    ),
    FaultKind(
        "source_conflict",
        _source_conflict,
        "sources disagree on {trait} of {tip} (ratio of means above {conflict_ratio:g})",
        level="species",
        severity=Severity.warning,
        excludes="never",
    ),
)
#: The flag columns, in table order.
FAULT_KINDS = tuple(kind.name for kind in FAULT_TABLE)
#: Kinds reported once per species and trait rather than per measurement.
SPECIES_KINDS = tuple(kind.name for kind in FAULT_TABLE if kind.level == "species")
#: Kinds that keep a value out of species values unless a curator includes
#: it (``exact_duplicate`` does only when its row names a specimen).
EXCLUDING = tuple(kind.name for kind in FAULT_TABLE if kind.excludes == "always")
# The order in which a value's reason to leave is named: the kinds that
# always exclude, then those that exclude only a named specimen's row.
_EXCLUSION_ORDER = tuple(
    kind for excludes in ("always", "if_named") for kind in FAULT_TABLE if kind.excludes == excludes
)


def find_faults(frame: pd.DataFrame, options: FaultOptions | None = None) -> pd.DataFrame:
    """Flag the faults of a prepared measurements frame: run the rules of
    :data:`FAULT_TABLE` in order.

    ``frame`` needs: id, trait_source_id, priority, row_number, group (the
    species key: tip label, or the written name when unmatched), genus,
    trait, kind, scale, minimum, maximum, value (converted), factor,
    number_ok (a number was read), unit_problem, specimen_id, institution,
    sex, life_stage, written_name, value_written, value_number, unit,
    state, state_ok.

    Returns:
        A frame on the same index with one boolean column per
        :data:`FAULT_KINDS`, plus ``slip_factor`` (the factor suspected),
        ``robust_z`` (within-species score, NaN where not computed) and
        ``repeated_value`` (a specimen's trait measured again).
    """
    evidence = Evidence(frame, options or FaultOptions())
    for kind in FAULT_TABLE:
        evidence.flags[kind.name] = np.asarray(kind.rule(evidence), dtype=bool)
    return pd.DataFrame({**evidence.flags, **evidence.measures}, index=frame.index)


def excluding_kind(frame: pd.DataFrame) -> np.ndarray:
    """Return, per row of a frame carrying the columns of :func:`find_faults`,
    the kind that keeps its value out of species values, or ``""``: the
    first in table order of the kinds that always exclude, else an
    ``if_named`` kind when the row names its specimen (institution and
    catalogue number)."""
    named = (frame["specimen_id"].notna() & frame["institution"].notna()).to_numpy()
    reason = np.full(len(frame), "", dtype=object)
    for kind in reversed(_EXCLUSION_ORDER):  # the first kind named wins
        hit = frame[kind.leaving or kind.name].to_numpy()
        if kind.excludes == "if_named":
            hit = hit & named
        reason = np.where(hit, kind.name, reason)
    return reason
