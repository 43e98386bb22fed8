"""Invented names, from a seed: genera, epithets, authorities, collections,
the ways people get names wrong, and benchmark-sized sets of tip labels and
written names with their truth.

This is the one home of invented names: the demo scenario
(:mod:`curation.demo.generator`), the benchmarks and the tests draw theirs
from here. Every name is built from syllables, so none is a real taxon,
person or institution. Epithets carry a Latin-like gender ending that
agrees with their genus (ICZN Art. 31.2, ICN Art. 23.5), so that gender
variants are meaningful corruptions.

- :func:`invent_genus`, :func:`invent_epithet`: one name at a time (the
  demo scenario); :func:`invent_binomials` and :func:`invent_tip_labels`:
  many at once, vectorised with NumPy, so that 100,000 take well under a
  second.
- :func:`write_name`: a name as a source writes it, with one kind of
  corruption (a typo, an authority, a gender variant ...).
- :func:`generate_tip_labels`, :func:`generate_names`: benchmark-sized
  tips and written names with each name's true tip.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = [
    "AUTHORS",
    "BENCH_SEED",
    "BENCHMARK_KINDS",
    "BenchmarkNames",
    "COLLECTORS",
    "GENERA",
    "HARSH_KINDS",
    "INSTITUTIONS",
    "OLD_GENERA",
    "agree",
    "gender_variant",
    "generate_names",
    "generate_tip_labels",
    "invent_binomials",
    "invent_epithet",
    "invent_epithets",
    "invent_genus",
    "invent_tip_labels",
    "label_binomials",
    "misspell",
    "spelling_variant",
    "write_name",
]

# The seed of every benchmark data set unless a caller gives another.
BENCH_SEED = 20261202

# Hand-made genera of the sample clade (with the gender of their ending).
# Built from syllables; none is a genus known to the author (from memory).
GENERA: list[tuple[str, str]] = [
    ("Velquira", "f"),
    ("Tornavella", "f"),
    ("Quessandra", "f"),
    ("Zorvanthus", "m"),
    ("Kelomirus", "m"),
    ("Pradexus", "m"),
    ("Vesquarium", "n"),
    ("Talivodum", "n"),
    ("Morquedra", "f"),
    ("Druvelax", "m"),
    ("Sphenquora", "f"),
    ("Ylvandrus", "m"),
    ("Quirendella", "f"),
    ("Baltruvia", "f"),
    ("Holmexus", "m"),
    ("Trevasium", "n"),
]

# Former genera used only in synonyms (genus transfers).
OLD_GENERA: list[tuple[str, str]] = [
    ("Palaeoquira", "f"),
    ("Vandrosia", "f"),
    ("Kessomirus", "m"),
    ("Tolvarium", "n"),
]

# Fictional collections: code, name. The places are invented too.
INSTITUTIONS: list[tuple[str, str]] = [
    ("ZMTV", "Zoological Museum of Tarvonia"),
    ("NCKB", "Natural Collections of Kelbrook"),
    ("IHLV", "Institute of Highland Life, Veldmar"),
    ("QRSM", "Quessary Regional Science Museum"),
]

# Fictional describers (some with diacritics, so encodings matter).
AUTHORS: list[str] = [
    "Marvik",
    "Dütterlin",
    "Olsenbrek",
    "Brénard",
    "Quell & Ashgrove",
    "Tavrosi",
    "Hëlmqvar",
    "Pruzanek",
    "Sölvenger",
    "Idravo",
]

COLLECTORS: list[str] = ["A. Tolvenk", "M. Sarquist", "R. Obenhale", "L. Virtanço", "K. Drusse"]

_ONSETS = [
    "b", "br", "d", "dr", "f", "g", "gl", "k", "kl", "l", "m", "n", "p", "pr",
    "qu", "r", "s", "sk", "t", "th", "tr", "v", "vr", "z",
]  # fmt: skip
_VOWELS = ["a", "e", "i", "o", "u", "ae", "y"]
_CODAS = ["", "", "", "l", "n", "r", "s", "st", "nd", "rv"]
# Consonants between syllables of an epithet (and before its ending).
_MIDDLES = [
    "l", "n", "r", "s", "t", "m", "c", "d", "v", "g", "nd", "nt", "st", "sc", "lv",
    "rv", "rt", "ll", "ss", "ph", "th", "nc",
]  # fmt: skip

_GENUS_ENDINGS = {
    "f": ["ella", "ira", "andra", "osia", "uvia", "ena"],
    "m": ["anthus", "irus", "exus", "odrus", "axis"],
    "n": ["arium", "odum", "esium", "ivum"],
}

# Epithet endings by kind: agreeing adjectives of the first and second
# declension (-us/-a/-um), of the third (-is/-is/-e), and invariant
# genitives of people's names (-i) that never change with the genus.
_ADJ_1 = {"m": "us", "f": "a", "n": "um"}
_ADJ_3 = {"m": "is", "f": "is", "n": "e"}


def _syllable(rng: np.random.Generator, *, coda: bool = True) -> str:
    text = _ONSETS[rng.integers(len(_ONSETS))] + _VOWELS[rng.integers(len(_VOWELS))]
    if coda:
        text += _CODAS[rng.integers(len(_CODAS))]
    return text


def invent_genus(rng: np.random.Generator) -> tuple[str, str]:
    """Return an invented genus name and its gender ('m', 'f' or 'n')."""
    gender = ["m", "f", "n"][rng.integers(3)]
    endings = _GENUS_ENDINGS[gender]
    stem = _syllable(rng) + _syllable(rng, coda=False)
    name = stem + endings[rng.integers(len(endings))]
    return name[0].upper() + name[1:], gender


def invent_epithet(rng: np.random.Generator, gender: str) -> tuple[str, str]:
    """Return an invented epithet agreeing with ``gender`` and its class:
    'adj1' (-us/-a/-um), 'adj3' (-is/-e) or 'genitive' (-i, invariant)."""
    stem = _ONSETS[rng.integers(len(_ONSETS))] + _VOWELS[rng.integers(len(_VOWELS))]
    stem += _MIDDLES[rng.integers(len(_MIDDLES))]
    if rng.random() < 0.45:
        stem += _VOWELS[rng.integers(5)] + _MIDDLES[rng.integers(len(_MIDDLES))]
    draw = rng.random()
    if draw < 0.55:
        return stem + _ADJ_1[gender], "adj1"
    if draw < 0.8:
        return stem + _ADJ_3[gender], "adj3"
    return stem + "i", "genitive"


def _pick(rng: np.random.Generator, options: list[str], size: int) -> np.ndarray:
    return np.asarray(options, dtype=object)[rng.integers(len(options), size=size)]


def invent_epithets(genders: np.ndarray, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Vectorised :func:`invent_epithet` for many names at once: epithets
    agreeing with each of ``genders`` and their class ('adj1' or 'other').

    Returns:
        Two object arrays: the epithets and their classes.
    """
    n = len(genders)
    stems = _pick(rng, _ONSETS, n) + _pick(rng, _VOWELS, n) + _pick(rng, _MIDDLES, n)
    longer = rng.random(n) < 0.6
    stems = np.where(longer, stems + _pick(rng, _VOWELS[:5], n) + _pick(rng, _MIDDLES, n), stems)
    adjective = rng.random(n) < 0.6
    endings = np.array([_ADJ_1[g] for g in genders], dtype=object)
    other = _pick(rng, ["is", "i", "ae", "ensis"], n)
    epithets = stems + np.where(adjective, endings, other)
    return epithets, np.where(adjective, "adj1", "other").astype(object)


