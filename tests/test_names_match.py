"""The staged matcher: each stage, acceptance rules, conflicts, and the
fuzzy stage against independent edit distances and a brute-force
reference."""

from __future__ import annotations

import jellyfish
import Levenshtein
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from curation.demo.naming import HARSH_KINDS, generate_names
from curation.names.match import (
    MatchOptions,
    allowed_edits,
    edit_distance,
    fold_spelling,
    gender_variants,
    match_findings,
    match_names,
)


def _osa_reference(a: str, b: str) -> int:
    """Optimal string alignment distance by the textbook dynamic programme
    (Levenshtein with adjacent transpositions; Damerau 1964), slow and plain."""
    d = [[0] * (len(b) + 1) for _ in range(len(a) + 1)]
    for i in range(len(a) + 1):
        d[i][0] = i
    for j in range(len(b) + 1):
        d[0][j] = j
    for i in range(1, len(a) + 1):
        for j in range(1, len(b) + 1):
            cost = 0 if a[i - 1] == b[j - 1] else 1
            d[i][j] = min(d[i - 1][j] + 1, d[i][j - 1] + 1, d[i - 1][j - 1] + cost)
            if i > 1 and j > 1 and a[i - 1] == b[j - 2] and a[i - 2] == b[j - 1]:
                d[i][j] = min(d[i][j], d[i - 2][j - 2] + 1)
    return d[len(a)][len(b)]


def test_kitten_sitting() -> None:
    # The textbook example: distance 3 (common practice).
    assert edit_distance("kitten", "sitting") == 3
    assert Levenshtein.distance("kitten", "sitting") == 3


def test_a_transposition_is_one_edit() -> None:
    assert edit_distance("magnificus", "mangificus") == 1
    # jellyfish's Damerau-Levenshtein agrees; plain Levenshtein counts two.
    assert jellyfish.damerau_levenshtein_distance("magnificus", "mangificus") == 1
    assert Levenshtein.distance("magnificus", "mangificus") == 2


LETTERS = st.text(alphabet="abcdeilnorsu", max_size=12)


@settings(max_examples=50, deadline=None)
@given(LETTERS, LETTERS)
def test_edit_distance_agrees_with_independent_implementations(a: str, b: str) -> None:
    ours = edit_distance(a, b)
    assert ours == _osa_reference(a, b)
    # Unrestricted Damerau-Levenshtein (jellyfish) <= OSA <= Levenshtein
    # (levenshtein package): OSA is restricted Damerau, so it can only be
    # between the two.
    assert jellyfish.damerau_levenshtein_distance(a, b) <= ours <= Levenshtein.distance(a, b)
    # Without transpositions in play all three agree.
    if len(set(a)) == len(a) and len(set(b)) == len(b) and not (set(a) & set(b)):
        assert ours == Levenshtein.distance(a, b) == max(len(a), len(b))


@settings(max_examples=50, deadline=None)
@given(st.text(alphabet="abcdefgh", min_size=2, max_size=12), st.data())
def test_one_adjacent_swap_is_one_edit(word: str, data: st.DataObject) -> None:
    i = data.draw(st.integers(0, len(word) - 2))
    swapped = word[:i] + word[i + 1] + word[i] + word[i + 2 :]
    expected = jellyfish.damerau_levenshtein_distance(word, swapped)  # 0 or 1
    assert edit_distance(word, swapped) == expected


# Gender agreement of adjectival epithets: ICZN Art. 31.2 (a species-group
# name that is an adjective agrees in gender with the genus) and ICN Art.
# 23.5 (the same for botanical epithets). Forms are the Latin adjective
# declensions: -us/-a/-um, -is/-is/-e, -er/-ra/-rum (-er/-era/-erum).
@pytest.mark.parametrize(
    ("epithet", "variants"),
    [
        ("albus", {"alba", "album"}),
        ("alba", {"albus", "album"}),
        ("album", {"albus", "alba"}),
        ("brevis", {"breve"}),
        ("breve", {"brevis"}),
        ("ruber", {"rubra", "rubrum"}),
        ("rubra", {"ruber", "rubrum"}),
        ("niger", {"nigra", "nigrum"}),
        ("liber", {"libera", "liberum"}),
        ("superior", {"superius"}),
    ],
)
def test_gender_variants_follow_the_codes(epithet: str, variants: set[str]) -> None:
    assert variants <= gender_variants(epithet)
    assert epithet not in gender_variants(epithet)


