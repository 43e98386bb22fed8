"""Species values: one value per tip and trait from the measurements that count.

Continuous traits: n, mean, SD (n - 1 denominator), SE (SD / sqrt(n)) and
median, all on the trait's scale (a mean of logs and its SE on the log
scale for ``ln`` and ``log10``, the form models taking measurement error
expect). Source policies:

- ``pool``: every counted measurement of every source.
- ``priority``: only the most preferred source with data for that tip and
  trait (lowest priority number, then the earliest source).
- ``weighted``: per-source means combined weighted by their n; the SD is
  the pooled within-source SD, so a systematic offset between sources does
  not widen it, and the SE is that SD over sqrt(n).

Discrete traits: the unanimous state, or the majority state with
``agreement`` below 1 (a ``trait.state_conflict`` finding is stored by
``flag-measurements``); a tie takes the first state in alphabetical order
and says so in ``note``. Every row lists the measurement ids it came from.
"""

from __future__ import annotations

from typing import Literal, get_args

import numpy as np
import pandas as pd

from curation.errors import InputError, check_choice
from curation.store.engine import Store
from curation.traits.faults import FaultOptions
from curation.traits.frame import measurements_frame

__all__ = ["POLICIES", "SPECIES_COLUMNS", "SourcePolicy", "aggregate_species", "species_values"]

#: How measurements of several sources make one species value.
SourcePolicy = Literal["pool", "priority", "weighted"]
POLICIES: tuple[str, ...] = get_args(SourcePolicy)
SPECIES_COLUMNS = [
    "tip_label",
    "trait",
    "kind",
    "scale",
    "unit",
    "n",
    "mean",
    "sd",
    "se",
    "median",
    "state",
    "agreement",
    "sources",
    "note",
    "measurement_ids",
]


def _on_scale(value: pd.Series, scale: pd.Series) -> pd.Series:
    with np.errstate(divide="ignore", invalid="ignore"):
        return pd.Series(
            np.select(
                [scale == "ln", scale == "log10"],
                [np.log(value), np.log10(value)],
                default=value,
            ),
            index=value.index,
        )


def _codes(frame: pd.DataFrame, keys: list[str]) -> np.ndarray:
    """One integer per distinct key combination, ordered like the sorted keys."""
    code = np.zeros(len(frame), dtype=np.int64)
    for key in keys:
        part, uniques = pd.factorize(frame[key], sort=True)
        code = code * (len(uniques) + 1) + part
    return pd.factorize(code, sort=True)[0]


def _ids(frame: pd.DataFrame, codes: np.ndarray) -> list[list[int]]:
    """The sorted measurement ids of each code, as lists, in code order."""
    order = np.lexsort((frame["id"].to_numpy(), codes))
    ids = frame["id"].to_numpy()[order].astype(np.int64)
    if not len(ids):
        return []
    starts = np.r_[0, np.flatnonzero(np.diff(codes[order])) + 1]
    ends = np.r_[starts[1:], len(ids)]
    every = ids.tolist()
    return [every[a:b] for a, b in zip(starts.tolist(), ends.tolist(), strict=True)]


def _continuous(frame: pd.DataFrame, keys: list[str], policy: str) -> pd.DataFrame:
    if frame.empty:
        return pd.DataFrame(columns=[*keys, *SPECIES_COLUMNS[2:]])
    frame = frame.assign(x=_on_scale(frame["value"], frame["scale"]))
    if policy == "priority":
        pair = _codes(frame, keys)
        rank = frame.groupby(pair, sort=False)["priority"].transform("min")
        frame = frame[frame["priority"] == rank]
        pair = _codes(frame, keys)
        first = frame.groupby(pair, sort=False)["trait_source_id"].transform("min")
        frame = frame[frame["trait_source_id"] == first]
    code = _codes(frame, keys)
    x = frame["x"]
    grouped = x.groupby(code, sort=True)
    first_rows = pd.Series(np.arange(len(frame))).groupby(code, sort=True).first().to_numpy()
    out = frame.iloc[first_rows][keys].reset_index(drop=True)
    out["kind"] = frame["kind"].to_numpy()[first_rows]
    out["scale"] = frame["scale"].to_numpy()[first_rows]
    out["unit"] = frame["target"].to_numpy()[first_rows]
    out["n"] = grouped.size().to_numpy()
    out["mean"] = grouped.mean().to_numpy()
    out["sd"] = grouped.std().to_numpy()
    out["median"] = grouped.median().to_numpy()
    sources = pd.DataFrame({"c": code, "s": frame["trait_source_id"].to_numpy()})
    out["sources"] = sources.drop_duplicates().groupby("c", sort=True).size().to_numpy()
    if policy == "weighted":
        per = pd.DataFrame({"c": code, "s": frame["trait_source_id"].to_numpy(), "x": x.to_numpy()})
        per = per.groupby(["c", "s"], sort=True)["x"].agg(["size", "mean", "var"])
        per["ss"] = per["var"].fillna(0.0) * (per["size"] - 1)
        per["wx"] = per["mean"] * per["size"]
        summed = per.groupby(level="c").agg(
            n=("size", "sum"), wx=("wx", "sum"), ss=("ss", "sum"), k=("size", "size")
        )
        out["mean"] = (summed["wx"] / summed["n"]).to_numpy()
        dof = summed["n"] - summed["k"]
        out["sd"] = np.sqrt(summed["ss"] / dof.where(dof > 0)).to_numpy()
    out["se"] = out["sd"] / np.sqrt(out["n"])
    out["state"] = None
    out["agreement"] = np.nan
    out["note"] = ""
    out["measurement_ids"] = _ids(frame, code)
    return out


