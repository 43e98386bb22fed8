"""Matching written names to tip labels, stage by stage.

Stages, in order; the first that decides a name wins:

1. ``exact``: the written name is a tip label.
2. ``canonical``: both read to the same canonical form (see
   :mod:`curation.names.parse`), e.g. ``Aus bus (L., 1758)`` and ``Aus_bus_V12``.
3. ``synonym``: the name is a stored synonym of a tip's name, or a tip is
   labelled with a synonym of the written (accepted) name: both directions.
4. ``gender``: the epithets differ only in a gender ending (-us/-a/-um,
   -is/-e, -er/-ra/-rum ...); the codes require an adjectival epithet to
   agree in gender with its genus (ICZN Art. 31.2; ICN Art. 23.5), so these
   are spellings of one name.
5. ``spelling``: equal after folding near-equivalent spellings (ph/f,
   ae/e, oe/e, y/i, k/c, doubled letters, -ii/-i).
6. ``fuzzy``: genus and epithet scored separately by optimal string
   alignment distance (a transposition is one edit), on the folded
   spellings and on the letters as written (each pair keeps its better
   score), within edit limits that grow with length; genus may be fuzzy
   too. Candidates come from blocks (genera close to the written genus,
   within a length window), never from all pairs.
7. ``genus``: only the genus matched; candidates are that genus's tips.
   Never accepted automatically.
8. ``unmatched``: no candidate (``unparseable`` when no genus could be
   read; such names are reported, never dropped).

Every result carries its score (0-100), the runner-up and the margin to
it. Only stages 1-6 accept automatically, and only when one tip is clearly
best; a written name with a qualifier (cf., aff., nr., ?, sp. nov.) or
words the parser could not place is always left for review.

A change of genus waits for review too: a match found by the gender,
spelling or fuzzy stage whose written genus is not the tip's genus (after
the parser's normalising of case and diacritics), such as ``Korvella``
for ``Corvella``. Genus names that differ by one letter are distinct names
(ICZN Art. 56.2), so such a match may point to another genus rather than
to a misspelt one; it is a stronger claim than a misspelt epithet. The
exact and canonical stages never change the genus, and a synonym that moves
a species to another genus is a recorded fact of the synonym table, so
those stay automatic. ``MatchOptions.accept_genus_changes`` accepts genus
changes automatically under the stage's other rules.

In the code, each stage is one function (``_by_exact`` ... ``_by_genus``)
proposing candidate pairs (the written name's position, a tip, a score)
for the names still open, and one row of ``_STAGES`` saying how its best
candidates are judged (whether it keeps the genus, may accept a hybrid,
needs ``accept_score``, or holds every name it reaches for review).
:func:`match_names` walks the rows in order; ``_settle`` ranks a stage's
pairs, accepts or holds each name with its reason, and closes it, in the
one ``_Matching`` state the stages share. A new stage is one function and
one row.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np
import pandas as pd
from pydantic import BaseModel, ConfigDict, Field
from rapidfuzz import process
from rapidfuzz.distance import OSA

from curation.findings import Finding, Severity
from curation.names.parse import parse_names

__all__ = [
    "GENUS_CHANGED",
    "MATCH_COLUMNS",
    "STAGES",
    "MatchOptions",
    "allowed_edits",
    "edit_distance",
    "fold_spelling",
    "gender_variants",
    "match_findings",
    "match_names",
]

MATCH_COLUMNS = [
    "written_name",
    "canonical",
    "stage",
    "status",
    "tip_label",
    "score",
    "runner_up",
    "runner_up_score",
    "margin",
    "candidates",
    "reason",
]
GENUS_CHANGED = "genus differs from the tip's"
# Qualifiers that make the identification itself uncertain.
UNCERTAIN = {"cf.", "aff.", "nr.", "?", "sp. nov.", "indet."}


class MatchOptions(BaseModel):
    """Thresholds of the matcher, with their defaults.

    A fuzzy match is accepted automatically only when its score is at
    least ``accept_score``, it leads the runner-up by at least
    ``ambiguity_margin`` points, and both its genus and its epithet are
    within :func:`allowed_edits` of their length. Weaker candidates down to
    ``review_score`` are kept (at most ``candidates`` per name) for review.
    A gender, spelling or fuzzy match whose written genus is not the tip's
    waits for review unless ``accept_genus_changes`` is set.
    """

    model_config = ConfigDict(frozen=True)

    accept_score: float = Field(88.0, ge=0, le=100, description="lowest fuzzy score accepted")
    ambiguity_margin: float = Field(
        5.0, ge=0, le=100, description="points the best must lead the runner-up by"
    )
    review_score: float = Field(60.0, ge=0, le=100, description="lowest score shown for review")
    candidates: int = Field(5, ge=1, le=50, description="candidates kept per pending name")
    letters_per_edit: int = Field(4, ge=1, description="one edit allowed per this many letters")
    max_edits: int = Field(3, ge=0, description="most edits ever allowed in one part")
    review_extra_edits: int = Field(
        1, ge=0, description="edits beyond the limit still shown as candidates for review"
    )
    accept_genus_changes: bool = Field(
        False,
        description="accept automatically a match whose written genus is not the tip's genus",
    )


def allowed_edits(length: int | np.ndarray, options: MatchOptions | None = None) -> Any:
    """Return the edits accepted in a name part of ``length`` letters:
    ``min(max_edits, length // letters_per_edit)`` (0 for 1-3 letters, 1 for
    4-7, 2 for 8-11, 3 from 12 with the defaults)."""
    opts = options or MatchOptions()
    return np.minimum(opts.max_edits, np.asarray(length) // opts.letters_per_edit)


def edit_distance(a: str, b: str) -> int:
    """Return the optimal string alignment distance between ``a`` and
    ``b``: insertions, deletions, substitutions and transpositions of two
    adjacent letters each count one (Damerau 1964, restricted form)."""
    return int(OSA.distance(a, b))


_FOLDS = [("ph", "f"), ("ae", "e"), ("oe", "e"), ("y", "i"), ("k", "c")]
_DOUBLED = re.compile(r"([a-z])\1+")


def _fold_one(value: str) -> str:
    folded = value.lower()
    for old, new in _FOLDS:
        folded = folded.replace(old, new)
    return _DOUBLED.sub(r"\1", folded)


def fold_spelling(values: pd.Series) -> pd.Series:
    """Return lower-cased ``values`` with near-equivalent spellings folded:
    ph->f, ae->e, oe->e, y->i, k->c, then doubled letters made single (which
    also takes -ii to -i). Each distinct value is folded once."""
    codes, uniques = pd.factorize(values.astype(object).fillna(""), use_na_sentinel=False)
    folded = np.array([_fold_one(str(u)) for u in uniques], dtype=object)
    return pd.Series(folded[codes] if len(codes) else [], index=values.index, dtype=object)


# Gender endings of adjectival epithets (ICZN Art. 31.2; ICN Art. 23.5):
# each group lists the masculine, feminine and neuter forms. Longer endings
# first so that -rum is not read as -um.
GENDER_GROUPS: list[tuple[str, ...]] = [
    ("er", "ra", "rum"),  # ruber, rubra, rubrum
    ("er", "era", "erum"),  # liber, libera, liberum
    ("ior", "ior", "ius"),  # comparatives: superior, superior, superius
    ("is", "is", "e"),  # brevis, brevis, breve
    ("us", "a", "um"),  # albus, alba, album
    ("os", "a", "on"),  # Greek-form adjectives: -os, -e/-a, -on
]


_GROUPS_BY_ENDING: dict[str, list[int]] = {}
for _number, _group in enumerate(GENDER_GROUPS):
    for _ending in set(_group):
        _GROUPS_BY_ENDING.setdefault(_ending, []).append(_number)


def gender_variants(epithet: str) -> set[str]:
    """Return the other gender forms of ``epithet`` (empty when it has no
    recognised adjectival ending), per the agreement rules of ICZN Art.
    31.2 and ICN Art. 23.5; the epithet itself is not included."""
    found: set[str] = set()
    done: set[int] = set()
    # Longest ending first, so that -rum is read before -um in each group.
    for size in (4, 3, 2, 1):
        if len(epithet) <= size + 1:
            continue
        ending = epithet[-size:]
        for number in _GROUPS_BY_ENDING.get(ending, ()):
            if number not in done:
                done.add(number)
                stem = epithet[:-size]
                found.update(stem + other for other in GENDER_GROUPS[number])
    found.discard(epithet)
    return found


# --- ranking -----------------------------------------------------------------


def _rank(pairs: pd.DataFrame, k: int) -> pd.DataFrame:
    """Rank candidate ``pairs`` (columns w, tip, score) per written name.

    Returns a frame indexed by w with tip_label, score, runner_up,
    runner_up_score, margin and candidates (list of [tip, score], best first).
    """
    if pairs.empty:
        return pd.DataFrame(
            columns=["tip_label", "score", "runner_up", "runner_up_score", "margin", "candidates"]
        )
    ordered = (
        pairs.sort_values(["w", "score", "tip"], ascending=[True, False, True], kind="stable")
        .drop_duplicates(["w", "tip"])
        .reset_index(drop=True)
    )
    ordered["rank"] = ordered.groupby("w").cumcount()
    top = ordered[ordered["rank"] < k]
    best = top[top["rank"] == 0].set_index("w")
    second = top[top["rank"] == 1].set_index("w")
    out = pd.DataFrame(index=best.index)
    out["tip_label"] = best["tip"]
    out["score"] = best["score"].astype(float).round(2)
    out["runner_up"] = second["tip"].reindex(out.index)
    out["runner_up_score"] = second["score"].reindex(out.index).astype(float).round(2)
    out["margin"] = (out["score"] - out["runner_up_score"].fillna(0.0)).round(2)
    w_top = top["w"].to_numpy()
    starts = np.flatnonzero(np.r_[True, w_top[1:] != w_top[:-1]])
    ends = np.r_[starts[1:], len(w_top)]
    flat = [
        [t, s] for t, s in zip(top["tip"].tolist(), top["score"].round(2).tolist(), strict=True)
    ]
    lists = [flat[a:b] for a, b in zip(starts.tolist(), ends.tolist(), strict=True)]
    out["candidates"] = pd.Series(lists, index=w_top[starts], dtype=object).reindex(out.index)
    return out


# --- blocking and fuzzy scoring -------------------------------------------------


def _close_genera(
    written: np.ndarray, tips: np.ndarray, limit: np.ndarray, options: MatchOptions
) -> pd.DataFrame:
    """Pairs (wg, tg, dg) of written and tip genera within ``limit`` edits
    (per written genus), blocked by length: a genus of length L is compared
    only with genera of length L +/- its limit, in row chunks that bound the
    distance matrix to a few tens of megabytes."""
    tip_len = np.fromiter((len(t) for t in tips), dtype=np.int64, count=len(tips))
    w_len = np.fromiter((len(w) for w in written), dtype=np.int64, count=len(written))
    frames = []
    for length in np.unique(w_len):
        rows = np.flatnonzero(w_len == length)
        cut = int(limit[rows].max())
        cols = np.flatnonzero(np.abs(tip_len - length) <= cut)
        if len(cols) == 0:
            continue
        col_names = tips[cols].tolist()
        step = max(1, 20_000_000 // max(1, len(cols)))
        for start in range(0, len(rows), step):
            chunk = rows[start : start + step]
            dist = process.cdist(
                written[chunk].tolist(),
                col_names,
                scorer=OSA.distance,
                score_cutoff=cut,
                dtype=np.int8,
                workers=-1,
            )
            r, c = np.nonzero(dist <= limit[chunk][:, None])
            frames.append(
                pd.DataFrame({"wg": written[chunk][r], "tg": tips[cols][c], "dg": dist[r, c]})
            )
    if not frames:
        return pd.DataFrame({"wg": [], "tg": [], "dg": []})
    return pd.concat(frames, ignore_index=True)


def candidate_blocks(
    written: pd.DataFrame, tips: pd.DataFrame, options: MatchOptions
) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Return the fuzzy stage's blocks: for each written genus, the row
    positions of its written names in ``written``, the row positions of the
    candidate tips in ``tips`` and each candidate's genus distance.

    ``written`` and ``tips`` carry folded ``g`` (genus) and ``e`` (epithet
    and infraspecific epithet) columns.
    """
    w_genera = written["g"].unique()
    t_genera = tips["g"].unique()
    limit = allowed_edits(
        np.fromiter((len(g) for g in w_genera), dtype=np.int64, count=len(w_genera)), options
    ) + int(options.review_extra_edits)
    pairs = _close_genera(np.asarray(w_genera, dtype=object), t_genera, limit, options)
    if pairs.empty:
        return []
    # Positions of the tips (and written names) of each genus, as slices of
    # one array sorted by genus.
    t_code = pd.Index(t_genera).get_indexer(tips["g"])
    t_order = np.argsort(t_code, kind="stable")
    t_bounds = np.searchsorted(t_code[t_order], np.arange(len(t_genera) + 1))
    w_code = pd.Index(w_genera).get_indexer(written["g"])
    w_order = np.argsort(w_code, kind="stable")
    w_bounds = np.searchsorted(w_code[w_order], np.arange(len(w_genera) + 1))
    pw = pd.Index(w_genera).get_indexer(pairs["wg"])
    pt = pd.Index(t_genera).get_indexer(pairs["tg"])
    order = np.argsort(pw, kind="stable")
    pw, pt, pair_dg = pw[order], pt[order], pairs["dg"].to_numpy()[order]
    starts = np.flatnonzero(np.r_[True, pw[1:] != pw[:-1]])
    ends = np.r_[starts[1:], len(pw)]
    blocks = []
    for a, b in zip(starts.tolist(), ends.tolist(), strict=True):
        g = pw[a]
        rows = w_order[w_bounds[g] : w_bounds[g + 1]]
        spans = [t_order[t_bounds[t] : t_bounds[t + 1]] for t in pt[a:b].tolist()]
        cols = np.concatenate(spans)
        dg = np.repeat(pair_dg[a:b], [len(x) for x in spans])
        blocks.append((rows, cols, dg))
    return blocks