def gender_variant(epithet: str, kind: str, gender: str) -> str | None:
    """Return ``epithet`` with the ending of another gender, or None when its
    class does not change with gender (a genitive)."""
    if kind == "adj1":
        ending = _ADJ_1[gender]
        other = {"us": "a", "a": "um", "um": "us"}[ending]
        return epithet[: -len(ending)] + other
    if kind == "adj3":
        if epithet.endswith("is"):
            return epithet[:-2] + "e"
        return epithet[:-1] + "is"
    return None


def agree(epithet: str, kind: str, gender: str, new_gender: str) -> str:
    """Return ``epithet`` (of class ``kind``, agreeing with ``gender``) made
    to agree with a genus of ``new_gender`` (ICZN Art. 31.2)."""
    if kind == "adj1":
        old = _ADJ_1[gender]
        return epithet[: -len(old)] + _ADJ_1[new_gender]
    if kind == "adj3":
        old = _ADJ_3[gender]
        return epithet[: -len(old)] + _ADJ_3[new_gender]
    return epithet


def misspell(word: str, rng: np.random.Generator) -> str:
    """Return ``word`` with one typing error: a substitution, a deletion, an
    insertion or a transposition of two neighbouring letters (never the
    first letter, which people rarely get wrong)."""
    letters = "aeioulnrstmk"
    kind = rng.integers(4)
    if len(word) < 4:
        kind = 0
    i = int(rng.integers(1, len(word) - 1)) if len(word) > 2 else 1
    if kind == 0:
        choices = [c for c in letters if c != word[i : i + 1]]
        return word[:i] + choices[rng.integers(len(choices))] + word[i + 1 :]
    if kind == 1:
        return word[:i] + word[i + 1 :]
    if kind == 2:
        return word[:i] + letters[rng.integers(len(letters))] + word[i:]
    j = min(i + 1, len(word) - 1)
    if word[i] == word[j]:
        return word[:i] + word[i + 1 :]
    return word[:i] + word[j] + word[i] + word[j + 1 :]