def _discrete(frame: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    if frame.empty:
        return pd.DataFrame(columns=[*keys, *SPECIES_COLUMNS[2:]])
    counts = frame.groupby([*keys, "state"], sort=True).size().rename("count").reset_index()
    # Largest count first; a tie falls to the alphabetically first state.
    counts = counts.sort_values(
        [*keys, "count", "state"], ascending=[True] * len(keys) + [False, True]
    )
    top = counts.groupby(keys, sort=True).agg(
        state=("state", "first"), top=("count", "first"), states=("state", "size")
    )
    at_top = (
        counts["count"].to_numpy()
        == counts[keys].merge(top["top"].reset_index(), on=keys, how="left")["top"].to_numpy()
    )
    tops = pd.Series(at_top, index=pd.MultiIndex.from_frame(counts[keys])).groupby(level=keys).sum()
    grouped = frame.groupby(keys, sort=True)
    out = grouped.agg(
        kind=("kind", "first"), n=("state", "size"), sources=("trait_source_id", "nunique")
    )
    out["scale"] = None
    out["unit"] = None
    out["state"] = top["state"]
    out["agreement"] = top["top"] / out["n"]
    tied = tops.reindex(out.index).to_numpy() > 1
    out["note"] = np.where(
        tied,
        "tie between states",
        np.where(top["states"] > 1, "majority of conflicting states", ""),
    )
    for column in ("mean", "sd", "se", "median"):
        out[column] = np.nan
    out["measurement_ids"] = _ids(frame, _codes(frame, keys))
    return out.reset_index()


def aggregate_species(
    frame: pd.DataFrame,
    *,
    traits: list[str] | None = None,
    policy: SourcePolicy = "pool",
    by_sex: bool = False,
) -> pd.DataFrame:
    """Aggregate a prepared measurements frame (see
    :func:`curation.traits.frame.prepare_frame`) to species values.

    Returns:
        One row per (tip_label, trait[, sex]) with :data:`SPECIES_COLUMNS`
        (and ``sex`` after ``trait`` when ``by_sex``), sorted by those keys.

    Raises:
        InputError: an unknown policy, or a trait asked for that has no
            measurements.
    """
    check_choice(policy, POLICIES, "policy")
    if traits is not None:
        missing = sorted(set(traits) - set(frame["trait"]))
        if missing:
            raise InputError(
                f"no measurements of the trait(s) {', '.join(map(repr, missing))}",
                field="traits",
                hint="see `tipledger show-store` for the traits stored (--trait)",
            )
        frame = frame[frame["trait"].isin(traits)]
    counted = frame[~frame["excluded"]]
    keys = ["tip_label", "trait"]
    if by_sex:
        sex = counted["sex"].astype("string").str.strip().str.lower()
        sex = sex.replace({"f": "female", "m": "male", "♀": "female", "♂": "male"})
        counted = counted.assign(sex=sex.fillna("unknown").replace("", "unknown"))
        keys.append("sex")
    parts = [
        _continuous(counted[counted["kind"] == "continuous"], keys, policy),
        _discrete(counted[counted["kind"] == "discrete"], keys),
    ]
    parts = [p for p in parts if len(p)]
    columns = [*keys, *SPECIES_COLUMNS[2:]]
    if not parts:
        return pd.DataFrame(columns=columns)
    out = pd.concat(parts, ignore_index=True)[columns]
    out["n"] = out["n"].astype(int)
    out["sources"] = out["sources"].astype(int)
    return out.sort_values(keys, kind="stable").reset_index(drop=True)


def species_values(
    store: Store,
    tree_set_id: int,
    *,
    traits: list[str] | None = None,
    policy: SourcePolicy = "pool",
    by_sex: bool = False,
    options: FaultOptions | None = None,
) -> pd.DataFrame:
    """Return one value per tip and trait (and sex, when ``by_sex``) from the
    measurements that count (see :mod:`curation.traits.frame`).

    Returns:
        A DataFrame with :data:`SPECIES_COLUMNS`: tip_label, trait, kind,
        scale, unit (the target unit), n, mean, sd, se, median (continuous,
        on the trait's scale), state, agreement (discrete), sources, note
        and measurement_ids (list of ints).

    Raises:
        NotFoundError: no such tree set.
        InputError: an unknown policy (before the store is read) or trait.
    """
    check_choice(policy, POLICIES, "policy")
    frame = measurements_frame(store, tree_set_id, options=options)
    return aggregate_species(frame, traits=traits, policy=policy, by_sex=by_sex)
