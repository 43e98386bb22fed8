"""Importing trait tables: round trips on real files in every encoding and
layout, the published iris and penguin measurements, and bad input that
must leave the store unchanged."""

from __future__ import annotations

import csv
import io
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from curation.errors import ConflictError, FormatError, InputError, NotFoundError
from curation.formats.tables import detect_delimiter, read_table
from curation.imports.common import SourceInfo
from curation.imports.measurements import parse_values
from curation.imports.traits import import_traits, resolve_columns, split_unit
from curation.store import Store, open_store
from curation.store.models import Base, LedgerEvent, Measurement, Source, TraitSource


def table_counts(store: Store) -> dict[str, int]:
    """Rows in every table of the store: the 'unchanged store' check."""
    with store.reading() as session:
        return {
            name: int(session.scalar(select(func.count()).select_from(table)) or 0)
            for name, table in Base.metadata.tables.items()
        }


def stored(store: Store) -> pd.DataFrame:
    """Every measurement, in insertion order."""
    with store.reading() as session:
        rows = session.execute(select(Measurement).order_by(Measurement.id)).scalars().all()
        return pd.DataFrame(
            [{c.name: getattr(r, c.name) for c in Measurement.__table__.columns} for r in rows],
            dtype=object,
        )


# A small wide table with the faults trait sheets have: a decimal-comma
# slip, a missing-value mark, a value with text, an empty cell, a row with
# no taxon and a blank line (invented taxa).
WIDE_ROWS = [
    ["species", "catalog_number", "sex", "mass_g", "tail length (mm)", "notes"],
    ["Velutomys brevis", "NMX 101", "female", "12.5", "81", "adult"],
    ["Velutomys brevis", "NMX 102", "male", "NA", "79.5", ""],
    ["Velutomys longus", "NMX 103", "", "14,1", "ca. 90", "tail tip broken"],
    ["Velutomys longus", "NMX 104", "male", "", "88", ""],
    ["", "NMX 105", "", "9.0", "60", "label lost"],
]


def write_csv(path: Path, rows: list[list[str]], *, delimiter: str = ",", encoding: str = "utf-8"):
    buffer = io.StringIO()
    csv.writer(buffer, delimiter=delimiter, lineterminator="\n").writerows(rows)
    path.write_bytes(buffer.getvalue().encode(encoding))
    return path


def test_wide_csv_round_trip(store: Store, tmp_path: Path) -> None:
    path = write_csv(tmp_path / "museum.csv", WIDE_ROWS)
    result = import_traits(store, path, info=SourceInfo(citation="Invented 2026"))
    frame = stored(store)
    # 5 data rows x 2 numeric trait columns; 'notes' holds no number and is left out.
    assert result.counts["measurements"] == len(frame) == 10
    assert set(frame["trait"]) == {"mass", "tail length"}
    assert dict(zip(frame["trait"], frame["unit"], strict=True)) == {
        "mass": "g",
        "tail length": "mm",
    }
    assert any("notes" in w for w in result.warnings)
    # Every stored value as written equals the cell the stdlib csv module reads.
    expected = {
        (i + 2, header): row[j]
        for i, row in enumerate(WIDE_ROWS[1:])
        for j, header in ((3, "mass"), (4, "tail length"))
    }
    for row in frame.itertuples():
        assert (row.value_written or "") == expected[(row.row_number, row.trait)]
    by_key = frame.set_index(["specimen_id", "trait"])
    assert by_key.loc[("NMX 101", "mass"), "value_number"] == 12.5
    assert by_key.loc[("NMX 101", "mass"), "sex"] == "female"
    assert by_key.loc[("NMX 102", "mass"), "status"] == "missing"
    assert by_key.loc[("NMX 104", "mass"), "status"] == "missing"
    comma = by_key.loc[("NMX 103", "mass")]
    assert comma["status"] == "unparsed" and "--decimal" in comma["reason"]
    assert by_key.loc[("NMX 103", "tail length"), "status"] == "unparsed"
    assert by_key.loc[("NMX 105", "mass"), "status"] == "unparsed"
    assert "no taxon" in by_key.loc[("NMX 105", "mass"), "reason"]
    assert result.counts == {
        "measurements": 10,
        "ok": 4,
        "unparsed": 4,
        "missing": 2,
        "rows": 5,
        "traits": 2,
        "taxa": 2,
    }
    with store.reading() as session:
        source = session.scalars(select(Source)).one()
        assert source.citation == "Invented 2026" and source.format == "csv"
        trait_source = session.scalars(select(TraitSource)).one()
        assert trait_source.layout == "wide" and trait_source.priority == 100
        events = session.scalars(select(LedgerEvent)).all()
        assert len(events) == 1 and events[0].action == "import-traits"