def test_invariable_epithets_have_no_gender_variant() -> None:
    # Adjectives of one ending (simplex, ferox) and genitive nouns
    # (smithii) do not change with gender (ICZN Art. 31.1, 31.2.2).
    for epithet in ["simplex", "ferox", "smithii"]:
        assert gender_variants(epithet) == set()


def test_spelling_folds() -> None:
    folded = fold_spelling(pd.Series(["Phyllum", "aegyptiacus", "foetida", "kirkii", "sylva"]))
    assert list(folded) == ["filum", "egiptiacus", "fetida", "circi", "silva"]


def test_edit_limits_grow_with_length() -> None:
    assert list(allowed_edits(np.array([3, 4, 7, 8, 12, 30]))) == [0, 1, 1, 2, 3, 3]


TIPS = [
    "Aus_bus_V1",
    "Aus_alba",
    "Aus_ruber",
    "Cus_dus",
    "Cus_dus_2",
    "Efus_philippii",
    "Gorillus_magnificus",
    "Hus_lateralis",
    "Ius_jus",
    "Kus_maximus",
    "Kus_maximum",
    "Lorenzia_occidentalis",
    "Lorenzia_orientalis",
]


def _row(result: pd.DataFrame, name: str) -> pd.Series:
    return result.set_index("written_name").loc[name]


@pytest.mark.parametrize(
    ("written", "stage", "status", "tip"),
    [
        ("Aus_bus_V1", "exact", "accepted", "Aus_bus_V1"),
        ("Aus bus (L., 1758)", "canonical", "accepted", "Aus_bus_V1"),
        ("aus  BUS", "canonical", "accepted", "Aus_bus_V1"),
        ("Aus albus", "gender", "accepted", "Aus_alba"),
        ("Aus rubra", "gender", "accepted", "Aus_ruber"),
        ("Hus laterale", "gender", "accepted", "Hus_lateralis"),
        ("Efus filipi", "spelling", "accepted", "Efus_philippii"),
        # A genus spelt otherwise than the tip's waits (ICZN Art. 56.2: one
        # letter makes another genus name); see test_a_change_of_genus_*.
        ("Gorilus magnificus", "spelling", "pending", "Gorillus_magnificus"),
        ("Gorillus mangificus", "fuzzy", "accepted", "Gorillus_magnificus"),
        ("Gorrilus magnifcus", "fuzzy", "pending", "Gorillus_magnificus"),
        ("Lorenzia ocidentalls", "fuzzy", "accepted", "Lorenzia_occidentalis"),
        ("Ius jos", "fuzzy", "pending", "Ius_jus"),  # 3-letter epithet: no edit allowed
        ("Cus dus", "canonical", "pending", "Cus_dus"),  # two tips read as Cus dus
        ("Kus maximu", "fuzzy", "pending", "Kus_maximum"),  # runner-up too close
        ("Aus cf. bus", "canonical", "pending", "Aus_bus_V1"),
        ("Aus aff. bus", "canonical", "pending", "Aus_bus_V1"),
        ("Aus bus?", "canonical", "pending", "Aus_bus_V1"),
        ("Ius sp.", "genus", "pending", "Ius_jus"),
        ("Lorenzia zzzzzz", "genus", "pending", "Lorenzia_occidentalis"),
        ("Zzz qqq", "unmatched", "pending", None),
        ("", "unparseable", "pending", None),
        ("?!", "unparseable", "pending", None),
    ],
)
def test_stages(written: str, stage: str, status: str, tip: str | None) -> None:
    result = match_names([written], TIPS)
    row = _row(result, written)
    assert (row["stage"], row["status"], row["tip_label"]) == (stage, status, tip)
    assert 0 <= row["score"] <= 100
    if status == "pending":
        assert row["reason"]


