"""Faults in measurements: flagged, never deleted.

Every rule works on a whole measurements frame with vectorised pandas
(``groupby``/``transform``); no rule loops over rows. :func:`find_faults`
adds one boolean column per kind of fault (see :data:`FAULT_KINDS`) and the
species-level findings. Which kinds keep a value out of species values by
default is :data:`EXCLUDING`; a curator's review overrides either way.

Rules and their options (:class:`FaultOptions`):

- ``impossible``: a negative value, or zero or below on a log scale.
- ``out_of_range``: outside the definition's minimum and maximum.
- ``outlier``: within a species and trait, on the natural-log scale, a
  robust z score ``|x - median| / (1.4826 MAD)`` above ``outlier_threshold``
  (Hampel's median/MAD rule; Hampel 1974, JASA 69:383; Leys et al. 2013,
  J Exp Soc Psychol 49:764), only in groups of at least
  ``outlier_min_n`` values. The MAD is floored at half the trait's typical
  within-species scale, so that a tight small sample does not flag ordinary
  values, and at the step of the last digit written (relative to the
  median), so that values recorded to 0.1 do not look spread by less.
- ``unit_slip``: the ratio to the species median (groups of three or more)
  within ``slip_tolerance`` of 10, 100, 1000 or 25.4 (either direction).
- ``far_from_genus`` (species level): the species median against the
  medians of the other species of its genus (first word of the tip label),
  robust z above ``genus_threshold``, genera of four or more species.
- ``duplicate_specimen``: the same institution and catalogue number in a
  more preferred source (lowest priority, then earliest source), or the
  same trait of a specimen measured twice in one source. Only a value that
  repeats a trait already measured on the specimen (``repeated_value``)
  leaves species values; the copy from the most preferred source stays.
- ``exact_duplicate``: a row repeated within one source (all its
  measurements equal); later copies flagged.
- ``source_conflict`` (species level): per-source means of one species
  whose largest/smallest ratio exceeds ``conflict_ratio``.
- ``unknown_state`` and ``state_conflict``: a written state that is no
  defined state nor mapped variant; several states within one species
  (the values not of the majority state are flagged).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from pydantic import BaseModel

__all__ = ["EXCLUDING", "FAULT_KINDS", "SPECIES_KINDS", "FaultOptions", "find_faults"]

FAULT_KINDS = (
    "unconverted",
    "impossible",
    "out_of_range",
    "unit_slip",
    "outlier",
    "duplicate_specimen",
    "exact_duplicate",
    "unknown_state",
    "state_conflict",
    "far_from_genus",
    "source_conflict",
)
#: Kinds reported once per species and trait rather than per measurement.
SPECIES_KINDS = ("state_conflict", "far_from_genus", "source_conflict")
#: Kinds that keep a value out of species values unless a curator includes it.
#: ``exact_duplicate`` excludes only when the row names a specimen: without a
#: catalogue number, two equal rows may be two animals measured alike.
#: Species-level kinds are reported for review and exclude nothing, since
#: the rule cannot tell which values are wrong.
EXCLUDING = (
    "unconverted",
    "impossible",
    "out_of_range",
    "unit_slip",
    "outlier",
    "duplicate_specimen",
    "unknown_state",
)
SLIP_FACTORS = (10.0, 100.0, 1000.0, 25.4)


class FaultOptions(BaseModel):
    """Thresholds of the fault rules (see the module notes)."""

    outlier_threshold: float = 5.0
    outlier_min_n: int = 5
    slip_tolerance: float = 0.08
    genus_threshold: float = 5.0
    genus_min_species: int = 4
    conflict_ratio: float = 1.5


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


def find_faults(frame: pd.DataFrame, options: FaultOptions | None = None) -> pd.DataFrame:
    """Flag the faults of a prepared measurements frame.

    ``frame`` needs: id, trait_source_id, priority, row_number, group (the
    species key: tip label, or the written name when unmatched), genus,
    trait, kind, scale, minimum, maximum, value (converted), number_ok
    (a number was read), unit_problem, specimen_id, institution, sex,
    life_stage, written_name, value_written, unit, state, state_ok.

    Returns:
        A frame on the same index with one boolean column per
        :data:`FAULT_KINDS`, plus ``slip_factor`` (the factor suspected) and
        ``robust_z`` (within-species score, NaN where not computed).
    """
    options = options or FaultOptions()
    out = pd.DataFrame(index=frame.index)
    # Integer codes of the string keys, hashed once for every rule below.
    codes = _key_codes(frame)
    continuous = frame["kind"].to_numpy() == "continuous"
    value = frame["value"].to_numpy(dtype=float)
    has_value = continuous & frame["number_ok"].to_numpy() & ~np.isnan(value)
    unit_problem = frame["unit_problem"].to_numpy(dtype=object) != ""
    out["unconverted"] = has_value & unit_problem
    usable = has_value & ~unit_problem
    log_scale = frame["scale"].isin(["ln", "log10"]).to_numpy()
    impossible = usable & ((value < 0) | (log_scale & (value <= 0)))
    out["impossible"] = impossible
    low = frame["minimum"].to_numpy(dtype=float)
    high = frame["maximum"].to_numpy(dtype=float)
    with np.errstate(invalid="ignore"):
        out_of_range = usable & ~impossible & ((value < low) | (value > high))
    out["out_of_range"] = out_of_range

    # Duplicates first: a second copy must not weigh in the species median.
    dup = _duplicates(frame, codes)
    out["duplicate_specimen"] = dup["duplicate_specimen"]
    out["repeated_value"] = dup["repeated_value"]
    out["exact_duplicate"] = dup["exact_duplicate"]

    # Within-species rules on the natural log of positive usable values.
    clean = usable & ~impossible & ~out_of_range & (value > 0) & ~dup["repeated_value"]
    logs = pd.Series(
        np.where(clean, np.log(np.where(clean, value, 1.0)), np.nan), index=frame.index
    )
    # One integer code per species and trait, hashed once for every rule.
    pair = pd.Series(
        pd.factorize(codes["group"].to_numpy() * (codes["trait"].max() + 1) + codes["trait"])[0]
        if len(frame)
        else np.zeros(0, dtype=np.int64),
        index=frame.index,
    )
    keys = [pair]
    n = logs.notna().groupby(keys, sort=False).transform("sum").to_numpy()
    median = _group_median(logs, keys)
    deviation = (logs - median).abs()
    mad = _group_median(deviation, keys) * 1.4826
    # A floor per trait: half the typical within-species spread.
    typical = mad.where(n >= options.outlier_min_n).groupby(codes["trait"]).transform("median")
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
    out["robust_z"] = z
    with np.errstate(invalid="ignore"):
        out["outlier"] = np.nan_to_num(z, nan=0.0) > options.outlier_threshold
    ratio = deviation.to_numpy()
    slip = np.zeros(len(frame), dtype=bool)
    slip_factor = np.full(len(frame), np.nan)
    tolerance = np.log1p(options.slip_tolerance)
    for factor in SLIP_FACTORS:  # four fixed factors, not rows
        near = clean & (n >= 3) & (np.abs(ratio - np.log(factor)) < tolerance)
        slip_factor = np.where(near & ~slip, factor, slip_factor)
        slip |= near
    out["unit_slip"] = slip
    out["slip_factor"] = slip_factor
    out["outlier"] = out["outlier"] & ~out["unit_slip"]

    discrete = ~continuous & frame["state"].notna().to_numpy()
    out["unknown_state"] = discrete & ~frame["state_ok"].to_numpy(dtype=bool)
    out["state_conflict"] = _state_conflicts(
        frame, pair, discrete & ~out["unknown_state"].to_numpy()
    )

    excluded = np.zeros(len(frame), dtype=bool)
    for kind in ("unconverted", "impossible", "out_of_range", "unit_slip", "outlier"):
        excluded |= out[kind].to_numpy()
    kept = clean & ~excluded
    out["far_from_genus"] = _far_from_genus(frame, codes, logs.where(kept), options)
    # Sources are compared before the within-species rules: a source that
    # wrote a whole species in another unit is a conflict, not a slip.
    out["source_conflict"] = _source_conflicts(
        frame, pair, pd.Series(value, index=frame.index).where(clean), options
    )
    return out


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


def _state_conflicts(frame: pd.DataFrame, pair: pd.Series, known: np.ndarray) -> np.ndarray:
    states = frame["state"].where(known)
    keys = [pair]
    count = states.groupby([*keys, states], sort=False, dropna=False).transform("size")
    distinct = states.groupby(keys, sort=False).transform("nunique")
    top = count.where(known).groupby(keys, sort=False).transform("max")
    conflicted = known & (distinct.to_numpy() > 1)
    # Flag the values not of the majority state; in a tie, all of them.
    at_top = (count == top).groupby(keys, sort=False).transform("sum")
    tie = (at_top / top).to_numpy() > 1
    return conflicted & ((count.to_numpy() < top.to_numpy()) | tie)


def _far_from_genus(
    frame: pd.DataFrame, codes: pd.DataFrame, logs: pd.Series, options: FaultOptions
) -> np.ndarray:
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


def _source_conflicts(
    frame: pd.DataFrame, pair: pd.Series, values: pd.Series, options: FaultOptions
) -> np.ndarray:
    positive = values.where(values > 0)
    keys = [pair]
    means = positive.groupby([*keys, frame["trait_source_id"]], sort=False).transform("mean")
    high = means.groupby(keys, sort=False).transform("max")
    low = means.groupby(keys, sort=False).transform("min")
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = (high / low).to_numpy()
    return positive.notna().to_numpy() & (np.nan_to_num(ratio, nan=1.0) > options.conflict_ratio)
