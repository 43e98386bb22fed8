"""Parsing written names into their parts and a canonical form.

A written name (in a trait sheet) or a tip label (in a tree) is cleaned
step by step -- quotes, underscores, ligatures, diacritics, spaces, case --
and then read token by token into genus, species epithet, infraspecific
rank and epithet, authority and year, qualifiers (cf., aff., nr., sp.,
spp., sp. nov., ?), hybrid sign and a voucher or accession suffix. What
cannot be placed is kept in ``leftovers``. Every cleaning step that changed
the text is listed in ``transformations``. A name without a readable genus
is returned with ``parseable=False`` and its reason, never dropped.

The canonical form is ``Genus epithet`` (with ``rank infraspecific`` when
present and ``×`` for a hybrid), the form matching compares.
"""

from __future__ import annotations

import re
import unicodedata
from functools import lru_cache

import pandas as pd
from pydantic import BaseModel, ConfigDict, Field

__all__ = ["ParsedName", "PARSED_COLUMNS", "parse_name", "parse_names"]

HYBRID_SIGN = "×"

# Ligatures and letters that NFKD does not decompose into a base letter.
LIGATURES = {
    "æ": "ae",
    "Æ": "Ae",
    "œ": "oe",
    "Œ": "Oe",
    "ß": "ss",
    "ø": "o",
    "Ø": "O",
    "ł": "l",
    "Ł": "L",
    "đ": "d",
    "ı": "i",
}
QUOTES = "'\"`‘’‚‛“”„‟′″"

# Infraspecific ranks as written -> the form kept in the canonical name.
RANKS = {
    "subsp": "subsp.",
    "ssp": "subsp.",
    "subspecies": "subsp.",
    "var": "var.",
    "variety": "var.",
    "f": "f.",
    "fo": "f.",
    "forma": "f.",
    "form": "f.",
    "subvar": "subvar.",
    "subf": "subf.",
}
# Qualifiers as written -> the form kept in ``qualifiers``.
QUALIFIERS = {
    "cf": "cf.",
    "conf": "cf.",
    "aff": "aff.",
    "nr": "nr.",
    "near": "nr.",
    "sp": "sp.",
    "spec": "sp.",
    "species": "sp.",
    "spp": "spp.",
    "indet": "indet.",
    "?": "?",
}
# Lower-case words that begin an authority (de Candolle, van der Hoeven ...).
PARTICLES = {"de", "da", "del", "della", "der", "den", "di", "du", "la", "le", "van", "von", "ex"}

WORD = re.compile(r"^[a-z][a-z-]*$")
GENUS = re.compile(r"^[A-Za-z][A-Za-z-]*[A-Za-z]$")
YEAR = re.compile(r"\b(1[5-9]\d\d|20\d\d)\b")
HAS_DIGIT = re.compile(r"\d")
# Clean names and tip labels take the fast path: Genus epithet [suffix].
SIMPLE = re.compile(r"^([A-Z][a-z]+)[ _]([a-z][a-z]+)(?:_([A-Za-z]*\d[A-Za-z0-9.-]*))?$")


class ParsedName(BaseModel):
    """A written name read into its parts.

    ``canonical`` is the form matching compares (empty when the name could
    not be parsed); ``transformations`` lists every cleaning step applied, in
    order; ``leftovers`` holds the tokens no part took.
    """

    model_config = ConfigDict(frozen=True)

    written: str
    cleaned: str = ""
    genus: str | None = None
    epithet: str | None = None
    rank: str | None = None
    infraspecific: str | None = None
    authority: str | None = None
    year: int | None = None
    qualifiers: list[str] = Field(default_factory=list)
    hybrid: bool = False
    suffix: str | None = Field(default=None, description="voucher or accession suffix")
    leftovers: list[str] = Field(default_factory=list)
    canonical: str = ""
    transformations: list[str] = Field(default_factory=list)
    parseable: bool = True
    reason: str = ""


PARSED_COLUMNS = list(ParsedName.model_fields)