def test_synonyms_both_directions() -> None:
    synonyms = pd.DataFrame(
        {"synonym": ["Oldus name", "Ius jus"], "accepted": ["Ius jus", "Newus jus"]}
    )
    result = match_names(["Oldus name", "Newus jus"], ["Ius_jus"], synonyms)
    # Written synonym -> tip with the accepted name; written accepted name ->
    # tip labelled with its synonym.
    assert _row(result, "Oldus name")[["stage", "tip_label"]].tolist() == ["synonym", "Ius_jus"]
    assert _row(result, "Newus jus")[["stage", "tip_label"]].tolist() == ["synonym", "Ius_jus"]


# Genus-group names that differ by one letter are distinct names, not
# homonyms (ICZN Art. 56.2; article recalled from memory): a written genus
# one edit from a tip's genus may name another genus. Distances checked with
# the Levenshtein package.
@pytest.mark.parametrize(
    ("written", "tip", "stage", "edits"),
    [
        ("Gorilus magnificus", "Gorillus_magnificus", "spelling", 1),  # a doubled letter
        ("Korvella ardens", "Corvella_ardens", "spelling", 1),  # K for C
        # rr for ll in the genus (two edits as written, none once doubled
        # letters are folded), and a letter dropped from the epithet.
        ("Gorrilus magnifcus", "Gorillus_magnificus", "fuzzy", 3),
        ("Lorenzya occidentalis", "Lorenzia_occidentalis", "spelling", 1),  # y for i
    ],
)
def test_a_change_of_genus_waits_unless_asked(
    written: str, tip: str, stage: str, edits: int
) -> None:
    tips = [*TIPS, "Corvella_ardens"]
    assert Levenshtein.distance(written.replace(" ", "_"), tip) == edits
    row = _row(match_names([written], tips), written)
    assert (row["stage"], row["status"], row["tip_label"]) == (stage, "pending", tip)
    assert row["reason"].startswith("genus differs from the tip's: ")
    assert row["reason"].endswith(f" written, {tip.split('_')[0]} in {tip}")
    assert row["candidates"][0] == [tip, row["score"]] and row["score"] >= 88
    loose = MatchOptions(accept_genus_changes=True)
    row = _row(match_names([written], tips, options=loose), written)
    assert (row["stage"], row["status"], row["tip_label"], row["reason"]) == (
        stage,
        "accepted",
        tip,
        "",
    )


def test_a_synonym_that_moves_the_genus_stays_automatic() -> None:
    # A synonym table records that a species was moved to another genus, a
    # new combination (whose author the codes then cite in parentheses:
    # ICZN Art. 51.3, ICN Art. 49.1; recalled from memory): a fact of the
    # table, not a spelling guess.
    synonyms = pd.DataFrame({"synonym": ["Oldus jus"], "accepted": ["Ius jus"]})
    row = _row(match_names(["Oldus jus"], TIPS, synonyms), "Oldus jus")
    assert (row["stage"], row["status"], row["tip_label"]) == ("synonym", "accepted", "Ius_jus")
    # Case and diacritics in the genus are normalised, not a change of genus.
    row = _row(match_names(["GORÏLLUS magnificus"], TIPS), "GORÏLLUS magnificus")
    assert (row["stage"], row["status"]) == ("canonical", "accepted")


