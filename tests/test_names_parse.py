"""Parsing written names: every case the parser handles, bad input, and a
property that no text makes it raise or lose the name."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from curation.names.parse import parse_name, parse_names

# (written, canonical, expected parts) -- the forms follow the usual way of
# writing scientific names (binomial, rank abbreviations, authority in
# parentheses when the species was moved: ICZN Art. 51.3; common practice).
CASES = [
    ("Aus bus", "Aus bus", {}),
    ("Aus_bus", "Aus bus", {}),
    ("Aus_bus_V1234", "Aus bus", {"suffix": "V1234"}),
    ("Aus_bus_2", "Aus bus", {"suffix": "2"}),
    ("'Aus bus'", "Aus bus", {}),
    ('"Aus_bus"', "Aus bus", {}),
    ("  aus    BUS ", "Aus bus", {}),
    ("AUS BUS", "Aus bus", {}),
    ("Aus bus subsp. cus", "Aus bus subsp. cus", {"rank": "subsp.", "infraspecific": "cus"}),
    ("Aus bus ssp. cus", "Aus bus subsp. cus", {"rank": "subsp."}),
    ("Aus bus ssp cus", "Aus bus subsp. cus", {"rank": "subsp."}),
    ("Aus bus var. cus", "Aus bus var. cus", {"rank": "var."}),
    ("Aus bus f. cus", "Aus bus f. cus", {"rank": "f."}),
    ("Aus bus cus", "Aus bus cus", {"infraspecific": "cus"}),
    ("Aus bus L.", "Aus bus", {"authority": "L."}),
    ("Aus bus Linnaeus, 1758", "Aus bus", {"authority": "Linnaeus, 1758", "year": 1758}),
    ("Aus bus (Linnaeus, 1758)", "Aus bus", {"authority": "(Linnaeus, 1758)", "year": 1758}),
    ("Aus bus (Smith)", "Aus bus", {"authority": "(Smith)", "year": None}),
    ("Aus bus de Vries, 1901", "Aus bus", {"authority": "de Vries, 1901", "year": 1901}),
    ("Aus cf. bus", "Aus bus", {"qualifiers": ["cf."]}),
    ("Aus aff. bus", "Aus bus", {"qualifiers": ["aff."]}),
    ("Aus nr. bus", "Aus bus", {"qualifiers": ["nr."]}),
    ("Aus sp.", "Aus", {"qualifiers": ["sp."], "epithet": None}),
    ("Aus spp.", "Aus", {"qualifiers": ["spp."]}),
    ("Aus sp. nov.", "Aus", {"qualifiers": ["sp. nov."]}),
    ("Aus bus?", "Aus bus", {"qualifiers": ["?"]}),
    ("Aus ? bus", "Aus bus", {"qualifiers": ["?"]}),
    ("Aus × bus", "Aus ×bus", {"hybrid": True}),
    ("Aus ×bus", "Aus ×bus", {"hybrid": True}),
    ("Aus x bus", "Aus ×bus", {"hybrid": True}),
    ("×Aus bus", "×Aus bus", {"hybrid": True}),
    ("Aus bus × Aus cus", "Aus bus × Aus cus", {"hybrid": True}),
    ("Aus bus x cus", "Aus bus × Aus cus", {"hybrid": True}),
    ("Cæsia bœa", "Caesia boea", {}),
    ("Aus mënta", "Aus menta", {}),
    ("Aus müllerí", "Aus mulleri", {}),
]


@pytest.mark.parametrize(("written", "canonical", "parts"), CASES)
def test_parse_cases(written: str, canonical: str, parts: dict[str, object]) -> None:
    parsed = parse_name(written)
    assert parsed.parseable, parsed.reason
    assert parsed.canonical == canonical
    for field, value in parts.items():
        assert getattr(parsed, field) == value, field
    assert parsed.written == written


def test_every_transformation_is_listed() -> None:
    steps = parse_name("'cæsia_MËNTA'  ").transformations
    assert "removed quotes" in steps
    assert "underscores to spaces" in steps
    assert any(s.startswith("folded æ->ae") for s in steps)
    assert "removed diacritics" in steps
    assert "read capitals as lower case" not in steps  # mixed case: not all capitals
    assert "genus capitalised" in steps and "epithet lower-cased" in steps
    assert parse_name("Aus_bus_V12").transformations == [
        "underscores to spaces",
        "set aside suffix 'V12'",
    ]
    assert parse_name("Aus bus").transformations == []


def test_leftovers_are_kept() -> None:
    parsed = parse_name("Aus bus V1234 extra")
    assert parsed.canonical == "Aus bus" and parsed.suffix == "V1234"
    assert parsed.leftovers == ["extra"]


@pytest.mark.parametrize(
    ("written", "reason"),
    [
        ("", "the name is empty"),
        ("   ", "the name is empty"),
        ("...", "the name has no letters"),
        ("?!,;", "the name has no letters"),
        ("1234", "the name has no letters"),
        ("(Smith, 1900)", "no genus could be read"),
    ],
)
def test_unparseable_names_are_reported(written: str, reason: str) -> None:
    parsed = parse_name(written)
    assert not parsed.parseable
    assert parsed.reason == reason
    assert parsed.canonical == ""
    assert parsed.written == written


def test_parse_names_keeps_order_repeats_and_bad_names() -> None:
    frame = parse_names(["Aus_bus_V1", "", "Aus bus", "Aus_bus_V1"])
    assert list(frame["written"]) == ["Aus_bus_V1", "", "Aus bus", "Aus_bus_V1"]
    assert list(frame["canonical"]) == ["Aus bus", "", "Aus bus", "Aus bus"]
    assert list(frame["parseable"]) == [True, False, True, True]
    assert parse_names([]).empty


@settings(max_examples=50, deadline=None)
@given(st.text(max_size=40))
def test_any_text_parses_without_raising(text: str) -> None:
    parsed = parse_name(text)
    assert parsed.written == text
    assert parsed.parseable == bool(parsed.canonical)


@pytest.mark.parametrize("written", ["Aus_bus", "Aus bus", "Aus_bus_V12", "Aus_bus_2"])
def test_fast_path_gives_what_the_full_parser_gives(written: str) -> None:
    from curation.names.parse import _fast_row

    assert _fast_row(written) == parse_name(written).model_dump()
