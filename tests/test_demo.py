"""The demo scenario generator, its ground truth and the demo pipeline.

The generator's files are read back with tools outside the project:
DendroPy for the NEXUS trees, pandas for the tables, the standard XML
parser for the Darwin Core meta.xml, jellyfish for edit distances.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path

import dendropy
import jellyfish
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from curation.demo import generate_scenario, naming
from curation.demo.benchmark_data import generate_measurements
from curation.demo.generator import DEFAULT_SEED, scenario_files
from curation.demo.naming import HARSH_KINDS, generate_names, generate_tip_labels
from curation.demo.phylogeny import (
    children_lists,
    generate_tree,
    generate_tree_set,
    perturbed_copy,
    random_tree,
    simulate_pure_birth,
    time_tree_arrays,
)
from curation.errors import InputError
from curation.trees.arrays import to_newick

REPO = Path(__file__).resolve().parents[1]
VOUCHER = re.compile(r"_(V\d{4}|2)$")
SAMPLES = REPO / "samples"


# Tips and posterior trees of each scenario the tests read, by seed.
SIZES = {DEFAULT_SEED: (200, 50), 5: (45, 8)}


@pytest.fixture(scope="module")
def default_scenario(tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    """The default scenario (the committed samples), generated afresh."""
    return generate_scenario(tmp_path_factory.mktemp("scenario"))


@pytest.fixture(scope="module", params=["default", "small"])
def scenario(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    """The default scenario and a small one of another seed: what the truth
    promises must hold for any seed."""
    if request.param == "default":
        return request.getfixturevalue("default_scenario")
    tips, trees = SIZES[5]
    return generate_scenario(
        tmp_path_factory.mktemp("small"), seed=5, tips=tips, posterior_trees=trees
    )


def read_tree(path: Path) -> dendropy.Tree:
    # preserve_underscores: DendroPy would otherwise turn the unquoted
    # underscores of NEXUS labels into blanks (NEXUS convention).
    return dendropy.Tree.get(path=str(path), schema="nexus", preserve_underscores=True)


def read_posterior(path: Path) -> dendropy.TreeList:
    return dendropy.TreeList.get(
        path=str(path), schema="nexus", preserve_underscores=True, extract_comment_metadata=True
    )


def tip_labels(tree: dendropy.Tree) -> set[str]:
    return {leaf.taxon.label for leaf in tree.leaf_node_iter()}


def rounding_tolerance(tree: dendropy.Tree, decimals: int) -> float:
    # Each written length is off by at most half a unit in its last place,
    # so a root-to-tip path of k branches by at most k times that.
    deepest = max(len(list(leaf.ancestor_iter())) for leaf in tree.leaf_node_iter())
    return deepest * 0.5 * 10.0**-decimals + 1e-9


# ---------------------------------------------------------------- the files


def test_writes_every_file(scenario) -> None:  # type: ignore[no-untyped-def]
    for path in scenario.all_files():
        assert path.is_file() and path.stat().st_size > 0, path


def test_same_seed_gives_byte_identical_files(scenario, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    tips, trees = SIZES[scenario.seed]
    again = generate_scenario(
        tmp_path / "again", seed=scenario.seed, tips=tips, posterior_trees=trees
    )
    for first, second in zip(scenario.all_files(), again.all_files(), strict=True):
        assert first.read_bytes() == second.read_bytes(), first.name


def test_committed_samples_are_what_the_default_seed_writes(default_scenario) -> None:  # type: ignore[no-untyped-def]
    committed = scenario_files(SAMPLES, seed=DEFAULT_SEED)
    for fresh, stored in zip(default_scenario.all_files(), committed.all_files(), strict=True):
        assert stored.read_bytes() == fresh.read_bytes(), (
            f"samples/{stored.relative_to(SAMPLES)} is stale: run "
            "tipledger generate-scenario --folder samples"
        )


def test_another_seed_gives_another_scenario(default_scenario, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    other = generate_scenario(tmp_path / "other", seed=7, tips=60, posterior_trees=8)
    assert other.tree.read_bytes() != default_scenario.tree.read_bytes()
    assert len(tip_labels(read_tree(other.tree))) == 60
    assert len(read_posterior(other.posterior)) == 8


def test_too_small_a_scenario_is_refused(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="--tips 30"):
        generate_scenario(tmp_path, tips=5)
    with pytest.raises(InputError, match="--posterior-trees"):
        generate_scenario(tmp_path, posterior_trees=2)
    assert not any(tmp_path.iterdir())


# ---------------------------------------------------------------- the trees


def test_dated_tree_reads_in_dendropy_and_is_ultrametric_to_rounding(scenario) -> None:  # type: ignore[no-untyped-def]
    truth = json.loads(scenario.truth_trees.read_text(encoding="utf-8"))
    tree = read_tree(scenario.tree)
    labels = tip_labels(tree)
    assert len(labels) == truth["tips"] == SIZES[scenario.seed][0]
    assert all(" " not in label for label in labels)
    assert tree.is_rooted
    tolerance = rounding_tolerance(tree, truth["decimals"])
    # DendroPy's node-age calculation is the reference for ultrametricity.
    tree.calc_node_ages(ultrametricity_precision=tolerance)
    assert tree.seed_node.age == pytest.approx(truth["root_age"], abs=tolerance)
    # ... and the deviation is really there, at rounding level only.
    depths = [leaf.distance_from_root() for leaf in tree.leaf_node_iter()]
    spread = max(depths) - min(depths)
    assert 0 < spread <= tolerance
    assert spread == pytest.approx(truth["max_root_to_tip_spread"], abs=1e-9)
    with pytest.raises(dendropy.utility.error.UltrametricityError):
        tree.calc_node_ages(ultrametricity_precision=1e-12)


def test_planted_tree_defects_are_where_the_truth_says(scenario) -> None:  # type: ignore[no-untyped-def]
    truth = json.loads(scenario.truth_trees.read_text(encoding="utf-8"))
    tree = read_tree(scenario.tree)
    labels = tip_labels(tree)
    assert len(truth["polytomies"]) == 3
    for polytomy in truth["polytomies"]:
        node = tree.mrca(taxon_labels=polytomy["tips"])
        assert len(node.child_nodes()) == polytomy["children"] > 2
    # Every other node is a dichotomy: the truth lists all polytomies.
    wide = [n for n in tree.internal_nodes() if len(n.child_nodes()) > 2]
    assert len(wide) == len(truth["polytomies"])
    for branch in truth["zero_length_internal"]:
        node = tree.mrca(taxon_labels=branch["tips"])
        assert node.edge.length == 0.0 and not node.is_leaf()
    zero_internal = [n for n in tree.internal_nodes() if n.edge.length == 0.0]
    assert len(zero_internal) == len(truth["zero_length_internal"]) == 2
    assert min(n.edge.length for n in tree.preorder_node_iter() if n.parent_node) >= 0
    zero_tips = sorted(n.taxon.label for n in tree.leaf_node_iter() if n.edge.length == 0.0)
    assert zero_tips == truth["zero_length_terminal"] and len(zero_tips) == 2
    assert truth["voucher_labels"] and set(truth["voucher_labels"]) <= labels
    # NEXUS punctuation includes the hyphen, so that label is written quoted.
    (quoted,) = truth["quoted_labels"]
    assert quoted.endswith("_novae-tarvoniae")
    assert f"'{quoted}'" in scenario.tree.read_text(encoding="utf-8")
    assert set(truth["quoted_labels"]) <= labels


def test_posterior_set_reads_with_its_comments_apart_from_labels(scenario) -> None:  # type: ignore[no-untyped-def]
    truth = json.loads(scenario.truth_trees.read_text(encoding="utf-8"))["posterior"]
    trees = read_posterior(scenario.posterior)
    assert len(trees) == truth["trees"] == SIZES[scenario.seed][1]
    reference = tip_labels(read_tree(scenario.tree))
    lnp = []
    for tree in trees:
        assert tip_labels(tree) == reference
        assert all("[" not in label and "&" not in label for label in tip_labels(tree))
        lnp.append(float(tree.annotations.get_value("lnP")))
        rates = [
            n.annotations.get_value("rate") for n in tree.preorder_node_iter() if n.parent_node
        ]
        assert all(float(rate) > 0 for rate in rates)
        tree.calc_node_ages(ultrametricity_precision=rounding_tolerance(tree, truth["decimals"]))
        # No sample has a negative branch (a child older than its parent).
        assert min(n.edge.length for n in tree.preorder_node_iter() if n.parent_node) >= 0
    burn_in = truth["burn_in"]
    # The burn-in is worth skipping: every early sample is far below the plateau.
    assert max(lnp[:burn_in]) < min(lnp[burn_in:]) - 100
    assert [t.label for t in trees] == truth["tree_names"]
    for index, tree in enumerate(trees):
        wide = any(len(n.child_nodes()) > 2 for n in tree.internal_nodes())
        assert wide == (index in truth["polytomy_trees"]), index
        zero = any(n.edge.length == 0.0 for n in tree.internal_nodes() if n.parent_node)
        assert zero == (index in truth["zero_length_internal_trees"]), index


# ---------------------------------------------------------------- the sources


def read_wide(files) -> pd.DataFrame:  # type: ignore[no-untyped-def]
    return pd.read_csv(files.traits_wide, dtype=str, keep_default_na=False)


def read_long(files) -> pd.DataFrame:  # type: ignore[no-untyped-def]
    return pd.read_csv(
        files.traits_long, sep="\t", dtype=str, keep_default_na=False, encoding="cp1252"
    )


def read_archive(files) -> tuple[pd.DataFrame, pd.DataFrame, str]:  # type: ignore[no-untyped-def]
    with zipfile.ZipFile(files.darwin_core) as archive:
        meta = archive.read("meta.xml").decode("utf-8")
        frames = [
            pd.read_csv(archive.open(name), sep="\t", dtype=str, keep_default_na=False)
            for name in ("occurrence.txt", "measurementorfact.txt")
        ]
    return frames[0], frames[1], meta


def test_long_source_needs_its_encoding_and_decimal_comma(scenario) -> None:  # type: ignore[no-untyped-def]
    raw = scenario.traits_long.read_bytes()
    with pytest.raises(UnicodeDecodeError):
        raw.decode("utf-8")
    frame = read_long(scenario)
    numbers = frame["value"][frame["value"].str.fullmatch(r"\d+,\d+")]
    assert len(numbers) > 0.9 * len(frame)
    assert set(frame["unit"]) == {"cm", "mm", "kg"}
    wide = read_wide(scenario)
    assert wide["taxon"].str.contains(r", \d{4}\)?$").any()  # authorities with years


def test_darwin_core_meta_uses_the_tdwg_terms(scenario) -> None:  # type: ignore[no-untyped-def]
    occurrences, facts, meta = read_archive(scenario)
    # Darwin Core text guide (TDWG, https://dwc.tdwg.org/text/) and its
    # schema tdwg_dwc_text.xsd: root <archive> in the namespace
    # http://rs.tdwg.org/dwc/text/, one <core> with <id>, extensions with
    # <coreid>, each <field> naming its term by URI; row types and terms
    # are in the namespace http://rs.tdwg.org/dwc/terms/ (Darwin Core list
    # of terms, https://dwc.tdwg.org/terms/).
    ns = {"a": "http://rs.tdwg.org/dwc/text/"}
    root = ET.fromstring(meta)
    assert root.tag == "{http://rs.tdwg.org/dwc/text/}archive"
    core = root.find("a:core", ns)
    extension = root.find("a:extension", ns)
    assert core is not None and extension is not None
    assert core.get("rowType") == "http://rs.tdwg.org/dwc/terms/Occurrence"
    assert extension.get("rowType") == "http://rs.tdwg.org/dwc/terms/MeasurementOrFact"
    assert core.find("a:id", ns) is not None and extension.find("a:coreid", ns) is not None
    published = {
        "occurrenceID",
        "institutionCode",
        "catalogNumber",
        "scientificName",
        "sex",
        "lifeStage",
        "recordedBy",
        "basisOfRecord",
        "measurementID",
        "measurementType",
        "measurementValue",
        "measurementUnit",
    }
    for table, frame in ((core, occurrences), (extension, facts)):
        assert table.get("fieldsTerminatedBy") == "\\t"
        assert table.get("ignoreHeaderLines") == "1"
        location = table.find("a:files/a:location", ns)
        assert location is not None and location.text
        for field in table.findall("a:field", ns):
            term = field.get("term", "")
            assert term.startswith("http://rs.tdwg.org/dwc/terms/")
            local = term.rsplit("/", 1)[1]
            assert local in published
            # The header of each data file repeats the term it holds.
            assert frame.columns[int(field.get("index", -1))] == local
    # Every measurement belongs to an occurrence of the core.
    assert set(facts["id"]) <= set(occurrences["occurrenceID"])


def test_checklist_is_a_darwin_core_taxon_core_of_the_same_synonyms(scenario) -> None:  # type: ignore[no-untyped-def]
    with zipfile.ZipFile(scenario.checklist) as archive:
        root = ET.fromstring(archive.read("meta.xml"))
        taxa = pd.read_csv(archive.open("taxon.txt"), sep="\t", dtype=str, keep_default_na=False)
    ns = {"a": "http://rs.tdwg.org/dwc/text/"}
    core = root.find("a:core", ns)
    assert core is not None and core.find("a:id", ns) is not None
    # Darwin Core list of terms (TDWG, https://dwc.tdwg.org/terms/): the Taxon
    # class and its terms taxonID, scientificName, scientificNameAuthorship,
    # genus, specificEpithet, taxonRank, taxonomicStatus, acceptedNameUsageID.
    assert core.get("rowType") == "http://rs.tdwg.org/dwc/terms/Taxon"
    terms = [f.get("term", "").rsplit("/", 1)[1] for f in core.findall("a:field", ns)]
    assert (
        terms
        == list(taxa.columns)
        == [
            "taxonID",
            "scientificName",
            "scientificNameAuthorship",
            "genus",
            "specificEpithet",
            "taxonRank",
            "taxonomicStatus",
            "acceptedNameUsageID",
        ]
    )
    accepted = taxa[taxa["taxonomicStatus"] == "accepted"]
    synonyms = taxa[taxa["taxonomicStatus"] != "accepted"]
    assert taxa["taxonID"].is_unique
    assert set(synonyms["acceptedNameUsageID"]) <= set(accepted["taxonID"])
    assert set(synonyms["taxonomicStatus"]) <= {"homotypicSynonym", "heterotypicSynonym"}
    names = dict(zip(accepted["taxonID"], accepted["scientificName"], strict=True))
    pairs = {
        (s, names[a])
        for s, a in zip(synonyms["scientificName"], synonyms["acceptedNameUsageID"], strict=True)
    }
    table = pd.read_csv(scenario.synonyms, dtype=str)
    bare = table["synonym"].str.split(" ").str[:2].str.join(" ")
    assert pairs == set(zip(bare, table["accepted_name"], strict=True))
    tips = tip_labels(read_tree(scenario.tree))
    # Every tip, without its voucher suffix, is an accepted species.
    written = {n.replace(" ", "_") for n in accepted["scientificName"]}
    assert {VOUCHER.sub("", t) for t in tips} <= written


def test_every_written_name_has_a_truth_and_true_tips_exist(scenario) -> None:  # type: ignore[no-untyped-def]
    names = pd.read_csv(scenario.truth_names, dtype=str, keep_default_na=False)
    tips = tip_labels(read_tree(scenario.tree))
    occurrences, _, _ = read_archive(scenario)
    written = (
        set(read_wide(scenario)["taxon"])
        | set(read_long(scenario)["species"])
        | set(occurrences["scientificName"])
    )
    assert written == set(names["written_name"])
    assert names["written_name"].is_unique
    with_tip = names[names["true_tip"] != ""]
    assert set(with_tip["true_tip"]) <= tips
    assert set(names.loc[names["true_tip"] == "", "kind"]) == {"no_tip", "sp_qualifier"}
    # Corruptions stay close to their true name: a typo is one edit
    # (Damerau-Levenshtein distance by jellyfish, an independent implementation).
    for row in names[names["kind"] == "typo"].itertuples():
        assert jellyfish.damerau_levenshtein_distance(row.written_name, row.accepted_name) == 1
    # Synonyms written in the sources are in the synonym table.
    synonyms = pd.read_csv(scenario.synonyms, dtype=str)
    # Written without the authority that the table may carry.
    bare = synonyms["synonym"].str.split(" ").str[:2].str.join(" ")
    table = dict(zip(bare, synonyms["accepted_name"], strict=True))
    for row in names[names["kind"] == "synonym"].itertuples():
        assert table[row.written_name] == row.accepted_name


def test_planted_faults_point_at_the_rows_that_hold_them(scenario) -> None:  # type: ignore[no-untyped-def]
    faults = pd.read_csv(scenario.truth_faults, dtype=str, keep_default_na=False)
    wide, long = read_wide(scenario), read_long(scenario)
    occurrences, facts, _ = read_archive(scenario)
    headings = {
        "body_length": "body_length_mm",
        "tail_length": "tail_length_mm",
        "head_width": "head_width_mm",
        "body_mass": "body_mass_g",
        "activity": "activity",
    }
    by_occurrence = occurrences.set_index("occurrenceID")
    for fault in faults.itertuples():
        row = int(fault.row) - 1
        if fault.file == scenario.traits_wide.name:
            record = wide.iloc[row]
            assert record["taxon"] == fault.written_name
            assert record[headings[fault.trait]] == fault.value_written
            specimen = (record["institution"], record["catalog_number"])
        elif fault.file == scenario.traits_long.name:
            record = long.iloc[row]
            assert (record["species"], record["trait"]) == (fault.written_name, fault.trait)
            assert (record["value"], record["unit"]) == (fault.value_written, fault.unit_written)
            specimen = (record["museum"], record["catalogue_no"])
        else:
            assert fault.file == scenario.darwin_core.name
            record = facts.iloc[row]
            assert (record["measurementType"], record["measurementValue"]) == (
                fault.trait,
                fault.value_written,
            )
            assert record["measurementUnit"] == fault.unit_written
            occurrence = by_occurrence.loc[record["id"]]
            specimen = (occurrence["institutionCode"], occurrence["catalogNumber"])
        assert specimen == (fault.institution, fault.catalog_number)
    # A duplicate is a specimen (institution + catalogue number) that the
    # wide source holds too.
    held = set(zip(wide["institution"], wide["catalog_number"], strict=True))
    for fault in faults[faults["kind"] == "duplicate"].itertuples():
        assert (fault.institution, fault.catalog_number) in held
    # An exact duplicate repeats the row before it.
    for fault in faults[faults["kind"] == "exact_duplicate"].itertuples():
        row = int(fault.row) - 1
        assert long.iloc[row].tolist() == long.iloc[row - 1].tolist()


def test_default_scenario_plants_every_kind(default_scenario) -> None:  # type: ignore[no-untyped-def]
    names = pd.read_csv(default_scenario.truth_names, dtype=str, keep_default_na=False)
    faults = pd.read_csv(default_scenario.truth_faults, dtype=str, keep_default_na=False)
    kinds = set(names["kind"])
    for kind in (
        "authority",
        "underscore",
        "tip_label",
        "typo",
        "synonym",
        "gender_variant",
        "cf_qualifier",
        "sp_qualifier",
        "no_tip",
        "spelling_variant",
    ):
        assert kind in kinds, kind
    kinds = faults["kind"].value_counts()
    for kind in (
        "unit_slip",
        "duplicate",
        "exact_duplicate",
        "outlier",
        "impossible",
        "unparsed",
        "missing",
        "unknown_unit",
        "incompatible_unit",
        "state_conflict",
        "source_conflict",
    ):
        assert kinds.get(kind, 0) >= 1, kind


def test_unit_slips_are_off_by_the_factor_the_truth_names(scenario) -> None:  # type: ignore[no-untyped-def]
    faults = pd.read_csv(scenario.truth_faults, dtype=str, keep_default_na=False)
    species = pd.read_csv(scenario.truth_species, dtype=str, keep_default_na=False)
    names = pd.read_csv(scenario.truth_names, dtype=str, keep_default_na=False)
    accepted = dict(zip(names["written_name"], names["accepted_name"], strict=True))
    true = {(r.accepted_name, r.trait): float(r.value) for r in species.itertuples() if r.unit}
    # Exact factors: 1 cm = 10 mm, 1 kg = 1000 g, 1 in = 25.4 mm (NIST SP 811).
    to_target = {"mm": 1.0, "cm": 10.0, "g": 1.0, "kg": 1000.0}
    for fault in faults[faults["kind"] == "unit_slip"].itertuples():
        factor = float(fault.detail.rsplit("factor ", 1)[1].rstrip(")"))
        written = float(fault.value_written.replace(",", "."))
        as_read = written * to_target[fault.unit_written]
        ratio = as_read / true[(accepted[fault.written_name], fault.trait)]
        # Off by the factor, give or take the within-species spread.
        assert min(abs(np.log(ratio) - np.log(f)) for f in (factor, 1 / factor)) < 0.5


def test_trait_definitions_read_as_toml(scenario) -> None:  # type: ignore[no-untyped-def]
    import tomllib

    definitions = tomllib.loads(scenario.trait_definitions.read_text(encoding="utf-8"))["trait"]
    by_name = {d["name"]: d for d in definitions}
    assert {"body_length", "tail_length", "head_width", "body_mass", "activity"} == set(by_name)
    assert by_name["body_mass"]["unit"] == "g" and by_name["body_mass"]["scale"] == "log10"
    activity = by_name["activity"]
    assert set(activity["state_map"].values()) <= set(activity["states"])
    wide = read_wide(scenario)
    written_states = set(wide["activity"]) - {""}
    assert written_states <= set(activity["states"]) | set(activity["state_map"])


# ---------------------------------------------------------------- names


def test_gender_variants_follow_the_agreement_rules() -> None:
    # ICZN Art. 31.2 / ICN Art. 23.5: an adjectival epithet agrees in gender
    # with its genus (-us m., -a f., -um n.; third declension -is m./f., -e n.).
    assert naming.agree("brevus", "adj1", "m", "f") == "breva"
    assert naming.agree("breva", "adj1", "f", "n") == "brevum"
    assert naming.agree("tenuis", "adj3", "f", "n") == "tenue"
    assert naming.agree("marviki", "genitive", "m", "f") == "marviki"  # a genitive never changes
    assert naming.gender_variant("brevus", "adj1", "m") == "breva"
    assert naming.gender_variant("tenue", "adj3", "n") == "tenuis"
    assert naming.gender_variant("marviki", "genitive", "m") is None


@settings(max_examples=50, deadline=None)
@given(
    word=st.text(alphabet="abcdefghilmnoprstuvy", min_size=4, max_size=14),
    seed=st.integers(0, 10**6),
)
def test_a_misspelling_is_one_edit_away(word: str, seed: int) -> None:
    typo = naming.misspell(word, np.random.default_rng(seed))
    # Damerau-Levenshtein (transpositions count as one edit), by jellyfish.
    assert jellyfish.damerau_levenshtein_distance(word, typo) <= 1
    assert typo[0] == word[0]


# ---------------------------------------------------------------- benchmark data


def test_benchmark_names_are_unique_and_their_truth_holds() -> None:
    names = generate_names(3000, seed=3)
    assert len(names.tips) == len(set(names.tips)) == 3000
    assert len(names.written) == len(names.truth) == 3000
    tips = set(names.tips)
    true = names.truth[names.truth["true_tip"] != ""]
    assert set(true["true_tip"]) <= tips
    assert set(names.truth.loc[names.truth["true_tip"] == "", "kind"]) <= {"no_tip", "sp_qualifier"}
    assert names.synonyms["synonym"].is_unique
    assert generate_names(3000, seed=3).written == names.written
    assert generate_tip_labels(500, seed=1) == generate_tip_labels(500, seed=1)


def test_benchmark_tree_is_ultrametric_in_dendropy() -> None:
    text = generate_tree(2000, seed=5)
    tree = dendropy.Tree.get(data=text, schema="newick", preserve_underscores=True)
    assert len(tip_labels(tree)) == 2000
    assert all(len(n.child_nodes()) == 2 for n in tree.internal_nodes())
    tree.calc_node_ages(ultrametricity_precision=rounding_tolerance(tree, 6))
    assert tree.seed_node.age == pytest.approx(100.0, abs=1e-3)


def test_benchmark_tree_set_shares_its_tips_and_stays_ultrametric() -> None:
    trees = dendropy.TreeList.get(
        data=generate_tree_set(12, 80, seed=4),
        schema="nexus",
        preserve_underscores=True,
        extract_comment_metadata=True,
    )
    assert len(trees) == 12
    first = tip_labels(trees[0])
    for tree in trees:
        assert tip_labels(tree) == first and len(first) == 80
        assert float(tree.annotations.get_value("lnP")) < 0
        tree.calc_node_ages(ultrametricity_precision=rounding_tolerance(tree, 5))
        assert min(n.edge.length for n in tree.preorder_node_iter() if n.parent_node) >= 0


def test_harsh_benchmark_names_keep_one_truth_per_string() -> None:
    names = generate_names(4000, tips=3000, seed=8, kinds=HARSH_KINDS, per_genus=10)
    truth = names.truth
    assert len(names.tips) == len(set(names.tips)) == 3000
    # One string, one truth: a written name never stands for two tips.
    assert (truth.groupby("written_name")["true_tip"].nunique() == 1).all()
    assert set(truth.loc[truth["true_tip"] != "", "true_tip"]) <= set(names.tips)
    assert set(truth.loc[truth["true_tip"] == "", "kind"]) == {"no_tip"}
    kinds = set(truth["kind"])
    assert {"genus_typo", "double_typo", "diacritic", "typo", "gender_variant"} <= kinds
    for row in truth[truth["kind"] == "genus_typo"].itertuples(index=False):
        genus, epithet = row.true_tip.split("_")[:2]
        written_genus, written_epithet = row.written_name.split(" ")
        # Damerau-Levenshtein by jellyfish: one edit in the genus alone.
        assert jellyfish.damerau_levenshtein_distance(genus, written_genus) == 1
        assert written_epithet == epithet
    for row in truth[truth["kind"] == "double_typo"].itertuples(index=False):
        genus, epithet = row.true_tip.split("_")[:2]
        written_genus, written_epithet = row.written_name.split(" ")
        assert jellyfish.damerau_levenshtein_distance(genus, written_genus) == 1
        assert jellyfish.damerau_levenshtein_distance(epithet, written_epithet) == 1


def test_trees_writer_fixed_decimals_and_comments_read_back_in_dendropy() -> None:
    tree = time_tree_arrays(
        simulate_pure_birth(30, np.random.default_rng(2), root_age=10.0),
        comments={3: "[&rate=0.0125]"},
    )
    text = to_newick(tree, decimals=3, comments=True)
    read = dendropy.Tree.get(
        data=text, schema="newick", preserve_underscores=True, extract_comment_metadata=True
    )
    lengths = [n.edge.length for n in read.preorder_node_iter() if n.parent_node]
    expected = [float(f"{x:.3f}") for x in tree.edge_length[1:]]  # Python's own rounding
    assert lengths == expected
    assert re.search(r":\d+\.\d{3}[,)]", text) and not re.search(r":\d+\.\d{4}", text)
    rates = [n.annotations.get_value("rate") for n in read.preorder_node_iter()]
    assert [r for r in rates if r is not None] == ["0.0125"]
    # Comments stay out unless asked for; both number forms at once are refused.
    assert "[&rate" not in to_newick(tree, decimals=3)
    with pytest.raises(InputError, match="not both"):
        to_newick(tree, precision=4, decimals=3)


@pytest.mark.parametrize("model", ["coalescent", "pure_birth"])
def test_random_trees_of_either_model_read_in_dendropy(model: str) -> None:
    arrays = random_tree(300, np.random.default_rng(4), model=model)  # type: ignore[arg-type]
    tree = dendropy.Tree.get(data=to_newick(arrays), schema="newick", preserve_underscores=True)
    assert len(tip_labels(tree)) == 300
    assert all(len(n.child_nodes()) == 2 for n in tree.internal_nodes())
    tree.calc_node_ages(ultrametricity_precision=1e-9)  # raises if not ultrametric
    rough = random_tree(300, np.random.default_rng(4), model=model, collapse=0.2, zero_tips=0.1)  # type: ignore[arg-type]
    read = dendropy.Tree.get(data=to_newick(rough), schema="newick", preserve_underscores=True)
    assert any(len(n.child_nodes()) > 2 for n in read.internal_nodes())
    assert any(leaf.edge.length == 0 for leaf in read.leaf_node_iter())
    with pytest.raises(InputError, match="model"):
        random_tree(10, np.random.default_rng(1), model="birth_death")  # type: ignore[arg-type]


def test_a_tree_numbered_children_first_keeps_its_shape() -> None:
    # Interchanges leave parents numbered after their children; the array
    # view must still hold the same tree (DendroPy's symmetric difference
    # and its patristic distances agree).
    base = simulate_pure_birth(40, np.random.default_rng(6), root_age=5.0)
    for number, node in enumerate(base.tips().tolist()):
        base.labels[node] = f"t{number}"
    moved = perturbed_copy(base, np.random.default_rng(7), 30, 0.0)
    assert (moved.parent[1:] > np.arange(1, len(moved.parent))).any()
    taxa = dendropy.TaxonNamespace()

    def read(text: str) -> dendropy.Tree:
        return dendropy.Tree.get(
            data=text, schema="newick", preserve_underscores=True, taxon_namespace=taxa
        )

    ours = read(to_newick(time_tree_arrays(moved)))
    # The same tree written by hand from the heights, node by node.
    children = children_lists(moved)

    def written(node: int) -> str:
        up = moved.parent[node]
        length = "" if up < 0 else f":{float(moved.height[up] - moved.height[node])!r}"
        if not children[node]:
            return moved.labels[node] + length
        return "(" + ",".join(written(c) for c in children[node]) + ")" + length

    reference = read("[&R] " + written(0) + ";")
    assert dendropy.calculate.treecompare.symmetric_difference(ours, reference) == 0
    assert ours.as_string(schema="newick") == reference.as_string(schema="newick")


def test_benchmark_measurements_have_the_asked_shape_and_planted_faults() -> None:
    frame = generate_measurements(500, 6, 20_000, seed=11)
    assert len(frame) == 20_000
    assert frame["trait"].nunique() == 6 and frame["tip_label"].nunique() <= 500
    assert frame["row_number"].is_unique
    planted = frame["planted"].astype(str)
    assert {"unit_slip", "outlier", "missing"} <= set(planted)
    missing = frame[planted == "missing"]
    assert missing["value_number"].isna().all() and (missing["status"] == "missing").all()
    # 1 cm = 10 mm, 1 kg = 1000 g: source 2 writes in the larger units.
    assert set(frame.loc[frame["trait_source_id"] == 2, "unit"].astype(str)) == {"cm", "kg"}
    duplicates = frame[planted == "duplicate"]
    keys = set(zip(frame["institution"].astype(str), frame["specimen_id"], strict=True))
    originals = frame[frame["trait_source_id"] == 3]
    held = set(zip(originals["institution"].astype(str), originals["specimen_id"], strict=True))
    assert (
        set(zip(duplicates["institution"].astype(str), duplicates["specimen_id"], strict=True))
        <= held
        <= keys
    )


# ---------------------------------------------------------------- the demo


def run_cli(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "curation", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        check=False,
        env={**__import__("os").environ, "PYTHONPATH": str(REPO)},
    )


def test_demo_runs_end_to_end_and_again(tmp_path: Path) -> None:
    first = run_cli("demo", "--folder", "out", cwd=tmp_path)
    assert first.returncode == 0, first.stdout + first.stderr
    assert "Demo steps" in first.stdout and "Traceback" not in first.stderr
    assert (tmp_path / "out" / "tipledger.db").is_file()
    assert (tmp_path / "out" / "samples" / "tree.nex").is_file()
    # The store the demo made opens as a current tipledger store.
    shown = run_cli("show-store", "--store", "out/tipledger.db", cwd=tmp_path)
    assert shown.returncode == 0, shown.stderr
    # A second run in the same folder reuses the store.
    second = run_cli("demo", "--folder", "out", cwd=tmp_path)
    assert second.returncode == 0, second.stdout + second.stderr


def test_generate_scenario_command(tmp_path: Path) -> None:
    done = run_cli(
        "generate-scenario", "--folder", "s", "--tips", "30", "--posterior-trees", "6", cwd=tmp_path
    )
    assert done.returncode == 0, done.stderr
    assert len(tip_labels(read_tree(tmp_path / "s" / "tree.nex"))) == 30
    bad = run_cli("generate-scenario", "--folder", "t", "--tips", "3", cwd=tmp_path)
    assert bad.returncode == 2
    assert "--tips 30" in bad.stdout + bad.stderr and "Traceback" not in bad.stderr


def test_demo_pipeline_on_each_backend(store_url: str, tmp_path: Path) -> None:
    from curation.demo import run_demo
    from curation.demo.pipeline import DEMO_STEPS

    report = run_demo(tmp_path / "out", store=store_url)
    assert [s.step for s in report.steps] == [name for name, _ in DEMO_STEPS]
    # Every step is done: a stage the pipeline cannot run fails the demo.
    assert [s.status for s in report.steps] == ["done"] * len(DEMO_STEPS)
    assert all(s.message for s in report.steps)
    files = scenario_files(tmp_path / "out" / "samples")
    truth = json.loads(files.truth_trees.read_text(encoding="utf-8"))["posterior"]
    counts = report.summary
    # One dated tree, the posterior sample without its burn-in, and the
    # two derived sets of one tree each that the repair step makes.
    kept, repaired = truth["trees"] - truth["burn_in"], 2
    assert (counts.tree_sets, counts.trees) == (2 + repaired, 1 + kept + repaired)
    assert counts.tips == 200 * (1 + kept + repaired)
    # The table and the checklist hold the same synonyms.
    assert counts.synonyms >= len(pd.read_csv(files.synonyms))
    # Every cell of every source is kept, parsed or not (nothing dropped).
    _, facts, _ = read_archive(files)
    expected = len(read_wide(files)) * 5 + len(read_long(files)) + len(facts)
    assert sum(counts.measurements.values()) == expected
    # No automatic acceptance contradicts the ground truth.
    from curation.store import current_decisions, open_store

    with open_store(store_url) as opened, opened.reading() as session:
        decisions = current_decisions(session, report.ids["tree_set"])
    truth = pd.read_csv(files.truth_names, dtype=str, keep_default_na=False)
    joined = truth.merge(decisions, on="written_name", how="left")
    assert joined["status"].notna().all(), "every written name has a decision"
    accepted = joined[joined["status"] == "accepted"]
    wrong = accepted[accepted["tip_label"] != accepted["true_tip"]]
    assert wrong.empty, wrong[["written_name", "true_tip", "tip_label", "stage"]]