def test_no_genus_change_is_accepted_by_default_on_a_corpus() -> None:
    corpus = generate_names(1500, tips=2000, seed=3, kinds=HARSH_KINDS, per_genus=10)
    tips, written = corpus.tips, pd.Series(corpus.written)
    strict = match_names(written, tips)
    loose = match_names(written, tips, options=MatchOptions(accept_genus_changes=True))
    genus = {t: t.split("_")[0] for t in tips}

    def changed(frame: pd.DataFrame) -> pd.Series:
        from curation.names.parse import parse_names

        written_genus = parse_names(frame["written_name"])["genus"].to_numpy()
        return pd.Series(
            [w != genus.get(t) for w, t in zip(written_genus, frame["tip_label"], strict=True)],
            index=frame.index,
        )

    accepted = strict[strict["status"] == "accepted"]
    moved = accepted[~accepted["stage"].isin(["exact", "canonical", "synonym"])]
    assert not changed(moved).any()
    # The option accepts the held genus changes and nothing else: the two
    # runs differ only on names whose first candidate has another genus.
    differ = strict["status"] != loose["status"]
    assert differ.sum() > 10
    assert (strict.loc[differ, "status"] == "pending").all()
    assert changed(strict[differ]).all()
    assert strict.loc[differ, "reason"].str.startswith("genus differs from the tip's").all()
    assert (strict["tip_label"].fillna("") == loose["tip_label"].fillna("")).all()


def test_runner_up_and_margin_recorded() -> None:
    result = match_names(["Kus maximu"], TIPS)
    row = _row(result, "Kus maximu")
    assert row["runner_up"] in {"Kus_maximus", "Kus_maximum"}
    assert row["margin"] == pytest.approx(row["score"] - row["runner_up_score"])
    assert len(row["candidates"]) == 2


def test_genus_only_never_accepted_even_with_generous_options() -> None:
    loose = MatchOptions(accept_score=0, ambiguity_margin=0)
    result = match_names(["Ius sp.", "Ius zzzzzzzz"], TIPS, options=loose)
    assert set(result["status"]) == {"pending"}


def test_thresholds_are_options() -> None:
    strict = MatchOptions(accept_score=99)
    row = _row(match_names(["Gorillus mangificus"], TIPS, options=strict), "Gorillus mangificus")
    assert (row["stage"], row["status"]) == ("fuzzy", "pending")


def test_conflict_findings() -> None:
    result = match_names(["Aus_bus_V1", "Aus bus", "Cus dus"], TIPS)
    codes = {(f.code, f.subject) for f in match_findings(result, TIPS)}
    assert ("names.shared_tip", "Aus_bus_V1") in codes
    assert ("names.several_tips", "Cus dus") in codes
    assert ("names.tip_collision", "Cus dus") in codes


@pytest.mark.parametrize(
    ("written", "tips"),
    [
        ([], ["Aus_bus"]),  # empty table
        (["Aus bus"], []),  # no tips
        (["Aus bsu"], ["Aus_bus"]),  # one tip
        (["Aus bsu", "Aus bux"], ["Aus_bus", "Aus_bux"]),  # two tips
    ],
)
def test_gallery_of_small_inputs(written: list[str], tips: list[str]) -> None:
    result = match_names(written, tips)
    assert list(result["written_name"]) == sorted(written)
    assert result["status"].isin(["accepted", "pending"]).all()


TIP_PARTS: dict[tuple[str, bool], tuple[str, str]] = {}