@pytest.mark.parametrize(
    ("name", "delimiter", "encoding"),
    [
        ("tabs.tsv", "\t", "utf-8"),
        ("pipes.txt", "|", "utf-8"),
        ("bom.csv", ",", "utf-8-sig"),
        ("utf16.csv", ";", "utf-16"),
        ("windows.csv", ";", "cp1252"),
        ("latin.csv", "\t", "latin-1"),
    ],
)
def test_delimiters_and_encodings_are_detected(
    store: Store, tmp_path: Path, name: str, delimiter: str, encoding: str
) -> None:
    # Names with letters outside ASCII that Latin-1 and cp1252 both spell.
    rows = [
        ["taxon", "collection", "wing (mm)"],
        ["Pterella müllerae", "Muséum Ærø", "41.5"],
        ["Pterella señorita", "Muséum Ærø", "39"],
    ]
    path = write_csv(tmp_path / name, rows, delimiter=delimiter, encoding=encoding)
    table = read_table(path.read_bytes(), file_name=name)
    assert table.delimiter == delimiter
    import_traits(store, path, columns={"institution": "collection"})
    frame = stored(store)
    assert list(frame["written_name"]) == ["Pterella müllerae", "Pterella señorita"]
    assert set(frame["institution"]) == {"Muséum Ærø"}
    assert list(frame["value_number"]) == [41.5, 39.0]
    assert list(frame["row_number"]) == [2, 3]


def test_cp1252_punctuation_is_read_as_cp1252(tmp_path: Path) -> None:
    # 0x96 is the en dash in Windows-1252 and a control code in Latin-1
    # (Windows-1252 code chart, Unicode's cp1252 mapping table).
    data = "taxon,note\nAus bus,4\u20136 eggs\n".encode("cp1252")
    assert b"\x96" in data
    table = read_table(data, file_name="x.csv")
    assert table.encoding == "cp1252"
    assert table.frame.loc[0, "note"] == "4\u20136 eggs"


def test_semicolon_and_decimal_comma(store: Store, tmp_path: Path) -> None:
    rows = [
        ["Art", "Masse [g]", "Länge (cm)"],
        ["Velutomys brevis", "12,5", "1.234,5"],
        ["Velutomys brevis", "-0,25", "7"],
        ["Velutomys longus", "3.5", ",5"],
    ]
    path = write_csv(tmp_path / "semikolon.csv", rows, delimiter=";", encoding="cp1252")
    result = import_traits(store, path, decimal=",", columns={"taxon": "Art"})
    frame = stored(store).set_index(["row_number", "trait"])
    assert frame.loc[(2, "Masse"), "value_number"] == 12.5
    assert frame.loc[(2, "Länge"), "value_number"] == 1234.5
    assert frame.loc[(3, "Masse"), "value_number"] == -0.25
    assert frame.loc[(4, "Länge"), "value_number"] == 0.5
    # A decimal point under --decimal ',' is ambiguous (thousands or not): kept, flagged.
    assert frame.loc[(4, "Masse"), "status"] == "unparsed"
    assert frame.loc[(2, "Länge"), "unit"] == "cm"
    assert result.counts["unparsed"] == 1


def test_long_layout_with_units(store: Store, tmp_path: Path) -> None:
    rows = [
        ["scientificName", "specimen", "lifeStage", "trait", "value", "unit"],
        ["Velutomys brevis", "A1", "adult", "mass", "12.5", "g"],
        ["Velutomys brevis", "A1", "adult", "tail length", "81", ""],
        ["Velutomys brevis", "A2", "juvenile", "mass", "", "g"],
        ["Velutomys longus", "A3", "adult", "colour", "brown", ""],
        ["Velutomys longus", "A4", "adult", "colour", "grey", ""],
    ]
    path = write_csv(tmp_path / "long.csv", rows)
    result = import_traits(store, path, layout="long", units={"tail length": "mm"})
    frame = stored(store)
    assert list(frame["trait"]) == ["mass", "tail length", "mass", "colour", "colour"]
    assert list(frame["unit"].fillna("-")) == ["g", "mm", "g", "-", "-"]
    assert list(frame["life_stage"]) == ["adult", "adult", "juvenile", "adult", "adult"]
    assert list(frame["status"]) == ["ok", "ok", "missing", "ok", "ok"]
    # 'colour' holds no number at all: read as a discrete trait, values as states.
    assert frame.loc[frame["trait"] == "colour", "value_number"].isna().all()
    assert list(frame.loc[frame["trait"] == "colour", "value_written"]) == ["brown", "grey"]
    assert any("discrete" in w and "colour" in w for w in result.warnings)


