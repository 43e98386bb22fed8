"""Invented names for the demo scenario: genera, epithets, authorities,
collections and the ways people get names wrong.

Every name is built from syllables, so none is a real taxon, person or
institution. Epithets carry a Latin-like gender ending that agrees with
their genus (ICZN Art. 31.2, ICN Art. 23.5), so that gender variants are
meaningful corruptions.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "AUTHORS",
    "agree",
    "COLLECTORS",
    "GENERA",
    "INSTITUTIONS",
    "OLD_GENERA",
    "invent_epithet",
    "invent_epithets",
    "invent_genus",
    "gender_variant",
    "misspell",
    "spelling_variant",
]

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