def _brute_force_fuzzy(written: str, tips: list[str], options: MatchOptions) -> list[tuple]:
    """Every tip scored against ``written`` in a plain double loop, with the
    matcher's documented rule: genus and epithet compared folded, each OSA
    distance within its limit plus the review allowance, score = 100 * (1 -
    edits / letters), kept from ``review_score``; the letters as written
    are scored too and each tip keeps its better score."""
    from curation.names.parse import parse_name

    def parts(name: str, fold: bool) -> tuple[str, str]:
        p = parse_name(name)
        g, e = (p.genus or "").lower(), (p.epithet or "").lower()
        if fold:
            g, e = fold_spelling(pd.Series([g, e]))
        return g, e

    def scores(fold: bool) -> dict[str, tuple[float, bool]]:
        wg, we = parts(written, fold)
        extra = options.review_extra_edits
        out = {}
        for tip in tips:
            if (tip, fold) not in TIP_PARTS:
                TIP_PARTS[(tip, fold)] = parts(tip, fold)
            tg, te = TIP_PARTS[(tip, fold)]
            if not tg or not te:
                continue
            dg, de = edit_distance(wg, tg), edit_distance(we, te)
            limit_g, limit_e = allowed_edits(len(wg), options), allowed_edits(len(we), options)
            if dg > limit_g + extra or de > limit_e + extra:
                continue
            score = 100 * (1 - (dg + de) / (max(len(wg), len(tg)) + max(len(we), len(te))))
            if score >= options.review_score:
                out[tip] = (round(score, 2), bool(dg <= limit_g and de <= limit_e))
        return out

    found = scores(True)
    for tip, value in scores(False).items():
        if tip not in found or value[0] > found[tip][0]:
            found[tip] = value
    return sorted(((t, s) for t, (s, _) in found.items()), key=lambda x: (-x[1], x[0]))


def test_fuzzy_blocking_finds_what_a_double_loop_finds() -> None:
    options = MatchOptions()
    corpus = generate_names(200, tips=400, seed=7, kinds=HARSH_KINDS, per_genus=10)
    tips = corpus.tips
    result = match_names(corpus.written, tips, options=options)
    fuzzy = result[result["stage"] == "fuzzy"]
    assert len(fuzzy) > 20
    for row in fuzzy.itertuples(index=False):
        expected = _brute_force_fuzzy(row.written_name, tips, options)
        got = [(t, s) for t, s in row.candidates]
        assert got == expected[: options.candidates], row.written_name


def test_hybrids_and_infraspecific_names_wait_for_review() -> None:
    tips = ["Aus_bus", "Aus_xcus", "Dus_eus_subsp._fus"]
    result = match_names(["Aus × bus", "Aus bus subsp. gus", "Dus eus ssp. fus"], tips)
    # A hybrid is not its parent species: the spelling stage may find Aus_bus
    # but must not accept it.
    hybrid = _row(result, "Aus × bus")
    assert hybrid["status"] == "pending" and hybrid["tip_label"] == "Aus_bus"
    infra = _row(result, "Aus bus subsp. gus")
    assert (infra["stage"], infra["status"], infra["tip_label"]) == (
        "canonical",
        "pending",
        "Aus_bus",
    )
    assert "infraspecific" in infra["reason"]
    assert _row(result, "Dus eus ssp. fus")["status"] == "accepted"


def test_tip_labels_that_are_not_names() -> None:
    tips = ["t1", "'quoted label'", "123", "Aus_bus"]
    result = match_names(["Aus bus", "t1", "quoted label"], tips)
    assert _row(result, "Aus bus")["tip_label"] == "Aus_bus"
    assert _row(result, "t1")["stage"] == "exact"
    # Quotes, case and underscores aside, the text is the same.
    quoted = _row(result, "quoted label")
    assert (quoted["stage"], quoted["tip_label"]) == ("canonical", "'quoted label'")
    assert match_names(["t2"], tips)["stage"].iloc[0] == "unparseable"


def test_folding_does_not_hide_the_closer_name_as_written() -> None:
    # "zyrvvuus" folds to "zirvus", one edit from "tirvus"; as written it is
    # one transposition from "zyrvuvus". The closer-as-written tip must not
    # lose to the folded neighbour.
    tips = ["Dolyaxis_zyrvuvus", "Dolyaxis_tirvus"]
    row = _row(match_names(["Dolyaxis zyrvvuus"], tips), "Dolyaxis zyrvvuus")
    assert row["tip_label"] == "Dolyaxis_zyrvuvus" or row["status"] == "pending"
    assert "Dolyaxis_zyrvuvus" in [c[0] for c in row["candidates"]]