def _clean(text: str, steps: list[str]) -> str:
    """Apply the character-level cleaning steps, noting each that changed
    the text."""
    value = unicodedata.normalize("NFC", text)
    if any(q in value for q in QUOTES):
        value = value.translate({ord(q): " " for q in QUOTES})
        steps.append("removed quotes")
    if "_" in value:
        value = value.replace("_", " ")
        steps.append("underscores to spaces")
    if any(ch in value for ch in LIGATURES):
        found = sorted({ch for ch in value if ch in LIGATURES})
        for ch in found:
            value = value.replace(ch, LIGATURES[ch])
        steps.append("folded " + ", ".join(f"{ch}->{LIGATURES[ch]}" for ch in found))
    if not value.isascii():
        # Keep the hybrid sign; strip combining marks (ë -> e, é -> e).
        parts = value.split(HYBRID_SIGN)
        stripped = []
        for part in parts:
            decomposed = unicodedata.normalize("NFKD", part)
            stripped.append("".join(ch for ch in decomposed if not unicodedata.combining(ch)))
        folded = HYBRID_SIGN.join(stripped)
        if folded != value:
            steps.append("removed diacritics")
            value = folded
    spaced = " ".join(value.split())
    if spaced != value.strip():
        steps.append("collapsed repeated spaces")
    elif spaced != value:
        steps.append("trimmed spaces")
    if "?" in spaced:
        # A question mark is a qualifier of its own, wherever it is attached.
        spaced = " ".join(spaced.replace("?", " ? ").split())
    return spaced


def _bare(token: str) -> str:
    return token.lower().rstrip(".")


def _parse_uncached(written: str) -> ParsedName:
    if not isinstance(written, str):
        return ParsedName(
            written=str(written), parseable=False, reason="not text", leftovers=[str(written)]
        )
    fast = SIMPLE.match(written)
    if fast:
        genus, epithet, suffix = fast.groups()
        steps = ["underscores to spaces"] if "_" in written else []
        if suffix:
            steps.append(f"set aside suffix {suffix!r}")
        return ParsedName(
            written=written,
            cleaned=written.replace("_", " "),
            genus=genus,
            epithet=epithet,
            suffix=suffix,
            canonical=f"{genus} {epithet}",
            transformations=steps,
        )
    steps: list[str] = []
    cleaned = _clean(written, steps)
    tokens = cleaned.split(" ") if cleaned else []
    if not tokens:
        return ParsedName(
            written=written,
            cleaned=cleaned,
            parseable=False,
            reason="the name is empty" if not written.strip() else "the name has no letters",
            transformations=steps,
        )
    if cleaned.isupper() and any(ch.isalpha() for ch in cleaned):
        # A name written in capitals: read it in lower case, genus capitalised.
        tokens = [t.lower() for t in tokens]
        steps.append("read capitals as lower case")

    qualifiers: list[str] = []
    leftovers: list[str] = []
    authority: list[str] = []
    genus = epithet = rank = infra = suffix = None
    hybrid = False
    notho_species = False
    notho_genus = False
    partner: ParsedName | None = None
    i = 0
    n = len(tokens)
    while i < n:
        token = tokens[i]
        bare = _bare(token)
        if token in (HYBRID_SIGN, "x", "X") or (token.startswith(HYBRID_SIGN) and len(token) > 1):
            hybrid = True
            if token in ("x", "X"):
                steps.append("read standalone x as the hybrid sign")
            if token.startswith(HYBRID_SIGN) and len(token) > 1:
                tokens[i] = token[1:]
                notho_genus = genus is None
                notho_species = genus is not None and epithet is None
                continue
            if epithet is not None:
                # A hybrid formula: Genus a × Genus b (or Genus a × b).
                rest = " ".join(tokens[i + 1 :])
                if rest:
                    if WORD.match(rest.split(" ")[0]) and genus:
                        rest = f"{genus} {rest}"
                    partner = parse_name(rest)
                break
            if genus is not None:
                notho_species = True
            else:
                notho_genus = True
            i += 1
            continue
        if bare == "sp" and i + 1 < n and _bare(tokens[i + 1]) == "nov":
            qualifiers.append("sp. nov.")
            i += 2
            continue
        if bare in QUALIFIERS and (genus is not None or bare in ("cf", "aff", "nr", "?")):
            if bare == "species" and epithet is None and i + 1 < n:
                pass  # "species" followed by more words is probably an epithet
            else:
                qualifiers.append(QUALIFIERS[bare])
                i += 1
                continue
        if genus is None:
            if GENUS.match(token):
                genus = token[0].upper() + token[1:].lower()
                if genus != token:
                    steps.append("genus capitalised")
            else:
                leftovers.append(token)
            i += 1
            continue
        if authority:
            if bare in RANKS and i + 1 < n and WORD.match(tokens[i + 1].lower()):
                pass  # a rank after the species' authority: read it below
            else:
                authority.append(token)
                i += 1
                continue
        if bare in RANKS and i + 1 < n and epithet is not None and infra is None:
            following = tokens[i + 1].lower()
            if WORD.match(following):
                rank = RANKS[bare]
                if rank != token:
                    steps.append(f"rank {token!r} written as {rank!r}")
                infra = following
                i += 2
                continue
        lowered = token.lower()
        if epithet is None and WORD.match(lowered) and bare not in PARTICLES:
            if lowered != token:
                steps.append("epithet lower-cased")
            epithet = lowered
            i += 1
            continue
        if (
            HAS_DIGIT.search(token)
            and suffix is None
            and epithet is not None
            and not YEAR.fullmatch(token.strip("(),"))
        ):
            suffix = token
            steps.append(f"set aside suffix {token!r}")
            i += 1
            continue
        starts_author = token[:1].isupper() or token.startswith("(")
        if bare in PARTICLES and i + 1 < n and tokens[i + 1][:1].isupper():
            starts_author = True
        if starts_author or (YEAR.fullmatch(token.strip("(),")) and epithet is not None):
            authority.append(token)
            i += 1
            continue
        if epithet is not None and infra is None and suffix is None and WORD.match(lowered):
            infra = lowered  # a zoological trinomial, written without a rank
            i += 1
            continue
        leftovers.append(token)
        i += 1

    authority_text = " ".join(authority) or None
    year = None
    if authority_text:
        found = YEAR.search(authority_text)
        if found:
            year = int(found.group(1))
        steps.append("set aside authority")
    if qualifiers:
        steps.append("set aside qualifier " + ", ".join(qualifiers))
    if leftovers:
        steps.append("could not place " + ", ".join(repr(t) for t in leftovers))
    if genus is None:
        return ParsedName(
            written=written,
            cleaned=cleaned,
            qualifiers=qualifiers,
            leftovers=leftovers,
            authority=authority_text,
            hybrid=hybrid,
            transformations=steps,
            parseable=False,
            reason=(
                "no genus could be read"
                if any(ch.isalpha() for ch in cleaned)
                else "the name has no letters"
            ),
        )
    parts = [f"{HYBRID_SIGN}{genus}" if notho_genus else genus]
    if epithet:
        parts.append(f"{HYBRID_SIGN}{epithet}" if notho_species else epithet)
        if infra:
            parts.extend([rank, infra] if rank else [infra])
    canonical = " ".join(parts)
    if partner is not None and partner.canonical:
        canonical = f"{canonical} {HYBRID_SIGN} {partner.canonical}"
    return ParsedName(
        written=written,
        cleaned=cleaned,
        genus=genus,
        epithet=epithet,
        rank=rank,
        infraspecific=infra,
        authority=authority_text,
        year=year,
        qualifiers=qualifiers,
        hybrid=hybrid,
        suffix=suffix,
        leftovers=leftovers,
        canonical=canonical,
        transformations=steps,
    )