def test_xlsx_with_a_named_sheet(store: Store, tmp_path: Path) -> None:
    from openpyxl import Workbook

    book = Workbook()
    book.active.title = "readme"
    book.active.append(["This sheet explains the data."])
    sheet = book.create_sheet("measurements")
    sheet.append(["species", "voucher", "mass_kg", "wing (mm)"])
    sheet.append(["Pterella müllerae", "V1", 0.0125, 41])
    sheet.append([None, None, None, None])
    sheet.append(["Pterella señorita", "V2", 0.5, "broken"])
    path = tmp_path / "book.xlsx"
    book.save(path)
    result = import_traits(store, path, sheet="measurements")
    frame = stored(store)
    assert result.format == "xlsx"
    assert list(frame["written_name"]) == ["Pterella müllerae"] * 2 + ["Pterella señorita"] * 2
    # Row numbers are the sheet's own (the empty row 3 is skipped, still counted).
    assert list(frame["row_number"]) == [2, 2, 4, 4]
    assert list(frame["value_number"].fillna(-1)) == [0.0125, 41.0, 0.5, -1]
    assert list(frame["unit"]) == ["kg", "mm", "kg", "mm"]
    assert frame["status"].tolist() == ["ok", "ok", "ok", "unparsed"]


def test_iris_from_scikit_learn(store: Store, tmp_path: Path) -> None:
    # The iris measurements (Anderson 1935; Fisher 1936) as scikit-learn
    # bundles them: 150 flowers, 50 per species, 4 measurements in cm.
    from sklearn.datasets import load_iris

    iris = load_iris(as_frame=True)
    frame = iris.frame.copy()
    frame.insert(0, "species", [f"Iris {iris.target_names[t]}" for t in iris.target])
    frame = frame.drop(columns="target")
    path = tmp_path / "iris.csv"
    frame.to_csv(path, index=False)
    result = import_traits(store, path)
    got = stored(store)
    assert result.counts["measurements"] == 150 * 4 == result.counts["ok"]
    assert result.counts["taxa"] == 3
    assert set(got["unit"]) == {"cm"}
    features = [c for c in iris.frame.columns if c != "target"]
    assert sorted(got["trait"].unique()) == sorted(split_unit(c)[0] for c in features)
    # Values equal the frame's, cell by cell (row order is the file's).
    for column in features:
        trait = split_unit(column)[0]
        values = got.loc[got["trait"] == trait].sort_values("row_number")["value_number"]
        np.testing.assert_array_equal(values.to_numpy(dtype=float), frame[column].to_numpy())
    counts = got.groupby("written_name")["row_number"].nunique()
    assert counts.to_dict() == {"Iris setosa": 50, "Iris versicolor": 50, "Iris virginica": 50}


def test_palmer_penguins(store: Store, tmp_path: Path) -> None:
    # The Palmer Archipelago penguins (Gorman, Williams and Fraser 2014;
    # Horst, Hill and Gorman 2020) as the palmerpenguins package ships them.
    from palmerpenguins import load_penguins

    penguins = load_penguins()
    path = tmp_path / "penguins.csv"
    penguins.to_csv(path, index=False)  # missing values become empty cells
    traits = ["bill_length_mm", "bill_depth_mm", "flipper_length_mm", "body_mass_g"]
    result = import_traits(store, path, traits=traits)
    got = stored(store)
    n = len(penguins)
    assert result.counts["measurements"] == n * len(traits)
    assert result.counts["missing"] == int(penguins[traits].isna().sum().sum())
    assert result.counts["ok"] == int(penguins[traits].notna().sum().sum())
    assert result.counts["unparsed"] == 0
    units = dict(zip(got["trait"], got["unit"], strict=True))
    assert units == {
        "bill_length": "mm",
        "bill_depth": "mm",
        "flipper_length": "mm",
        "body_mass": "g",
    }
    for column in traits:
        trait = split_unit(column)[0]
        values = got.loc[got["trait"] == trait].sort_values("row_number")["value_number"]
        np.testing.assert_array_equal(values.to_numpy(dtype=float), penguins[column].to_numpy())
    # The sex column is found by its name; NA sexes are empty.
    first = got.loc[got["trait"] == "body_mass"].sort_values("row_number")
    assert first["sex"].fillna("").tolist() == penguins["sex"].fillna("").tolist()
    assert first["written_name"].tolist() == penguins["species"].tolist()


