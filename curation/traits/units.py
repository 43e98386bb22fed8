"""Converting measurements to their trait's target unit with pint.

Conversion is vectorised: pint is asked once per distinct (written unit,
target unit) pair for the factor and offset, then every value of that pair
is converted with NumPy. The factor applied is kept beside each value.
A unit pint does not know, or one of another dimension than the target,
leaves the value unconverted with a problem code that keeps it out of
species values until a curator resolves it.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pint

from curation.traits.definitions import unit_registry

__all__ = ["UNIT_ALIASES", "conversion_table", "convert_values"]

#: Written spellings pint does not read as meant (common practice in trait sheets).
UNIT_ALIASES = {
    "pct": "percent",
    "%": "percent",
    "degc": "degC",
    "µm": "micrometer",
    "um": "micrometer",
}


def _pint_unit(text: str) -> pint.Unit:
    ureg = unit_registry()
    return ureg.Unit(UNIT_ALIASES.get(text.strip().lower(), text.strip()))


def conversion_table(pairs: pd.DataFrame) -> pd.DataFrame:
    """Return, for each distinct (``unit``, ``target``) pair, the ``factor``
    and ``offset`` with ``target = value * factor + offset``, and a
    ``unit_problem`` (``unknown_unit``, ``incompatible_unit``, ``no_unit`` or
    empty) for pairs that cannot be converted.

    A missing target (trait without a unit) means no conversion (factor 1).
    """
    out = pairs[["unit", "target"]].drop_duplicates().reset_index(drop=True)
    factors, offsets, problems = [], [], []
    for unit, target in zip(out["unit"], out["target"], strict=True):
        if target is None or pd.isna(target):
            factors.append(1.0)
            offsets.append(0.0)
            problems.append("")
            continue
        if unit is None or pd.isna(unit) or not str(unit).strip():
            factors.append(np.nan)
            offsets.append(np.nan)
            problems.append("no_unit")
            continue
        try:
            source_unit = _pint_unit(str(unit))
        except Exception:  # pint raises several kinds for text it cannot read
            factors.append(np.nan)
            offsets.append(np.nan)
            problems.append("unknown_unit")
            continue
        target_unit = _pint_unit(str(target))
        ureg = unit_registry()
        try:
            # Two points give factor and offset, so temperatures convert too.
            pair = ureg.Quantity(np.array([0.0, 1.0]), source_unit).to(target_unit).magnitude
        except pint.errors.DimensionalityError:
            factors.append(np.nan)
            offsets.append(np.nan)
            problems.append("incompatible_unit")
            continue
        factors.append(float(pair[1] - pair[0]))
        offsets.append(float(pair[0]))
        problems.append("")
    out["factor"] = np.asarray(factors, dtype=float)
    out["offset"] = np.asarray(offsets, dtype=float)
    out["unit_problem"] = problems
    return out


def convert_values(frame: pd.DataFrame) -> pd.DataFrame:
    """Convert ``frame['value_number']`` from ``frame['unit']`` to
    ``frame['target']``.

    Returns:
        A frame on the same index with ``value`` (converted, or the number
        as written when it cannot be converted), ``factor``, ``offset`` and
        ``unit_problem`` (empty when converted). Rows without a number keep
        NaN values and no problem.
    """
    keys = pd.DataFrame(
        {
            "unit": frame["unit"].astype(object).where(frame["unit"].notna(), None),
            "target": frame["target"].astype(object).where(frame["target"].notna(), None),
        }
    )
    numeric = frame["value_number"].notna().to_numpy()
    table = conversion_table(keys[numeric]) if numeric.any() else conversion_table(keys.head(0))
    # Map each row to its pair through integer codes: no string work per row.
    unit_codes, unit_values = pd.factorize(keys["unit"])
    target_codes, target_values = pd.factorize(keys["target"])
    width = len(target_values) + 1
    row_key = (unit_codes + 1) * width + (target_codes + 1)
    unit_lookup = {v: i for i, v in enumerate(unit_values)}
    target_lookup = {v: i for i, v in enumerate(target_values)}
    table_key = np.array(
        [
            (unit_lookup.get(u, -1) + 1 if u is not None else 0) * width
            + (target_lookup.get(t, -1) + 1 if t is not None else 0)
            for u, t in zip(table["unit"], table["target"], strict=True)
        ],
        dtype=np.int64,
    )
    position = pd.Index(table_key).get_indexer(row_key)
    found = position >= 0
    factor = np.full(len(frame), np.nan)
    offset = np.full(len(frame), np.nan)
    problem = np.full(len(frame), "", dtype=object)
    factor[found] = table["factor"].to_numpy()[position[found]]
    offset[found] = table["offset"].to_numpy()[position[found]]
    problem[found] = table["unit_problem"].to_numpy(dtype=object)[position[found]]
    problem[~numeric] = ""
    number = frame["value_number"].to_numpy(dtype=float)
    converted = number * factor + offset
    value = np.where(problem == "", converted, number)
    return pd.DataFrame(
        {"value": value, "factor": factor, "offset": offset, "unit_problem": problem},
        index=frame.index,
    )