def _fuzzy(written: pd.DataFrame, tips: pd.DataFrame, options: MatchOptions) -> pd.DataFrame:
    """Score fuzzy candidates; return pairs (w, tip, score, auto) where auto
    says the pair is within the automatic edit limits."""
    blocks = candidate_blocks(written, tips, options)
    w_e = written["e"].to_numpy(dtype=object)
    w_g_len = written["g"].str.len().to_numpy()
    w_e_len = written["e"].str.len().to_numpy()
    t_e = tips["e"].to_numpy(dtype=object)
    t_g_len = tips["g"].str.len().to_numpy()
    t_e_len = tips["e"].str.len().to_numpy()
    e_limit_auto = allowed_edits(w_e_len, options)
    e_limit = e_limit_auto + options.review_extra_edits
    g_limit_auto = allowed_edits(w_g_len, options)
    out_w: list[np.ndarray] = []
    out_t: list[np.ndarray] = []
    out_s: list[np.ndarray] = []
    out_a: list[np.ndarray] = []
    for rows, cols, dg in blocks:
        cut = int(e_limit[rows].max())
        de = process.cdist(
            w_e[rows].tolist(),
            t_e[cols].tolist(),
            scorer=OSA.distance,
            score_cutoff=cut,
            dtype=np.int8,
            workers=-1 if len(rows) * len(cols) > 200_000 else 1,
        )
        keep = de <= e_limit[rows][:, None]
        r, c = np.nonzero(keep)
        if len(r) == 0:
            continue
        wr, tc = rows[r], cols[c]
        d_e = de[r, c].astype(np.float64)
        d_g = dg[c].astype(np.float64)
        span = np.maximum(w_g_len[wr], t_g_len[tc]) + np.maximum(w_e_len[wr], t_e_len[tc])
        score = 100.0 * (1.0 - (d_g + d_e) / np.maximum(span, 1))
        auto = (d_e <= e_limit_auto[wr]) & (d_g <= g_limit_auto[wr])
        sel = score >= options.review_score
        out_w.append(wr[sel])
        out_t.append(tc[sel])
        out_s.append(score[sel])
        out_a.append(auto[sel])
    if not out_w:
        return pd.DataFrame({"w": [], "t": [], "score": [], "auto": []})
    return pd.DataFrame(
        {
            "w": np.concatenate(out_w),
            "t": np.concatenate(out_t),
            "score": np.concatenate(out_s),
            "auto": np.concatenate(out_a),
        }
    )