def test_detect_delimiter_gallery() -> None:
    # Named gallery of edge cases; the expected delimiter is what a person
    # reads off each sample (common practice).
    gallery = {
        "comma": ("a,b,c\n1,2,3\n", ","),
        "tab": ("a\tb\n1\t2\n", "\t"),
        "semicolon with decimal commas": ("a;b;c\nx;1,5;2,5\ny;3,1;4\n", ";"),
        "quoted commas in a tab file": ('a\tb\n"x, y"\t1\n', "\t"),
        "single column": ("taxon\nAus bus\n", ","),
        "pipe": ("a|b\n1|2\n", "|"),
    }
    for name, (text, expected) in gallery.items():
        assert detect_delimiter(text) == expected, name


@settings(max_examples=50, deadline=None)
@given(st.floats(allow_nan=False, allow_infinity=False, width=64))
def test_parse_values_reads_what_python_writes(number: float) -> None:
    # Python's repr gives the shortest string that float() reads back
    # exactly (the Python language reference on float repr); the parser
    # must agree, with either decimal mark.
    written = repr(number)
    point = parse_values(pd.Series([written]), decimal=".")
    assert point["status"].iloc[0] == "ok"
    assert point["value_number"].iloc[0] == float(written)
    comma = parse_values(pd.Series([written.replace(".", ",")]), decimal=",")
    assert comma["status"].iloc[0] == "ok"
    assert comma["value_number"].iloc[0] == float(written)


def test_parse_values_gallery() -> None:
    # Each case with the status a curator expects (common practice of
    # spreadsheet exports), compared against Python's float() where it is a number.
    gallery = {
        "": "missing",
        "  ": "missing",
        "NA": "missing",
        "n/a": "missing",
        "-": "missing",
        "12": "ok",
        " 12.5 ": "ok",
        "-3e2": "ok",
        ".5": "ok",
        "1,5": "unparsed",
        "12 mm": "unparsed",
        "<5": "unparsed",
        "10-12": "unparsed",
        "inf": "unparsed",
        "nan?": "unparsed",
    }
    parsed = parse_values(pd.Series(list(gallery)))
    for (written, expected), status, number in zip(
        gallery.items(), parsed["status"], parsed["value_number"], strict=True
    ):
        assert status == expected, written
        if expected == "ok":
            assert number == float(written)


def test_split_unit_gallery() -> None:
    assert split_unit("length (mm)") == ("length", "mm")
    assert split_unit("wing [cm]") == ("wing", "cm")
    assert split_unit("body_mass_g") == ("body_mass", "g")
    assert split_unit("mass_g") == ("mass", "g")
    assert split_unit("clutch_size") == ("clutch_size", None)
    assert split_unit("log_mass") == ("log_mass", None)


# --- bad input: a clear message, and nothing stored ---------------------------------


def test_empty_file(store: Store, tmp_path: Path) -> None:
    before = table_counts(store)
    path = tmp_path / "empty.csv"
    path.write_text("\n\n")
    with pytest.raises(InputError, match="empty"):
        import_traits(store, path)
    header_only = tmp_path / "header.csv"
    header_only.write_text("taxon,mass\n")
    with pytest.raises(InputError, match="no data rows"):
        import_traits(store, header_only)
    assert table_counts(store) == before


def test_wrong_encoding(store: Store, tmp_path: Path) -> None:
    path = write_csv(
        tmp_path / "w.csv", [["taxon", "mass"], ["Aus müller", "1"]], encoding="cp1252"
    )
    before = table_counts(store)
    with pytest.raises(FormatError) as caught:
        import_traits(store, path, encoding="utf-8")
    text = str(caught.value)
    assert "not valid utf-8" in text and "line 2" in text and "--encoding" in text
    assert "cp1252" in text
    assert table_counts(store) == before