# Near-equivalent spellings people write for one another (common practice
# in checklists): each pair is (as named, as miswritten).
_EQUIVALENTS = [("ph", "f"), ("ae", "e"), ("ae", "æ"), ("y", "i"), ("k", "c")]


def spelling_variant(word: str, rng: np.random.Generator) -> str | None:
    """Return ``word`` with one near-equivalent spelling swapped (ph/f, ae/e,
    the ligature æ, y/i, k/c, a doubled letter, -i/-ii), or None if none fits."""
    options: list[str] = []
    for named, written in _EQUIVALENTS:
        position = word.find(named, 1)
        if position > 0:
            options.append(word[:position] + written + word[position + len(named) :])
    if word.endswith("i") and not word.endswith("ii"):
        options.append(word + "i")
    for i in range(1, len(word) - 1):
        if word[i] in "lnrst" and word[i + 1] != word[i] and word[i - 1] != word[i]:
            options.append(word[: i + 1] + word[i] + word[i + 1 :])
            break
    if not options:
        return None
    return options[int(rng.integers(len(options)))]


def write_name(
    kind: str,
    genus: str,
    epithet: str,
    rng: np.random.Generator,
    *,
    gender: str,
    epithet_class: str,
    authority: str = "",
    tip_label: str | None = None,
    synonym: str | None = None,
) -> tuple[str, str]:
    """Write the species ``genus epithet`` as a source might, with one kind
    of corruption.

    Args:
        kind: 'exact', 'authority', 'underscore', 'tip_label',
            'case_spacing', 'typo' (in the epithet, or in the genus one time
            in four), 'genus_typo', 'double_typo' (genus and epithet),
            'spelling_variant', 'gender_variant', 'diacritic', 'synonym',
            'cf_qualifier', 'sp_qualifier' (the genus alone) or
            'subspecies'.
        gender, epithet_class: of the epithet (see :func:`invent_epithet`).
        authority: written after the name for 'authority'.
        tip_label: the species' tip label, written for 'tip_label' when it
            differs from ``Genus_epithet``.
        synonym: a synonym of the species, written for 'synonym'.

    Returns:
        The written name and the kind actually used: 'exact' when the kind
        does not apply (no variant of this epithet, no synonym ...),
        'ligature' for a spelling variant with æ.
    """
    g, e = genus, epithet
    if kind == "authority":
        return f"{g} {e} {authority}", kind
    if kind == "underscore":
        return f"{g}_{e}", kind
    if kind == "tip_label" and tip_label and tip_label != f"{g}_{e}":
        return tip_label, kind
    if kind == "case_spacing":
        forms = [f"{g.upper()} {e.upper()}", f"{g.lower()}  {e}", f"{g} {e.capitalize()}"]
        return forms[int(rng.integers(len(forms)))], kind
    if kind == "typo":
        if rng.random() < 0.25:
            return f"{misspell(g, rng)} {e}", kind
        return f"{g} {misspell(e, rng)}", kind
    if kind == "genus_typo":
        return f"{misspell(g, rng)} {e}", kind
    if kind == "double_typo":
        return f"{misspell(g, rng)} {misspell(e, rng)}", kind
    if kind == "spelling_variant":
        variant = spelling_variant(e, rng)
        if variant:
            return f"{g} {variant}", "ligature" if "æ" in variant else kind
    if kind == "gender_variant":
        variant = gender_variant(e, epithet_class, gender)
        if variant:
            return f"{g} {variant}", kind
    if kind == "diacritic" and "e" in e:
        return f"{g} {e.replace('e', 'ë', 1)}", kind
    if kind == "synonym" and synonym:
        return synonym, kind
    if kind == "cf_qualifier":
        return f"{g} cf. {e}", kind
    if kind == "sp_qualifier":
        return f"{g} sp.", kind
    if kind == "subspecies":
        rank = ["subsp.", "ssp."][int(rng.integers(2))]
        return f"{g} {e} {rank} {invent_epithet(rng, gender)[0]}", kind
    return f"{g} {e}", "exact"