# --- the matcher ---------------------------------------------------------------


def _synonym_links(synonyms: pd.DataFrame | None) -> pd.DataFrame:
    """Return (from, to) canonical pairs in both directions of a synonym
    table with columns ``synonym`` and ``accepted``."""
    if synonyms is None or synonyms.empty:
        return pd.DataFrame({"from": [], "to": []}, dtype=object)
    syn = parse_names(synonyms["synonym"].astype(str))["canonical"].to_numpy()
    acc = parse_names(synonyms["accepted"].astype(str))["canonical"].to_numpy()
    pairs = pd.DataFrame(
        {"from": np.concatenate([syn, acc]), "to": np.concatenate([acc, syn])}, dtype=object
    )
    pairs = pairs[(pairs["from"] != "") & (pairs["to"] != "") & (pairs["from"] != pairs["to"])]
    return pairs.drop_duplicates().reset_index(drop=True)


def _folded_parts(frame: pd.DataFrame, other: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Folded genus ``g`` and epithet ``e`` (with any infraspecific epithet)
    of two parsed frames, folding the distinct values of both at once
    (written names repeat tip names)."""
    both = pd.concat([frame, other], ignore_index=True)
    epithet = both["epithet"].fillna("")
    infra = both["infraspecific"].fillna("")
    folded_all = pd.DataFrame(
        {
            "g": fold_spelling(both["genus"].fillna("")).to_numpy(),
            "e": fold_spelling((epithet + " " + infra).str.strip()).to_numpy(),
        }
    )
    first = folded_all.iloc[: len(frame)].reset_index(drop=True)
    second = folded_all.iloc[len(frame) :].reset_index(drop=True)
    return first, second


def _written_parts(frame: pd.DataFrame) -> pd.DataFrame:
    """Genus ``g`` and epithet ``e`` of a parsed frame, lower-cased as written."""
    epithet = frame["epithet"].fillna("")
    both = (epithet + " " + frame["infraspecific"].fillna("")).str.strip()
    return pd.DataFrame({"g": frame["genus"].fillna("").str.lower(), "e": both.str.lower()})


@dataclass(frozen=True)
class _Folded:
    """The folded spellings the spelling, fuzzy and genus stages compare."""

    written: pd.DataFrame  # g and e of every written name, by position
    tips: pd.DataFrame  # g and e of the tips that have a genus, indexed by tip position
    labels: np.ndarray  # the labels of those tips
    has_genus: np.ndarray  # per written name: a genus was read


@dataclass
class _Matching:
    """The state of one :func:`match_names` call: what every stage reads
    (the distinct written names and tips as parsed, the synonyms, the
    options) and what :func:`_settle` writes (``result``, one row per
    written name, and ``open``, the names no stage has decided yet). Rows
    are named by their position ``w`` in ``names``."""

    options: MatchOptions
    names: pd.Series
    parsed: pd.DataFrame
    tips: pd.DataFrame  # parsed tip labels, with the label as ``tip``
    synonyms: pd.DataFrame | None
    result: pd.DataFrame
    open: np.ndarray

    @cached_property
    def uncertain(self) -> np.ndarray:
        """The name carries a qualifier that makes it uncertain."""
        return self.parsed["qualifiers"].map(lambda q: bool(UNCERTAIN.intersection(q))).to_numpy()

    @cached_property
    def placed_all(self) -> np.ndarray:
        """The parser placed every word of the name."""
        return self.parsed["leftovers"].map(len).to_numpy() == 0

    @cached_property
    def hybrid(self) -> np.ndarray:
        return self.parsed["hybrid"].to_numpy(dtype=bool)

    @cached_property
    def written_genus(self) -> np.ndarray:
        """Genera as the parser reads them (capitalised, without diacritics)."""
        return self.parsed["genus"].fillna("").to_numpy(dtype=object)

    @cached_property
    def genus_of_tip(self) -> dict[str, str]:
        return dict(zip(self.tips["tip"], self.tips["genus"].fillna(""), strict=True))

    @cached_property
    def folded(self) -> _Folded:
        written, tips = _folded_parts(self.parsed, self.tips)
        tips = tips[tips["g"] != ""]
        return _Folded(
            written=written,
            tips=tips,
            labels=self.tips.loc[tips.index, "tip"].to_numpy(),
            has_genus=(written["g"] != "").to_numpy(),
        )


def _start(
    written: list[str] | pd.Series,
    tips: list[str] | pd.Series,
    synonyms: pd.DataFrame | None,
    options: MatchOptions,
) -> _Matching:
    """Parse the distinct written names (sorted) and tips; every name open,
    unmatched until a stage decides it."""
    names = pd.Series(pd.unique(pd.Series(list(written), dtype=object)), dtype=object)
    names = names[names.notna()].astype(str).sort_values(kind="stable").reset_index(drop=True)
    tip_list = pd.Series(pd.unique(pd.Series(list(tips), dtype=object)), dtype=object).astype(str)
    parsed = parse_names(names)
    tparsed = parse_names(tip_list)
    tparsed["tip"] = tip_list.to_numpy()
    n = len(names)
    result = pd.DataFrame(
        {
            "written_name": names,
            "canonical": parsed["canonical"],
            "stage": "unmatched",
            "status": "pending",
            "tip_label": None,
            "score": 0.0,
            "runner_up": None,
            "runner_up_score": np.nan,
            "margin": np.nan,
            "candidates": [[] for _ in range(n)],
            "reason": "",
        }
    )
    return _Matching(
        options=options,
        names=names,
        parsed=parsed,
        tips=tparsed,
        synonyms=synonyms,
        result=result,
        open=np.ones(n, dtype=bool),
    )


# --- the stages: each proposes candidate pairs for the names still open ------


def _no_pairs() -> pd.DataFrame:
    return pd.DataFrame({"w": [], "tip": [], "score": []})


def _pairs_by_key(
    state: _Matching, w_keys: pd.Series, t_keys: pd.Series, score: float
) -> pd.DataFrame:
    """Pairs of open written names and tips whose (non-empty) keys are equal."""
    left = pd.DataFrame({"w": np.arange(len(state.names)), "key": w_keys.to_numpy()})[state.open]
    left = left[left["key"].astype(bool)]
    right = pd.DataFrame({"key": t_keys.to_numpy(), "tip": state.tips["tip"].to_numpy()})
    right = right[right["key"].astype(bool)]
    pairs = left.merge(right, on="key")[["w", "tip"]]
    pairs["score"] = score
    return pairs


def _by_exact(state: _Matching) -> pd.DataFrame:
    """The written name is a tip label."""
    names = state.names
    hit = names.isin(set(state.tips["tip"])).to_numpy()
    return pd.DataFrame({"w": np.flatnonzero(hit), "tip": names[hit].to_numpy(), "score": 100.0})


def _by_canonical(state: _Matching) -> pd.DataFrame:
    """Both read to the same canonical form."""
    return _pairs_by_key(state, state.parsed["canonical"], state.tips["canonical"], 100.0)


def _by_species_of_subspecies(state: _Matching) -> pd.DataFrame:
    """A subspecies, variety or form whose species is a tip."""
    parsed = state.parsed
    has_infra = parsed["infraspecific"].notna() & ~parsed["hybrid"]
    species = (parsed["genus"].fillna("") + " " + parsed["epithet"].fillna("")).where(has_infra, "")
    return _pairs_by_key(state, species, state.tips["canonical"], 90.0)


def _by_synonym(state: _Matching) -> pd.DataFrame:
    """The name is a synonym of a tip's name, or the other way round."""
    links = _synonym_links(state.synonyms)
    if links.empty:
        return _no_pairs()
    left = pd.DataFrame(
        {"w": np.arange(len(state.names)), "from": state.parsed["canonical"].to_numpy()}
    )[state.open]
    via = left.merge(links, on="from").merge(
        state.tips[["canonical", "tip"]], left_on="to", right_on="canonical"
    )
    return via.assign(score=100.0)[["w", "tip", "score"]]


def _by_gender(state: _Matching) -> pd.DataFrame:
    """The same genus and infraspecific part, and an epithet of another
    gender (:func:`gender_variants`)."""
    parsed, tparsed = state.parsed, state.tips
    binomial = parsed["epithet"].notna() & parsed["genus"].notna()
    epithets = pd.unique(parsed.loc[binomial & pd.Series(state.open), "epithet"])
    variants = [(e, v) for e in epithets for v in sorted(gender_variants(e))]
    if not variants:
        return _no_pairs()
    var = pd.DataFrame(variants, columns=["epithet", "variant"])
    left = pd.DataFrame(
        {
            "w": np.arange(len(state.names)),
            "genus": parsed["genus"].to_numpy(),
            "epithet": parsed["epithet"].to_numpy(),
            "infra": parsed["infraspecific"].fillna("").to_numpy(),
        }
    )[state.open & binomial.to_numpy()]
    left = left.merge(var, on="epithet")
    right = pd.DataFrame(
        {
            "genus": tparsed["genus"].to_numpy(),
            "variant": tparsed["epithet"].to_numpy(),
            "infra": tparsed["infraspecific"].fillna("").to_numpy(),
            "tip": tparsed["tip"].to_numpy(),
        }
    )
    pairs = left.merge(right, on=["genus", "variant", "infra"])[["w", "tip"]]
    return pairs.assign(score=95.0)


def _by_spelling(state: _Matching) -> pd.DataFrame:
    """Genus and epithet equal after folding spellings (:func:`fold_spelling`)."""
    folded = state.folded
    wf, tf = folded.written, folded.tips
    w_key = (wf["g"] + " " + wf["e"]).where(
        pd.Series(folded.has_genus & (wf["e"] != "").to_numpy()), ""
    )
    t_key = (tf["g"] + " " + tf["e"]).where(tf["e"] != "", "")
    spelled = pd.DataFrame({"w": np.arange(len(state.names)), "key": w_key.to_numpy()})[state.open]
    spelled = spelled[spelled["key"] != ""].merge(
        pd.DataFrame({"key": t_key.to_numpy(), "tip": folded.labels}), on="key"
    )
    return spelled[["w", "tip"]].assign(score=95.0)


def _by_fuzzy(state: _Matching) -> pd.DataFrame:
    """Genus and epithet within a few edits (:func:`_fuzzy`), scored on the
    folded spellings and on the letters as written; ``auto`` says a pair is
    within the automatic edit limits."""
    folded = state.folded
    rows = np.flatnonzero(state.open & folded.has_genus & (folded.written["e"] != "").to_numpy())
    if not len(rows) or not len(folded.tips):
        return _no_pairs()
    opts = state.options
    scored = _fuzzy(
        folded.written.iloc[rows].reset_index(drop=True),
        folded.tips.reset_index(drop=True),
        opts,
    )
    # Folding can make a typo cost more ("zyrvvuus" folds to "zirvus",
    # one edit from "tirvus" but two from "zirvuvus", the name it was
    # meant to be): every name is scored on its letters as written too,
    # and each pair keeps its better score.
    written = _written_parts(state.parsed).iloc[rows].reset_index(drop=True)
    tips = _written_parts(state.tips).loc[folded.tips.index].reset_index(drop=True)
    scored = (
        pd.concat([scored, _fuzzy(written, tips, opts)], ignore_index=True)
        .sort_values(["w", "t", "score"], ascending=[True, True, False], kind="stable")
        .drop_duplicates(["w", "t"])
    )
    if scored.empty:
        return _no_pairs()
    return pd.DataFrame(
        {
            "w": rows[scored["w"].to_numpy(dtype=np.int64)],
            "tip": folded.labels[scored["t"].to_numpy(dtype=np.int64)],
            "score": scored["score"].to_numpy(),
            "auto": scored["auto"].to_numpy(dtype=bool),
        }
    )


def _by_genus(state: _Matching) -> pd.DataFrame:
    """Only the (folded) genus matches: every tip of that genus."""
    folded = state.folded
    rows = np.flatnonzero(state.open & folded.has_genus)
    if not len(rows) or not len(folded.tips):
        return _no_pairs()
    left = pd.DataFrame({"w": rows, "g": folded.written["g"].to_numpy()[rows]})
    right = pd.DataFrame({"g": folded.tips["g"].to_numpy(), "tip": folded.labels})
    pairs = left.merge(right, on="g")
    return pairs.assign(score=50.0)[["w", "tip", "score"]]


@dataclass(frozen=True)
class _Stage:
    """One stage of :func:`match_names`: the ``stage`` it records, the
    function that proposes its pairs (w, tip, score[, auto]) for the names
    still open, and how :func:`_settle` judges its best candidates."""

    name: str
    propose: Callable[[_Matching], pd.DataFrame]
    #: Never changes the genus, or explains a change by a recorded synonym:
    #: its matches are not held back as a change of genus.
    keeps_genus: bool = False
    #: May accept a hybrid name (only the exact and canonical forms do).
    takes_hybrids: bool = False
    #: Accepts only from ``MatchOptions.accept_score``.
    needs_score: bool = False
    #: When set, every name it reaches waits for review, for this reason.
    hold: str = ""


#: The stages in order; the first that reaches a name decides it.
_STAGES = (
    _Stage("exact", _by_exact, keeps_genus=True, takes_hybrids=True),
    _Stage("canonical", _by_canonical, keeps_genus=True, takes_hybrids=True),
    _Stage(
        "canonical",
        _by_species_of_subspecies,
        keeps_genus=True,
        takes_hybrids=True,
        hold="an infraspecific name whose species is a tip",
    ),
    _Stage("synonym", _by_synonym, keeps_genus=True),
    _Stage("gender", _by_gender),
    _Stage("spelling", _by_spelling),
    _Stage("fuzzy", _by_fuzzy, needs_score=True),
    _Stage("genus", _by_genus, hold="only the genus matched"),
)
# Every stage a result may name, in order, then the two verdicts of no stage.
STAGES = [*dict.fromkeys(stage.name for stage in _STAGES), "unmatched", "unparseable"]


# --- settling: ranking a stage's pairs, accepting or holding each name ------


def _settle(state: _Matching, stage: _Stage, pairs: pd.DataFrame) -> None:
    """Record the ranked ``pairs`` of ``stage`` for the still-open names
    and close them: accepted when one tip is clearly best and nothing holds
    the name back (see :func:`_verdicts`), else pending with the reason."""
    if pairs.empty:
        return
    pairs = pairs[state.open[pairs["w"].to_numpy()]]
    if pairs.empty:
        return
    ranked = _rank(pairs, state.options.candidates)
    idx = ranked.index.to_numpy(dtype=np.int64)
    accept, reason = _verdicts(state, stage, pairs, ranked)
    result = state.result
    for column in ["tip_label", "score", "runner_up", "runner_up_score", "margin"]:
        result.loc[idx, column] = ranked[column].to_numpy()
    result.loc[idx, "candidates"] = pd.Series(ranked["candidates"].to_list(), index=idx)
    result.loc[idx, "stage"] = stage.name
    result.loc[idx, "status"] = np.where(accept, "accepted", "pending")
    result.loc[idx, "reason"] = reason
    state.open[idx] = False


def _verdicts(
    state: _Matching, stage: _Stage, pairs: pd.DataFrame, ranked: pd.DataFrame
) -> tuple[np.ndarray, np.ndarray]:
    """Return, per ranked name, whether it is accepted and else why not
    (the reason of highest precedence)."""
    opts = state.options
    idx = ranked.index.to_numpy(dtype=np.int64)
    if "auto" in pairs:
        best_auto = pairs.sort_values(["w", "score"], ascending=[True, False]).drop_duplicates("w")
        auto_ok = best_auto.set_index("w")["auto"].reindex(ranked.index).fillna(False)
    else:
        auto_ok = pd.Series(True, index=ranked.index)
    auto_ok = auto_ok.to_numpy(dtype=bool)
    clear = (ranked["runner_up"].isna() | (ranked["margin"] >= opts.ambiguity_margin)).to_numpy()
    tied = (ranked["runner_up"].notna() & (ranked["margin"] <= 0)).to_numpy()
    good = (ranked["score"] >= (opts.accept_score if stage.needs_score else 0)).to_numpy()
    best_tips = ranked["tip_label"].to_numpy(dtype=object)
    w_genus = state.written_genus[idx]
    if stage.keeps_genus:
        tip_genus = np.full(len(idx), "", dtype=object)
        changed = np.zeros(len(idx), dtype=bool)
    else:
        tip_genus = np.array([state.genus_of_tip.get(t, "") for t in best_tips], dtype=object)
        changed = np.array(
            [w.lower() != t.lower() for w, t in zip(w_genus, tip_genus, strict=True)],
            dtype=bool,
        )
    uncertain, placed_all = state.uncertain[idx], state.placed_all[idx]
    hybrid = state.hybrid[idx] & (not stage.takes_hybrids)
    accept = (
        clear
        & auto_ok
        & good
        & (~changed | opts.accept_genus_changes)
        & ~uncertain
        & placed_all
        & ~hybrid
        & (not stage.hold)
    )
    reason = np.full(len(idx), "", dtype=object)
    # Lowest in precedence: shown when nothing else holds the name back.
    if not opts.accept_genus_changes:
        for k in np.flatnonzero(changed).tolist():
            reason[k] = f"{GENUS_CHANGED}: {w_genus[k]} written, {tip_genus[k]} in {best_tips[k]}"
    reason[~good] = "score below the automatic threshold"
    reason[~auto_ok] = "more edits than allowed automatically"
    reason[~clear] = "runner-up too close"
    reason[tied] = "several tips equally good"
    reason[~placed_all] = "the name has words the parser could not place"
    reason[uncertain] = "the name carries an uncertain qualifier"
    reason[hybrid] = "a hybrid name is matched only by its exact or canonical form"
    if stage.hold:
        reason[:] = stage.hold
    reason[accept] = ""
    return accept, reason


def _close(state: _Matching) -> pd.DataFrame:
    """Say why the names no stage reached are open (unparseable, or no tip
    came close) and return the result in :data:`MATCH_COLUMNS`."""
    parsed, result = state.parsed, state.result
    unparsed = ~parsed["parseable"].to_numpy() & state.open
    result.loc[unparsed, "reason"] = "could not parse: " + parsed.loc[unparsed, "reason"]
    result.loc[unparsed, "stage"] = "unparseable"
    left_open = state.open & ~unparsed
    result.loc[left_open, "reason"] = "no tip came close"
    no_runner = result["runner_up"].isna() & (result["stage"] != "unmatched")
    result.loc[no_runner, "margin"] = result.loc[no_runner, "score"]
    result["score"] = result["score"].astype(float)
    result["margin"] = result["margin"].astype(float)
    for column in ["tip_label", "runner_up"]:
        result[column] = result[column].astype(object).where(result[column].notna(), None)
    return result[MATCH_COLUMNS]


def match_names(
    written: list[str] | pd.Series,
    tips: list[str] | pd.Series,
    synonyms: pd.DataFrame | None = None,
    options: MatchOptions | None = None,
) -> pd.DataFrame:
    """Match each distinct written name to the tip labels, stage by stage
    (:data:`_STAGES`, see the module notes).

    Args:
        written: written names (repeats are matched once).
        tips: tip labels of a tree or tree set.
        synonyms: optional table with columns ``synonym`` and ``accepted``.
        options: thresholds (:class:`MatchOptions`; defaults when omitted).

    Returns:
        One row per distinct written name, sorted by it, with
        :data:`MATCH_COLUMNS`: the deciding ``stage``, ``status`` (accepted
        or pending), the best ``tip_label`` (the accepted tip, or the first
        candidate of a pending name), ``score`` 0-100, ``runner_up`` with
        its score, ``margin`` (best minus runner-up, or the score when
        there is none), ``candidates`` (list of [tip, score], best first)
        and ``reason`` (why a name is pending).
    """
    state = _start(written, tips, synonyms, options or MatchOptions())
    for stage in _STAGES:
        _settle(state, stage, stage.propose(state))
    return _close(state)


def match_findings(result: pd.DataFrame, tips: list[str] | pd.Series) -> list[Finding]:
    """Return the conflicts in a :func:`match_names` result as findings.

    Codes: ``names.shared_tip`` (several written names accepted for one
    tip: their records are merged under it), ``names.several_tips`` (one
    name equally close to several tips), ``names.tip_collision`` (tips that
    read to one canonical form) and ``names.unparseable``.
    """
    findings: list[Finding] = []
    accepted = result[result["status"] == "accepted"]
    # Group only the tips reached more than once: grouping is the slow part.
    accepted = accepted[accepted.duplicated("tip_label", keep=False)]
    shared = accepted.groupby("tip_label")["written_name"].agg(list)
    stages = accepted.set_index("written_name")["stage"]
    for tip, written in shared.items():
        findings.append(
            Finding(
                code="names.shared_tip",
                severity=Severity.warning,
                subject=str(tip),
                message=(
                    f"{len(written)} written names reach tip {tip!r}; their records are "
                    f"merged under it: {', '.join(map(repr, written))}"
                ),
                details={"written_names": written, "stages": [stages[w] for w in written]},
            )
        )
    tied = result[
        result["runner_up"].notna() & (result["margin"] <= 0) & (result["status"] == "pending")
    ]
    for row in tied.itertuples(index=False):
        best = [c[0] for c in row.candidates if c[1] >= row.score]
        findings.append(
            Finding(
                code="names.several_tips",
                severity=Severity.warning,
                subject=row.written_name,
                message=(
                    f"{row.written_name!r} reaches {len(best)} tips equally "
                    f"({row.stage}): {', '.join(map(repr, best))}; it waits for review"
                ),
                details={"stage": row.stage, "tips": best, "score": row.score},
            )
        )
    tparsed = parse_names(pd.Series(pd.unique(pd.Series(list(tips), dtype=object))).astype(str))
    tparsed = tparsed[(tparsed["canonical"] != "") & tparsed.duplicated("canonical", keep=False)]
    groups = tparsed.groupby("canonical")["written"].agg(list)
    for canonical, labels in groups.items():
        findings.append(
            Finding(
                code="names.tip_collision",
                severity=Severity.warning,
                subject=str(canonical),
                message=(
                    f"{len(labels)} tips read as {canonical!r}: {', '.join(map(repr, labels))}; "
                    "a name of that form cannot be matched to one of them automatically"
                ),
                details={"tips": labels},
            )
        )
    bad = result[result["reason"].str.startswith("could not parse")]
    for row in bad.itertuples(index=False):
        findings.append(
            Finding(
                code="names.unparseable",
                severity=Severity.warning,
                subject=row.written_name or "(empty name)",
                message=f"written name {row.written_name!r} {row.reason}; it waits for review",
                details={},
            )
        )
    return findings