def test_binary_file(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "photo.csv"
    path.write_bytes(bytes(range(256)) * 4)
    with pytest.raises(FormatError, match="not a text table"):
        import_traits(store, path)
    assert table_counts(store)["measurements"] == 0


def test_missing_columns_are_all_listed(store: Store, tmp_path: Path) -> None:
    path = write_csv(tmp_path / "long.csv", [["Plant", "what", "amount"], ["A b", "m", "1"]])
    before = table_counts(store)
    with pytest.raises(InputError) as caught:
        import_traits(store, path, layout="long")
    text = str(caught.value)
    for needed in ("'taxon'", "'trait'", "'value'", "--columns taxon=", "'Plant'"):
        assert needed in text
    assert table_counts(store) == before
    # The hint's option fixes it.
    import_traits(
        store, path, layout="long", columns={"taxon": "Plant", "trait": "what", "value": "amount"}
    )
    assert table_counts(store)["measurements"] == 1


def test_columns_option_errors_are_all_listed() -> None:
    with pytest.raises(InputError) as caught:
        resolve_columns(
            ["taxon", "mass"], "wide", {"taxon": "nope", "colour": "mass", "value": "mass"}
        )
    problems = [p.message for p in caught.value.problems]
    assert any("not in the file" in p for p in problems)
    assert any("'colour' is not a column role" in p for p in problems)
    assert any("long layout" in p for p in problems)


def test_same_file_twice(store: Store, tmp_path: Path) -> None:
    path = write_csv(tmp_path / "museum.csv", WIDE_ROWS)
    import_traits(store, path)
    before = table_counts(store)
    copy = tmp_path / "renamed.csv"
    copy.write_bytes(path.read_bytes())
    with pytest.raises(ConflictError, match="already in the store"):
        import_traits(store, copy)
    assert table_counts(store) == before


def test_xlsx_sheet_that_does_not_exist(store: Store, tmp_path: Path) -> None:
    from openpyxl import Workbook

    book = Workbook()
    book.active.title = "data"
    book.active.append(["taxon", "mass"])
    book.active.append(["Aus bus", 1])
    path = tmp_path / "book.xlsx"
    book.save(path)
    before = table_counts(store)
    with pytest.raises(NotFoundError) as caught:
        import_traits(store, path, sheet="Sheet2")
    text = str(caught.value)
    assert "'Sheet2'" in text and "'data'" in text and "--sheet" in text
    assert table_counts(store) == before


def test_ragged_row_names_the_line(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "ragged.csv"
    path.write_text("taxon,mass\nAus bus,1\nAus cus,2,3\n")
    with pytest.raises(FormatError, match="line 3"):
        import_traits(store, path)
    assert table_counts(store)["sources"] == 0


def test_failure_after_registering_rolls_back(store: Store, tmp_path: Path) -> None:
    # A unit given for a trait the file lacks is found before anything is stored.
    path = write_csv(tmp_path / "museum.csv", WIDE_ROWS)
    before = table_counts(store)
    with pytest.raises(InputError, match="--unit names 'wingspan'"):
        import_traits(store, path, units={"wingspan": "mm"})
    assert table_counts(store) == before


# --- the command ----------------------------------------------------------------------


def run_cli(*args: str) -> subprocess.CompletedProcess[str]:
    """Run ``python -m curation`` in a real process, as a user would."""
    return subprocess.run(
        [sys.executable, "-m", "curation", *args], capture_output=True, text=True, check=False
    )


def test_import_traits_command(tmp_path: Path) -> None:
    store = str(tmp_path / "lab.db")
    assert run_cli("create-store", "--store", store).returncode == 0
    rows = [["Art", "Masse", "Flügel (mm)"], ["Pterella alba", "1,5", "40"]]
    path = write_csv(tmp_path / "t.csv", rows, delimiter=";", encoding="cp1252")
    result = run_cli(
        "import-traits", str(path), "--store", store, "--decimal", ",",
        "--columns", "taxon=Art", "--unit", "Masse=g", "--label", "field sheet",
    )  # fmt: skip
    assert result.returncode == 0, result.stdout + result.stderr
    assert "measurements: 2" in result.stdout and "ok: 2" in result.stdout
    with open_store(store) as opened:
        frame = stored(opened)
    assert dict(zip(frame["trait"], frame["unit"], strict=True)) == {"Masse": "g", "Flügel": "mm"}
    assert list(frame["value_number"]) == [1.5, 40.0]
    again = run_cli("import-traits", str(path), "--store", store, "--decimal", ",")
    assert again.returncode == 2
    assert "already in the store" in again.stdout + again.stderr
    assert "Traceback" not in again.stdout + again.stderr


def test_import_traits_command_bad_input(tmp_path: Path) -> None:
    store = str(tmp_path / "lab.db")
    run_cli("create-store", "--store", store)
    path = write_csv(tmp_path / "t.csv", [["Plant", "mass"], ["A b", "1"]])
    result = run_cli("import-traits", str(path), "--store", store, "--columns", "taxon")
    assert result.returncode == 2 and "KEY=VALUE" in result.stdout + result.stderr
    result = run_cli("import-traits", str(path), "--store", store)
    output = result.stdout + result.stderr
    assert result.returncode == 2 and "--columns taxon=" in output and "Traceback" not in output
