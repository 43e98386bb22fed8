"""Bundles: the files, their agreement, determinism, atomicity and verify.

Each store here is built through the real importers and name matching from
small files written in the test, on every store backend.
"""

from __future__ import annotations

import hashlib
import io
import json
import shutil
import subprocess
import zipfile
from pathlib import Path

import dendropy
import pandas as pd
import pytest
from frictionless import Package
from sqlalchemy import func, select

from curation.bundle import BundleOptions, make_bundle, verify_bundle
from curation.errors import ConflictError, InputError, NotFoundError
from curation.store import Store
from curation.store.models import LedgerEvent, StoredFinding
from tests.bundle_helpers import POSTERIOR, TRAITS, TREE, build_store, first_tree


def ledger_count(store: Store) -> int:
    with store.reading() as session:
        return int(session.scalar(select(func.count(LedgerEvent.id))) or 0)


@pytest.fixture
def bundled(store: Store, tmp_path: Path) -> tuple[Store, Path, int]:
    tree_set_id = build_store(store, tmp_path)
    folder = tmp_path / "bundle"
    options = BundleOptions(tree_id=first_tree(store, tree_set_id), permutations=49)
    make_bundle(store, folder, options)
    return store, folder, tree_set_id


def test_bundle_tree_and_table_agree(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    table = pd.read_csv(folder / "species_traits.csv")
    # DendroPy as the reference reader (preserve_underscores keeps labels).
    tree = dendropy.Tree.get(path=folder / "tree.nwk", schema="newick", preserve_underscores=True)
    labels = sorted(t.label for t in tree.taxon_namespace)
    assert (
        labels == list(table["tip_label"]) == ["Alpha_one", "Alpha_two", "Beta_four", "Beta_three"]
    )
    alpha = table.set_index("tip_label").loc["Alpha_one"]
    # Mean and SD of (10, 12): 11 and sqrt(2) (sample SD, n - 1).
    assert alpha["mass"] == pytest.approx(11.0)
    assert alpha["mass_sd"] == pytest.approx(2**0.5)
    assert alpha["mass_n"] == 2


def test_pruned_tree_keeps_distances(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    # Reference: DendroPy prunes the original tree itself and measures the
    # patristic distances; ours must agree on every pair of kept tips.
    original = dendropy.Tree.get(data=TREE, schema="newick", preserve_underscores=True)
    original.retain_taxa_with_labels(["Alpha_one", "Alpha_two", "Beta_three", "Beta_four"])
    written = dendropy.Tree.get(
        path=folder / "tree.nwk",
        schema="newick",
        preserve_underscores=True,
        taxon_namespace=original.taxon_namespace,
    )
    ref, got = original.phylogenetic_distance_matrix(), written.phylogenetic_distance_matrix()
    taxa = [leaf.taxon for leaf in original.leaf_node_iter()]
    for i, a in enumerate(taxa):
        for b in taxa[i + 1 :]:
            assert got.distance(a, b) == pytest.approx(ref.distance(a, b), abs=1e-12)


def test_tree_set_bundle_is_nexus_with_translate(store: Store, tmp_path: Path) -> None:
    tree_set_id = build_store(store, tmp_path, tree_text=POSTERIOR, name="posterior.nex")
    folder = tmp_path / "set"
    make_bundle(store, folder, BundleOptions(tree_set_id=tree_set_id, diagnostics=False))
    text = (folder / "trees.nex").read_text()
    assert "TRANSLATE" in text
    # DendroPy reads the set back: two trees over the four tips with data,
    # and the pairwise distances of the second tree survive the pruning.
    trees = dendropy.TreeList.get(
        path=folder / "trees.nex", schema="nexus", preserve_underscores=True
    )
    assert len(trees) == 2
    assert sorted(t.label for t in trees.taxon_namespace) == sorted(
        pd.read_csv(folder / "species_traits.csv")["tip_label"]
    )
    reference = dendropy.TreeList.get(data=POSTERIOR, schema="nexus", preserve_underscores=True)[1]
    reference.retain_taxa_with_labels(["Alpha_one", "Alpha_two", "Beta_three", "Beta_four"])
    ref = reference.phylogenetic_distance_matrix()
    got = trees[1].phylogenetic_distance_matrix()
    by_label = {t.label: t for t in trees.taxon_namespace}
    kept = [leaf.taxon for leaf in reference.leaf_node_iter()]
    for a in kept:
        for b in kept:
            if a.label < b.label:
                assert got.distance(by_label[a.label], by_label[b.label]) == pytest.approx(
                    ref.distance(a, b), abs=1e-12
                )


def test_datapackage_validates_with_frictionless(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    # The frictionless library is the reference validator of Data Packages.
    report = Package(str(folder / "datapackage.json")).validate()
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])
    names = {r.name for r in Package(str(folder / "datapackage.json")).resources}
    assert {"species_traits", "measurements_used", "names", "findings", "accounting"} <= names


def test_checksums_agree_with_hashlib_and_sha256sum(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    listed = {}
    for line in (folder / "SHA256SUMS").read_text().splitlines():
        digest, name = line.split("  ", 1)
        listed[name] = digest
    files = sorted(p.name for p in folder.iterdir() if p.name != "SHA256SUMS")
    assert sorted(listed) == files
    for name in files:  # hashlib as the reference
        assert hashlib.sha256((folder / name).read_bytes()).hexdigest() == listed[name]
    if shutil.which("sha256sum") is None:
        pytest.fail("coreutils sha256sum is not installed; the checksum file cannot be checked")
    done = subprocess.run(
        ["sha256sum", "-c", "SHA256SUMS"], cwd=folder, capture_output=True, text=True, check=False
    )
    assert done.returncode == 0, done.stdout + done.stderr


def test_same_store_and_options_give_identical_bytes(
    store: Store, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")
    tree_set_id = build_store(store, tmp_path)
    options = BundleOptions(tree_id=first_tree(store, tree_set_id), permutations=19, make_zip=True)
    make_bundle(store, tmp_path / "one", options)
    make_bundle(store, tmp_path / "two", options)
    one = {p.name: p.read_bytes() for p in (tmp_path / "one").iterdir()}
    two = {p.name: p.read_bytes() for p in (tmp_path / "two").iterdir()}
    assert one.keys() == two.keys()
    for name in one:
        assert one[name] == two[name], name
    # The zips differ only by their root folder's name; unpacked they agree.
    with zipfile.ZipFile(tmp_path / "one.zip") as a, zipfile.ZipFile(tmp_path / "two.zip") as b:
        assert [i.filename.split("/", 1)[1] for i in a.infolist()] == [
            i.filename.split("/", 1)[1] for i in b.infolist()
        ]
        assert [i.date_time for i in a.infolist()] == [i.date_time for i in b.infolist()]
    assert (
        '"created": "2026-01-01T00:00:00+00:00"'
        in (tmp_path / "one" / "provenance.json").read_text()
    )


def test_bundle_verifies_as_folder_and_zip(store: Store, tmp_path: Path) -> None:
    tree_set_id = build_store(store, tmp_path)
    options = BundleOptions(
        tree_id=first_tree(store, tree_set_id), diagnostics=False, make_zip=True
    )
    result = make_bundle(store, tmp_path / "b", options)
    assert verify_bundle(tmp_path / "b").ok
    assert result.zip_path is not None
    report = verify_bundle(result.zip_path)
    assert report.ok, report.problems
    assert report.tips == report.trait_rows == 4


FILES = [
    "species_traits.csv",
    "measurements_used.csv",
    "names.csv",
    "findings.csv",
    "accounting.csv",
    "traits.csv",
    "tree.nwk",
    "datapackage.json",
    "provenance.json",
    "report.html",
]


@pytest.mark.parametrize("name", FILES)
def test_verify_catches_one_changed_byte(bundled: tuple[Store, Path, int], name: str) -> None:
    _, folder, _ = bundled
    data = bytearray((folder / name).read_bytes())
    middle = len(data) // 2
    data[middle] = ord("#") if data[middle] != ord("#") else ord("%")
    (folder / name).write_bytes(bytes(data))
    problems = verify_bundle(folder).problems
    assert any(name in p and "changed" in p for p in problems), problems


def _refresh_checksums(folder: Path) -> None:
    from curation.bundle.files import checksum_lines

    (folder / "SHA256SUMS").write_text(checksum_lines(folder))


def test_verify_catches_a_deleted_file(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    (folder / "names.csv").unlink()
    problems = verify_bundle(folder).problems
    assert any("names.csv" in p and "missing" in p for p in problems), problems


def test_verify_catches_an_extra_trait_row(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    with (folder / "species_traits.csv").open("a") as handle:
        handle.write("Gamma_five" + "," * 8 + "\n")
    _refresh_checksums(folder)  # so that only the agreement check can catch it
    problems = verify_bundle(folder).problems
    assert any("'Gamma_five'" in p and "not a tip" in p for p in problems), problems


def test_verify_catches_a_renamed_tip(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    tree = folder / "tree.nwk"
    tree.write_text(tree.read_text().replace("Beta_four", "Beta_fuor"))
    _refresh_checksums(folder)
    problems = verify_bundle(folder).problems
    assert any("'Beta_fuor'" in p for p in problems), problems
    assert any("'Beta_four'" in p for p in problems), problems


def test_every_tip_and_name_is_accounted_for(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    accounting = pd.read_csv(folder / "accounting.csv", keep_default_na=False)
    tips = accounting[accounting["kind"] == "tip"].set_index("name")
    assert sorted(tips.index) == ["Alpha_one", "Alpha_two", "Beta_four", "Beta_three", "Gamma_five"]
    assert tips.loc["Gamma_five", "status"] == "missing data"
    assert "pruned" in tips.loc["Gamma_five", "reason"]
    names = accounting[accounting["kind"] == "written name"].set_index("name")
    written = {line.split(",")[0] for line in TRAITS.splitlines()[1:]}
    assert set(names.index) == written
    # No tip matches it: it waits for review, counted apart from rejected names.
    assert names.loc["Nonesuch taxon", "status"] == "pending review"
    assert set(accounting["status"]) <= {"matched", "missing data", "pending review"}


def test_failure_leaves_no_half_bundle_and_no_event(store: Store, tmp_path: Path) -> None:
    tree_set_id = build_store(store, tmp_path)
    before = ledger_count(store)
    options = BundleOptions(
        tree_id=first_tree(store, tree_set_id), include_matrix=True, matrix_limit_bytes=10
    )
    with pytest.raises(InputError, match=r"bytes|memory|GB|MB"):
        make_bundle(store, tmp_path / "out", options)
    assert not (tmp_path / "out").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out")]
    assert ledger_count(store) == before


def test_matrix_entries_are_shared_path_lengths(store: Store, tmp_path: Path) -> None:
    tree_set_id = build_store(store, tmp_path)
    options = BundleOptions(tree_id=first_tree(store, tree_set_id), include_matrix=True)
    make_bundle(store, tmp_path / "m", options)
    matrix = pd.read_csv(tmp_path / "m" / "covariance.csv").set_index("tip_label")
    # (d(root,i) + d(root,j) - d(i,j)) / 2 from DendroPy's distances.
    tree = dendropy.Tree.get(
        path=tmp_path / "m" / "tree.nwk", schema="newick", preserve_underscores=True
    )
    pdm = tree.phylogenetic_distance_matrix()
    depth = {leaf.taxon.label: leaf.distance_from_root() for leaf in tree.leaf_node_iter()}
    taxa = {t.label: t for t in tree.taxon_namespace}
    for a in taxa:
        for b in taxa:
            expected = (depth[a] + depth[b] - pdm.distance(taxa[a], taxa[b])) / 2
            assert matrix.loc[a, b] == pytest.approx(expected, abs=1e-12)


def test_bad_requests_change_nothing(store: Store, tmp_path: Path) -> None:
    tree_set_id = build_store(store, tmp_path)
    before = ledger_count(store)
    with pytest.raises(NotFoundError, match="no tree 999"):
        make_bundle(store, tmp_path / "x", BundleOptions(tree_id=999))
    with pytest.raises(InputError, match="exactly one"):
        BundleOptions()
    with pytest.raises(InputError, match="'height'"):
        make_bundle(
            store,
            tmp_path / "x",
            BundleOptions(tree_id=first_tree(store, tree_set_id), traits=["height"]),
        )
    (tmp_path / "full").mkdir()
    (tmp_path / "full" / "keep.txt").write_text("mine")
    with pytest.raises(ConflictError, match="replace"):
        make_bundle(store, tmp_path / "full", BundleOptions(tree_id=first_tree(store, tree_set_id)))
    assert (tmp_path / "full" / "keep.txt").read_text() == "mine"
    assert not (tmp_path / "x").exists()
    assert ledger_count(store) == before


def test_verify_refuses_what_is_not_a_bundle(tmp_path: Path) -> None:
    with pytest.raises(NotFoundError, match="no bundle"):
        verify_bundle(tmp_path / "absent")
    (tmp_path / "notes.txt").write_text("hello")
    with pytest.raises(NotFoundError, match="neither a bundle folder nor a zip"):
        verify_bundle(tmp_path / "notes.txt")
    empty = tmp_path / "empty"
    empty.mkdir()
    problems = verify_bundle(empty).problems
    assert any("SHA256SUMS" in p for p in problems) and any("datapackage" in p for p in problems)


def test_keep_missing_keeps_every_tip(store: Store, tmp_path: Path) -> None:
    tree_set_id = build_store(store, tmp_path)
    options = BundleOptions(
        tree_id=first_tree(store, tree_set_id), missing="keep", diagnostics=False
    )
    make_bundle(store, tmp_path / "k", options)
    table = pd.read_csv(tmp_path / "k" / "species_traits.csv")
    assert "Gamma_five" in set(table["tip_label"])
    assert pd.isna(table.set_index("tip_label").loc["Gamma_five", "mass"])
    assert verify_bundle(tmp_path / "k").ok


def test_cli_makes_and_verifies(store_url: str, tmp_path: Path) -> None:
    from typer.testing import CliRunner

    from curation.cli import app
    from curation.store import open_store

    with open_store(store_url) as opened:
        tree_set_id = build_store(opened, tmp_path)
        tree_id = first_tree(opened, tree_set_id)
    runner = CliRunner()
    made = runner.invoke(
        app,
        [
            "make-bundle",
            str(tmp_path / "c"),
            "--tree",
            str(tree_id),
            "--store",
            store_url,
            "--permutations",
            "9",
        ],
    )
    assert made.exit_code == 0, made.output
    good = runner.invoke(app, ["verify-bundle", str(tmp_path / "c")])
    assert good.exit_code == 0 and "verifies" in good.output
    (tmp_path / "c" / "names.csv").write_text("tampered\n")
    bad = runner.invoke(app, ["verify-bundle", str(tmp_path / "c")])
    assert bad.exit_code == 1
    assert "names.csv has changed" in bad.output


def test_zip_holds_one_folder(bundled: tuple[Store, Path, int]) -> None:
    from curation.bundle.files import write_zip

    _, folder, _ = bundled
    target = folder.parent / "z.zip"
    write_zip(folder, target, "bundle")
    with zipfile.ZipFile(io.BytesIO(target.read_bytes())) as archive:
        assert {n.split("/")[0] for n in archive.namelist()} == {"bundle"}


def test_failed_replace_keeps_the_old_bundle(store: Store, tmp_path: Path) -> None:
    tree_set_id = build_store(store, tmp_path)
    tree_id = first_tree(store, tree_set_id)
    make_bundle(store, tmp_path / "b", BundleOptions(tree_id=tree_id, diagnostics=False))
    before = {p.name: p.read_bytes() for p in (tmp_path / "b").iterdir()}
    events = ledger_count(store)
    failing = BundleOptions(tree_id=tree_id, include_matrix=True, matrix_limit_bytes=10)
    with pytest.raises(InputError):
        make_bundle(store, tmp_path / "b", failing, replace=True)
    assert {p.name: p.read_bytes() for p in (tmp_path / "b").iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".b")) == []
    assert ledger_count(store) == events


def test_findings_are_those_of_the_bundles_own_trees(store: Store, tmp_path: Path) -> None:
    from curation.imports.trees import import_trees
    from curation.trees import check_trees

    tree_set_id = build_store(store, tmp_path)
    other = tmp_path / "other.nwk"
    other.write_text("((Alpha_one:0,Alpha_two:0.3):0.2,Beta_three:0.5);\n")
    other_set = import_trees(store, other).tree_set_id
    check_trees(store, tree_set_id)
    check_trees(store, other_set)
    make_bundle(store, tmp_path / "f", BundleOptions(tree_id=first_tree(store, tree_set_id)))
    with store.reading() as session:
        stored = session.scalars(select(StoredFinding.code)).all()
    assert "tree.zero_length_terminal" in stored  # the other set's check found it
    findings = pd.read_csv(tmp_path / "f" / "findings.csv")
    checks = findings[findings["event_action"] == "check-trees"]
    assert len(checks) > 0  # the bundle's own tree was checked too
    # The other set's zero-length tip (a finding there) must not appear.
    assert not checks["code"].eq("tree.zero_length_terminal").any()


def test_verify_catches_a_cell_of_the_wrong_type(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    path = folder / "species_traits.csv"
    header, first, *rest = path.read_text().splitlines()
    cells = first.split(",")
    cells[header.split(",").index("mass")] = "heavy"
    cells[header.split(",").index("mass_n")] = "2.5"
    path.write_text("\n".join([header, ",".join(cells), *rest]) + "\n")
    _refresh_checksums(folder)
    problems = verify_bundle(folder).problems
    # Table Schema v1: a number field holds a number, an integer field digits.
    assert any("'heavy' is not of type number" in p for p in problems), problems
    assert any("'2.5' is not of type integer" in p for p in problems), problems


def test_verify_catches_a_repeated_tip_and_a_ragged_row(bundled: tuple[Store, Path, int]) -> None:
    _, folder, _ = bundled
    species = folder / "species_traits.csv"
    lines = species.read_text().splitlines()
    species.write_text("\n".join([*lines, lines[1]]) + "\n")
    with (folder / "names.csv").open("a") as handle:
        handle.write("only,two\n")
    _refresh_checksums(folder)
    problems = verify_bundle(folder).problems
    tip = lines[1].split(",")[0]
    assert any(f"repeats tip(s): {tip}" in p for p in problems), problems
    assert any("primary key 'tip_label' repeats" in p for p in problems), problems
    assert any("names.csv cannot be read as CSV" in p for p in problems), problems


def test_progress_follows_the_diagnostics_trait_by_trait(store: Store, tmp_path: Path) -> None:
    tree_set_id = build_store(store, tmp_path)
    calls: list[tuple[int, int]] = []
    options = BundleOptions(tree_id=first_tree(store, tree_set_id), permutations=9)
    make_bundle(store, tmp_path / "p", options, progress=lambda d, t: calls.append((d, t)))
    # Two continuous traits (mass and wing): before and after each.
    assert calls == [(0, 2), (1, 2), (1, 2), (2, 2)]
    provenance = json.loads((tmp_path / "p" / "provenance.json").read_text())
    assert [d["trait"] for d in provenance["diagnostics"]] == ["mass", "wing"]


def test_verify_reads_a_table_with_a_byte_order_mark_or_a_repeated_column(
    bundled: tuple[Store, Path, int],
) -> None:
    _, folder, _ = bundled
    used = folder / "measurements_used.csv"
    used.write_bytes(b"\xef\xbb\xbf" + used.read_bytes())
    names = folder / "names.csv"
    header, *rest = names.read_text().splitlines()
    first = header.split(",")[0]
    names.write_text("\n".join([f"{header},{first}", *(f"{r},1" for r in rest)]) + "\n")
    _refresh_checksums(folder)
    problems = verify_bundle(folder).problems
    # The mark is read past (as Python's utf-8-sig codec does); the
    # repeated column is reported against the schema, not a crash.
    assert not any("measurements_used.csv" in p for p in problems), problems
    assert any("names.csv: its header" in p for p in problems), problems


def test_a_stored_repair_that_changed_nothing_is_not_listed_as_applied(
    store: Store, tmp_path: Path
) -> None:
    # A derived set as earlier versions stored it for a repair that changed
    # no tree: its ledger event says trees_changed 0. The zero-length tip
    # it was meant to repair is still there, so the finding must not say
    # "repaired", nor the report count the repair as applied.
    from curation.store.ledger import record_event
    from curation.store.models import TreeSet
    from curation.trees import check_trees
    from curation.trees.stored import add_tree, load_tree_set

    zero_tip = (
        "((Alpha_one:0,Alpha_two:0.3):0.2,(Beta_three:0.4,Beta_four:0.4):0.1,Gamma_five:0.5);\n"
    )
    tree_set_id = build_store(store, tmp_path, tree_text=zero_tip)
    check_trees(store, tree_set_id)
    with store.transaction() as session:
        event = record_event(
            session,
            "lengthen-zero-tips",
            subject=f"tree set {tree_set_id}",
            summary="lengthen zero tips: 0 of 1 trees changed",
            parameters={"length": 1e-6, "tree_set_id": tree_set_id, "trees_changed": 0},
        )
        derived = TreeSet(
            name="copy", derived_from_id=tree_set_id, repair="lengthen-zero-tips", event_id=event.id
        )
        session.add(derived)
        session.flush()
        for tree, arrays in load_tree_set(session, tree_set_id):
            add_tree(session, derived, arrays, index_in_file=0, derived_from_id=tree.id)
        derived_id = derived.id
    make_bundle(store, tmp_path / "b", BundleOptions(tree_set_id=derived_id, diagnostics=False))
    findings = pd.read_csv(tmp_path / "b" / "findings.csv", keep_default_na=False)
    zero = findings[findings["code"] == "tree.zero_length_terminal"]
    assert list(zero["action"]) == ["reported; tree used as stored"]
    page = (tmp_path / "b" / "report.html").read_text(encoding="utf-8")
    assert '<td>repairs applied</td><td class="num">0</td>' in page