# --------------------------------------------------------------------------
# many names at once (benchmarks and tests)


def _genera(count: int, rng: np.random.Generator) -> tuple[list[str], list[str]]:
    names: list[str] = []
    genders: list[str] = []
    seen: set[str] = set()
    while len(names) < count:
        name, gender = invent_genus(rng)
        if name not in seen:
            seen.add(name)
            names.append(name)
            genders.append(gender)
    return names, genders


def invent_binomials(
    groups: np.ndarray, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Invent unique binomials for species grouped into genera by
    ``groups`` (one invented genus per group number, 0 to the largest).

    Returns:
        Four object arrays, one entry per species: genus, epithet, gender
        and epithet class ('adj1' or 'other').
    """
    count = int(groups.max()) + 1 if len(groups) else 0
    names, genders = _genera(count, rng)
    genus = np.asarray(names, dtype=object)[groups]
    gender = np.asarray(genders, dtype=object)[groups]
    epithet, kind = invent_epithets(gender, rng)
    # Redraw the few epithets that repeat within a genus until none does.
    while True:
        full = pd.Series(genus + " " + epithet)
        again = full.duplicated().to_numpy()
        if not again.any():
            return genus, epithet, gender, kind
        epithet[again], kind[again] = invent_epithets(gender[again], rng)


def label_binomials(genus: np.ndarray, epithet: np.ndarray, rng: np.random.Generator) -> list[str]:
    """Return the tip label of each binomial: ``Genus_epithet``, about 1 in
    8 with a voucher suffix ``_V1234``."""
    n = len(genus)
    labels = genus + "_" + epithet
    voucher = rng.random(n) < 0.12
    suffix = np.char.add("_V", rng.integers(1000, 9999, size=n).astype(str)).astype(object)
    return list(np.where(voucher, labels + suffix, labels))


def invent_tip_labels(groups: np.ndarray, rng: np.random.Generator) -> list[str]:
    """Invent unique tip labels (``Genus_epithet``, about 1 in 8 with a
    voucher suffix ``_V1234``) for species grouped into genera by
    ``groups``, as :func:`invent_binomials` does.

    Returns:
        One label per entry of ``groups``.
    """
    genus, epithet, _, _ = invent_binomials(groups, rng)
    return label_binomials(genus, epithet, rng)


def generate_tip_labels(n: int, *, seed: int = BENCH_SEED, per_genus: int = 25) -> list[str]:
    """Return ``n`` unique invented tip labels (``Genus_epithet``, about 1 in
    8 with a voucher suffix ``_V1234``), about ``per_genus`` per genus; the
    same seed gives the same labels."""
    rng = np.random.default_rng(seed)
    return invent_tip_labels(rng.integers(max(1, n // per_genus), size=n), rng)


@dataclass
class BenchmarkNames:
    """Tips, written names and the truth for the names benchmark.

    Attributes:
        tips: unique tip labels.
        written: written names, one per row of ``truth``.
        truth: written_name, true_tip ('' when the name has no tip), kind.
        synonyms: synonym, accepted_name (canonical ``Genus epithet``).
    """

    tips: list[str]
    written: list[str]
    truth: pd.DataFrame
    synonyms: pd.DataFrame


# Kinds of written names and their shares (see write_name; 'no_tip' is a
# species measured but absent from the tree, in a genus the tree has).
# The benchmark's mix, like the demo scenario's:
BENCHMARK_KINDS: tuple[tuple[str, float], ...] = (
    ("exact", 0.45),
    ("authority", 0.12),
    ("underscore", 0.08),
    ("tip_label", 0.04),
    ("case_spacing", 0.04),
    ("typo", 0.10),
    ("spelling_variant", 0.04),
    ("gender_variant", 0.04),
    ("synonym", 0.03),
    ("cf_qualifier", 0.02),
    ("sp_qualifier", 0.02),
    ("no_tip", 0.02),
)
# A harsher mix for the matcher's tests and its quality benchmark: typos in
# the genus, in both parts, and more species the tree lacks.
HARSH_KINDS: tuple[tuple[str, float], ...] = (
    ("underscore", 0.25),
    ("tip_label", 0.05),
    ("authority", 0.05),
    ("case_spacing", 0.10),
    ("diacritic", 0.05),
    ("gender_variant", 0.08),
    ("spelling_variant", 0.08),
    ("typo", 0.16),
    ("genus_typo", 0.08),
    ("double_typo", 0.04),
    ("no_tip", 0.06),
)


def generate_names(
    n: int,
    *,
    seed: int = BENCH_SEED,
    tips: int | None = None,
    kinds: Sequence[tuple[str, float]] = BENCHMARK_KINDS,
    per_genus: int = 25,
) -> BenchmarkNames:
    """Return ``tips`` tip labels (default ``n``; about ``per_genus`` per
    genus) and ``n`` written names drawn from them with the corruptions of
    :func:`write_name` in the shares ``kinds`` gives (default
    :data:`BENCHMARK_KINDS`; :data:`HARSH_KINDS` is harsher), and some names
    of species with no tip.

    One string, one truth: a corruption that happens to spell another
    species, or a name already written for another, is written plainly
    instead.

    Returns:
        A :class:`BenchmarkNames`; the same arguments give the same names.
    """
    rng = np.random.default_rng(seed)
    n_tips = n if tips is None else tips
    groups = rng.integers(max(1, n_tips // per_genus), size=n_tips + n)
    genus, epithet, gender, kind_of = invent_binomials(groups, rng)
    # The last n binomials are spare: species that are measured but have no tip.
    labels = label_binomials(genus[:n_tips], epithet[:n_tips], rng)
    names = np.asarray([k for k, _ in kinds], dtype=object)
    weights = np.array([w for _, w in kinds])
    drawn = names[rng.choice(len(names), size=n, p=weights / weights.sum())]
    source = rng.integers(n_tips, size=n)
    old_genera = [g for g, _ in OLD_GENERA]
    species = dict.fromkeys((genus + " " + epithet).tolist(), "")
    species.update(zip((genus[:n_tips] + " " + epithet[:n_tips]).tolist(), labels, strict=True))
    truth_of: dict[str, str] = {}
    written: list[str] = []
    true_tip: list[str] = []
    synonym_rows: dict[str, str] = {}  # the synonyms written, in order
    synonym_of: dict[str, str] = {}  # every synonym drawn, to its accepted name
    for i in range(n):
        kind = str(drawn[i])
        t = n_tips + i if kind == "no_tip" else int(source[i])
        g, e = str(genus[t]), str(epithet[t])
        tip = labels[t] if t < n_tips else ""
        synonym = None
        if kind == "synonym":
            synonym = f"{old_genera[i % len(old_genera)]} {e}"
            # One synonym, one accepted name: a second one is written plainly.
            if synonym_of.setdefault(synonym, f"{g} {e}") != f"{g} {e}":
                synonym = None
        text, used = write_name(
            "exact" if kind == "no_tip" else kind,
            g,
            e,
            rng,
            gender=str(gender[t]),
            epithet_class=str(kind_of[t]),
            authority=f"{AUTHORS[i % len(AUTHORS)]}, {1800 + i % 200}",
            tip_label=tip,
            synonym=synonym,
        )
        if used == "sp_qualifier":
            tip = ""
        elif species.get(text, tip) != tip or truth_of.get(text, tip) != tip:
            text, used = f"{g} {e}", "exact"
        if used == "synonym":
            synonym_rows.setdefault(text, f"{g} {e}")
        truth_of[text] = tip
        drawn[i] = "no_tip" if kind == "no_tip" else used
        written.append(text)
        true_tip.append(tip)
    truth = pd.DataFrame({"written_name": written, "true_tip": true_tip, "kind": drawn})
    synonyms = pd.DataFrame(
        {"synonym": list(synonym_rows), "accepted_name": list(synonym_rows.values())}
    )
    return BenchmarkNames(labels, written, truth, synonyms)