_EMPTY_ROW = {
    name: field.get_default(call_default_factory=True)
    for name, field in ParsedName.model_fields.items()
    if name != "written"
}


def _fast_row(written: object) -> dict[str, object] | None:
    """The fields of a clean ``Genus_epithet[_suffix]`` name as a plain dict,
    without building a model (the same values :func:`parse_name` gives);
    None for any other name."""
    if not isinstance(written, str):
        return None
    fast = SIMPLE.match(written)
    if fast is None:
        return None
    genus, epithet, suffix = fast.groups()
    steps = ["underscores to spaces"] if "_" in written else []
    if suffix:
        steps.append(f"set aside suffix {suffix!r}")
    row = dict(_EMPTY_ROW)
    row.update(
        written=written,
        cleaned=written.replace("_", " "),
        genus=genus,
        epithet=epithet,
        suffix=suffix,
        canonical=f"{genus} {epithet}",
        transformations=steps,
        qualifiers=[],
        leftovers=[],
    )
    return row


@lru_cache(maxsize=200_000)
def parse_name(text: str) -> ParsedName:
    """Return ``text`` read into a :class:`ParsedName`.

    Never raises for a bad name: an empty name, one of only punctuation or
    one without a readable genus comes back with ``parseable=False`` and a
    ``reason``, its text kept in ``written`` and ``leftovers``.
    """
    return _parse_uncached(text)


def parse_names(names: list[str] | pd.Series) -> pd.DataFrame:
    """Return one row per name (in the order given) with the columns of
    :class:`ParsedName` (:data:`PARSED_COLUMNS`).

    Each distinct name is parsed once (and cached across calls), so a
    column with many repeats costs what its distinct values cost.
    """
    series = pd.Series(list(names), dtype=object)
    if series.empty:
        return pd.DataFrame(columns=PARSED_COLUMNS)
    codes, uniques = pd.factorize(series, use_na_sentinel=False)
    rows = [_fast_row(u) or parse_name(str(u)).__dict__ for u in uniques]
    table = pd.DataFrame(rows, columns=PARSED_COLUMNS)
    return table.iloc[codes].reset_index(drop=True)
