"""A seeded generator of invented tip labels and corrupted written names,
with the ground truth (each written name's true tip, or none), for the
name benchmarks. All names are invented syllable strings."""

from __future__ import annotations

import random

import pandas as pd

ONSETS = ["b", "c", "d", "f", "g", "l", "m", "n", "p", "r", "s", "t", "v", "th", "ph", "ch"]
VOWELS = ["a", "e", "i", "o", "u", "ae", "y"]
CODAS = ["", "", "", "n", "r", "s", "l", "x"]
GENUS_ENDINGS = ["us", "ia", "odon", "ella", "ops", "ium", "ina", "oides"]
EPITHET_ENDINGS = ["us", "a", "um", "is", "e", "er", "ii", "ensis", "atus", "icola", "oides"]
TYPO_LETTERS = "abcdefghilmnoprstuv"
SPELLING_SWAPS = [("ph", "f"), ("f", "ph"), ("ae", "e"), ("y", "i"), ("ii", "i"), ("c", "k")]
GENDER_SWAPS = [("us", "a"), ("a", "us"), ("um", "us"), ("is", "e"), ("e", "is"), ("er", "ra")]


def _word(rng: random.Random, syllables: int, endings: list[str]) -> str:
    parts = [rng.choice(ONSETS) + rng.choice(VOWELS) + rng.choice(CODAS) for _ in range(syllables)]
    return "".join(parts) + rng.choice(endings)


def _typo(rng: random.Random, word: str) -> str:
    """One edit: substitution, deletion, insertion or transposition."""
    if len(word) < 4:
        return word + rng.choice(TYPO_LETTERS)
    i = rng.randrange(1, len(word) - 1)
    kind = rng.randrange(4)
    if kind == 0:
        letter = rng.choice([c for c in TYPO_LETTERS if c != word[i]])
        return word[:i] + letter + word[i + 1 :]
    if kind == 1:
        return word[:i] + word[i + 1 :]
    if kind == 2:
        return word[:i] + rng.choice(TYPO_LETTERS) + word[i:]
    if word[i] == word[i + 1]:
        return word[:i] + word[i + 1 :]
    return word[:i] + word[i + 1] + word[i] + word[i + 2 :]


def make_tips(n_tips: int, seed: int = 1) -> list[str]:
    """Return ``n_tips`` distinct invented tip labels ``Genus_epithet``
    (about ten per genus), a few with a voucher suffix."""
    rng = random.Random(seed)
    genera: set[str] = set()
    while len(genera) < max(1, n_tips // 10):
        genera.add(_word(rng, rng.randint(1, 3), GENUS_ENDINGS).capitalize())
    genus_list = sorted(genera)
    seen: set[str] = set()
    tips: list[str] = []
    while len(tips) < n_tips:
        binomial = f"{rng.choice(genus_list)}_{_word(rng, rng.randint(1, 3), EPITHET_ENDINGS)}"
        if binomial in seen:
            continue
        seen.add(binomial)
        tips.append(binomial + (f"_V{rng.randint(100, 9999)}" if rng.random() < 0.05 else ""))
    return tips


def make_written(tips: list[str], n_names: int, seed: int = 2) -> pd.DataFrame:
    """Return ``n_names`` written names with columns ``written_name``,
    ``true_tip`` (None for names of species absent from the tree) and
    ``corruption``.

    Corruptions: none, formatting (underscores, case, spaces, authority,
    diacritics), a gender ending, a near-equivalent spelling, one typo in
    the epithet, one in the genus, both, or a species absent from the tree
    (an invented epithet in an existing genus: a trap for precision).
    """
    rng = random.Random(seed)
    rows = []
    kinds = ["none", "format", "gender", "spelling", "typo", "genus_typo", "both", "absent"]
    weights = [30, 20, 8, 8, 16, 8, 4, 6]
    binomials = {t.split("_")[0] + " " + t.split("_")[1]: t for t in tips}
    for _ in range(n_names):
        tip = rng.choice(tips)
        genus, epithet = tip.split("_")[:2]
        kind = rng.choices(kinds, weights)[0]
        true: str | None = tip
        if kind == "none":
            name = tip
        elif kind == "format":
            style = rng.randrange(5)
            if style == 0:
                name = f"{genus} {epithet}"
            elif style == 1:
                name = f"{genus.upper()} {epithet.upper()}"
            elif style == 2:
                name = f"  {genus}   {epithet} "
            elif style == 3:
                name = f"{genus} {epithet} ({rng.choice(['Smythe', 'Ortvall', 'Quen'])}, 1888)"
            else:
                name = f"{genus} {epithet.replace('e', 'ë', 1)}"
        elif kind == "gender":
            swaps = [(a, b) for a, b in GENDER_SWAPS if epithet.endswith(a)]
            if not swaps:
                name, kind = f"{genus} {epithet}", "format"
            else:
                a, b = rng.choice(swaps)
                name = f"{genus} {epithet[: -len(a)]}{b}"
        elif kind == "spelling":
            swaps = [(a, b) for a, b in SPELLING_SWAPS if a in epithet[1:]]
            if not swaps:
                name, kind = f"{genus} {epithet}", "format"
            else:
                a, b = rng.choice(swaps)
                name = f"{genus} {epithet[0]}{epithet[1:].replace(a, b, 1)}"
        elif kind == "typo":
            name = f"{genus} {_typo(rng, epithet)}"
        elif kind == "genus_typo":
            name = f"{_typo(rng, genus)} {epithet}"
        elif kind == "both":
            name = f"{_typo(rng, genus)} {_typo(rng, epithet)}"
        else:
            while True:
                invented = _word(rng, rng.randint(2, 3), EPITHET_ENDINGS)
                if f"{genus} {invented}" not in binomials:
                    break
            name, true = f"{genus} {invented}", None
        other = binomials.get(name.replace("_", " "))
        if kind != "absent" and other is not None and other != tip:
            # The corruption produced another tip's name: it is that tip now.
            true = other
        rows.append({"written_name": name, "true_tip": true, "corruption": kind})
    return pd.DataFrame(rows)
