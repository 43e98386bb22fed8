"""The command line: help with an example for every command, exit status 2
with a one-paragraph message for bad input (a wrong value of an option with
a fixed set of values among it), and the store commands."""

from __future__ import annotations

import hashlib
import re
import sqlite3
import subprocess
import sys
from collections.abc import Callable, Sequence
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path
from types import UnionType
from typing import Annotated, Any, Literal, Union, get_args, get_origin, get_type_hints

import pytest
from typer._click.exceptions import UsageError
from typer.main import get_command
from typer.testing import CliRunner

from curation.bundle import BundleOptions
from curation.cli import app, usage_error
from curation.errors import InputError, NotFoundError, StoreError
from curation.imports.dwca import import_darwin_core
from curation.imports.measurements import DECIMAL_MARKS
from curation.imports.synonyms import PAIR_ROLES, SYNONYM_LAYOUTS, import_synonyms
from curation.imports.traits import LAYOUTS, ROLES, import_traits
from curation.imports.trees import TREE_FORMATS, import_trees
from curation.store import Store, create_store
from curation.store.summary import summarise_store
from curation.traits.species import POLICIES, species_values
from curation.trees.edits import ULTRAMETRIC_METHODS
from curation.trees.repairs import make_ultrametric

COMMANDS = sorted(get_command(app).commands)  # type: ignore[attr-defined]


def run_cli(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    """Run ``python -m curation`` as a user would, in a real process."""
    return subprocess.run(
        [sys.executable, "-m", "curation", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        check=False,
    )


def test_main_help_lists_every_command() -> None:
    result = run_cli("--help")
    assert result.returncode == 0
    for name in COMMANDS:
        assert name in result.stdout


@pytest.mark.parametrize("name", COMMANDS)
def test_every_command_has_help_with_an_example(name: str) -> None:
    # In process (the main help above runs in a real process): one Python
    # start per command would cost more than all the checks together.
    result = CliRunner().invoke(app, [name, "--help"], terminal_width=100)
    assert result.exit_code == 0, result.output
    assert "Example: tipledger " + name in result.output


def test_bad_store_exits_2_without_traceback(tmp_path: Path) -> None:
    result = run_cli("show-store", "--store", str(tmp_path / "none.db"))
    assert result.returncode == 2
    output = result.stdout + result.stderr
    assert "no store at" in output and "create-store" in output
    assert "Traceback" not in output


def test_create_then_show_store(tmp_path: Path) -> None:
    store = str(tmp_path / "lab.db")
    assert run_cli("create-store", "--store", store).returncode == 0
    shown = run_cli("show-store", "--store", store)
    assert shown.returncode == 0, shown.stderr
    assert "ledger events: 0" in shown.stdout


# --- options with a fixed set of values -----------------------------------------
#
# Every option that takes one of a fixed set of values is a typed choice: the
# help shows the values, and a wrong value is refused before the store is
# opened or a file read, with exit status 2 (the usage-error status of
# common practice: Click and Python's argparse both exit 2), one paragraph
# naming the option and every allowed value, and no traceback.

SAMPLES = Path(__file__).resolve().parent.parent / "samples"


@dataclass(frozen=True)
class ChoiceCase:
    """An option with a fixed set of values, and a wrong value for it."""

    command: str
    option: str
    allowed: tuple[str, ...]  # taken from the library function the value goes to
    wrong: str  # as typed after the option
    rejected: str  # the part of it that is wrong
    rest: tuple[str, ...]  # the command's other arguments, all valid

    def __str__(self) -> str:
        return f"{self.command} {self.option}"


def _case(command: str, option: str, allowed: Sequence[str], wrong: str, *rest: str) -> ChoiceCase:
    return ChoiceCase(command, option, tuple(allowed), wrong, wrong.partition("=")[0], rest)


TREE_FILE = str(SAMPLES / "tree.nex")
TRAIT_TABLE = str(SAMPLES / "traits_wide.csv")
ARCHIVE = str(SAMPLES / "occurrences_dwca.zip")
SYNONYM_TABLE = str(SAMPLES / "synonyms.csv")

#: The typed choices; the store below holds tree set 1 (tree 1) and has
#: imported every file named here, so a command that did any work would
#: answer something else (or change the store).
CHOICE_OPTIONS = [
    _case("make-bundle", "--missing", get_args(BundleOptions.model_fields["missing"].annotation),
          "drop", "bundle", "--tree", "1"),
    _case("make-bundle", "--policy", get_args(BundleOptions.model_fields["policy"].annotation),
          "best", "bundle", "--tree", "1"),
    _case("show-species-values", "--policy", POLICIES, "best", "--tree-set", "1"),
    _case("import-trees", "--format", TREE_FORMATS, "phylip", TREE_FILE),
    _case("import-traits", "--layout", LAYOUTS, "tall", TRAIT_TABLE),
    _case("import-traits", "--decimal", DECIMAL_MARKS, ";", TRAIT_TABLE),
    _case("import-darwin-core", "--decimal", DECIMAL_MARKS, ";", ARCHIVE),
    _case("import-synonyms", "--layout", SYNONYM_LAYOUTS, "tall", SYNONYM_TABLE),
    _case("make-ultrametric", "--method", ULTRAMETRIC_METHODS, "fast", "1"),
]  # fmt: skip

#: ROLE=COLUMN options, whose ROLE is one of a fixed set.
KEYED_OPTIONS = [
    _case("import-traits", "--columns", ROLES, "species=Name", TRAIT_TABLE),
    _case("import-synonyms", "--columns", PAIR_ROLES, "taxon=Name", SYNONYM_TABLE),
]


def _row_counts(path: Path) -> dict[str, int]:
    """Rows of every table of a SQLite store, read with Python's sqlite3."""
    with closing(sqlite3.connect(path)) as connection:
        tables = [
            name
            for (name,) in connection.execute("SELECT name FROM sqlite_master WHERE type='table'")
        ]
        return {t: connection.execute(f'SELECT count(*) FROM "{t}"').fetchone()[0] for t in tables}


@pytest.fixture(scope="module")
def filled_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A real SQLite store that has imported every sample file the cases name."""
    path = tmp_path_factory.mktemp("choices") / "lab.db"
    with create_store(path) as store:
        import_trees(store, TREE_FILE)
        import_traits(store, TRAIT_TABLE)
        import_darwin_core(store, ARCHIVE)
        import_synonyms(store, SYNONYM_TABLE)
    return path


@pytest.mark.parametrize("case", CHOICE_OPTIONS + KEYED_OPTIONS, ids=str)
def test_a_wrong_value_is_refused_before_any_work(
    case: ChoiceCase, filled_store: Path, tmp_path: Path
) -> None:
    before = _row_counts(filled_store)
    assert before["ledger_events"] == 4 and before["tree_sets"] == 1
    digest = hashlib.sha256(filled_store.read_bytes()).hexdigest()
    result = run_cli(
        case.command, *case.rest, case.option, case.wrong, "--store", str(filled_store),
        cwd=tmp_path,
    )  # fmt: skip
    output = (result.stdout + result.stderr).strip()
    assert result.returncode == 2, output
    assert "Traceback" not in output
    # One paragraph: what is wrong (the option, the value) and every allowed value.
    assert output.startswith("Error: ") and "\n\n" not in output, output
    assert case.option in output and repr(case.rejected) in output, output
    for value in case.allowed:
        assert repr(value) in output, output
    # Nothing was done: the store file is as it was, byte for byte, and no
    # bundle folder was begun.
    assert _row_counts(filled_store) == before
    assert hashlib.sha256(filled_store.read_bytes()).hexdigest() == digest
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("case", CHOICE_OPTIONS + KEYED_OPTIONS, ids=str)
def test_a_wrong_value_is_refused_before_the_store_or_a_file_is_opened(
    case: ChoiceCase, tmp_path: Path
) -> None:
    # No store and no input file exist: a command that got as far as opening
    # either would fail on that (a StoreError or NotFoundError) instead.
    rest = [str(tmp_path / "none.csv") if "/" in a else a for a in case.rest]
    args = [case.command, *rest, case.option, case.wrong, "--store", str(tmp_path / "none.db")]
    with pytest.raises((UsageError, InputError)) as info:
        get_command(app).main(args, prog_name="tipledger", standalone_mode=False)
    error = usage_error(info.value) if isinstance(info.value, UsageError) else info.value
    assert not isinstance(error, (StoreError, NotFoundError))
    assert error.field == case.option
    text = error.describe()
    for value in case.allowed:
        assert repr(value) in text, text
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("case", CHOICE_OPTIONS, ids=str)
def test_help_shows_the_choices(case: ChoiceCase) -> None:
    result = CliRunner().invoke(app, [case.command, "--help"], terminal_width=200)
    assert result.exit_code == 0, result.output
    assert f"{case.option} <{'|'.join(case.allowed)}>" in result.output, result.output


def _parameters() -> list[tuple[str, str, Any, str]]:
    """(command, option or argument, type, help) of every parameter of every
    command, the type without ``Annotated`` and ``None``."""
    commands = get_command(app).commands  # type: ignore[attr-defined]
    rows = []
    for info in app.registered_commands:
        assert info.name is not None and info.callback is not None
        params = {p.name: p for p in commands[info.name].params}
        for name, hint in get_type_hints(info.callback, include_extras=True).items():
            if name == "return":
                continue
            kind = get_args(hint)[0] if get_origin(hint) is Annotated else hint
            if get_origin(kind) in (Union, UnionType):
                (kind,) = [a for a in get_args(kind) if a is not type(None)]
            param = params[name]
            flags = [o for o in param.opts if o.startswith("--")]
            rows.append((info.name, flags[0] if flags else name, kind, param.help or ""))
    return rows


#: Options (and arguments) that take free text, not one of a fixed set.
OPEN_TEXT = {
    "--store": "a file or any SQLAlchemy URL",
    "--user": "any name",
    "--label": "free text",
    "--citation": "free text",
    "--licence": "free text (e.g. an SPDX identifier, or other terms)",
    "--notes": "free text",
    "--note": "free text",
    "--reason": "free text",
    "--folder": "a folder",
    "--samples": "a folder",
    "path": "a file",
    "written_name": "any written name",
    "--tip": "any tip label",
    "--tips": "tip labels",
    "--trait": "the traits of the store or file",
    "--unit": "TRAIT=UNIT, any unit pint parses",
    "--default-unit": "any unit pint parses",
    "--columns": "ROLE=COLUMN; the roles are checked (KEYED_OPTIONS)",
    "--delimiter": "any one character",
    "--encoding": "any text encoding Python knows",
    "--sheet": "a worksheet's name or position",
}

# Help that lists values: "a: ...; b: ...", "one of", or a bare "a, b or c"
# at its start or after a colon at its end.
LISTS_VALUES = re.compile(
    r"(^|[.;]\s)[\w.'-]+: [^;]*; [\w.'-]+: "
    r"|\bone of\b"
    r"|(^|: )[\w'.,-]+(, [\w'.,-]+)*,? or [\w'.,-]+( \(|$)"
)


@pytest.mark.parametrize(
    "text",
    [
        "prune: drop tips without data; keep: keep them with empty values.",
        "Species values from several sources: pool, priority or weighted.",
        "newick, nexus or nexml (default: guessed from the file's content).",
        "The decimal mark of the values: '.' or ','.",
        "extend or least_squares.",
    ],
)
def test_help_listing_values_is_recognised(text: str) -> None:
    # The help of the options before they were choices, as it was written.
    assert LISTS_VALUES.search(text)


def test_every_option_with_a_fixed_set_of_values_is_a_choice() -> None:
    rows = _parameters()
    choices = {(c, o): get_args(k) for c, o, k, _ in rows if get_origin(k) is Literal}
    # Every choice is one of the cases above, with the values of the
    # library function it goes to; and every case is a choice.
    assert choices == {(c.command, c.option): c.allowed for c in CHOICE_OPTIONS}
    for command, option, kind, text in rows:
        if get_origin(kind) is Literal:
            continue
        assert not LISTS_VALUES.search(text), f"{command} {option}: {text}"
        if kind is str or kind == list[str]:
            assert option in OPEN_TEXT, f"{command} {option} takes text: a choice?"


# --- the library refuses the same values, speaking of its arguments ---------------


MISSING_FILE = "no-such-file.csv"

LIBRARY_CASES = [
    pytest.param(
        "missing", ("prune", "keep"), lambda s: BundleOptions(tree_id=1, missing="drop"),
        id="BundleOptions-missing",
    ),
    pytest.param(
        "policy", POLICIES, lambda s: BundleOptions(tree_id=1, policy="best"),
        id="BundleOptions-policy",
    ),
    pytest.param(
        "policy", POLICIES, lambda s: species_values(s, 999, policy="best"),
        id="species_values-policy",
    ),
    pytest.param(
        "format", TREE_FORMATS, lambda s: import_trees(s, MISSING_FILE, format="phylip"),
        id="import_trees-format",
    ),
    pytest.param(
        "layout", LAYOUTS, lambda s: import_traits(s, MISSING_FILE, layout="tall"),
        id="import_traits-layout",
    ),
    pytest.param(
        "decimal", DECIMAL_MARKS, lambda s: import_traits(s, MISSING_FILE, decimal=";"),
        id="import_traits-decimal",
    ),
    pytest.param(
        "decimal", DECIMAL_MARKS, lambda s: import_darwin_core(s, MISSING_FILE, decimal=";"),
        id="import_darwin_core-decimal",
    ),
    pytest.param(
        "layout", SYNONYM_LAYOUTS, lambda s: import_synonyms(s, MISSING_FILE, layout="tall"),
        id="import_synonyms-layout",
    ),
    pytest.param(
        "method", ULTRAMETRIC_METHODS, lambda s: make_ultrametric(s, 999, method="fast"),
        id="make_ultrametric-method",
    ),
]  # fmt: skip


@pytest.mark.parametrize(("argument", "allowed", "call"), LIBRARY_CASES)
def test_the_library_refuses_a_wrong_value_first(
    store: Store, argument: str, allowed: tuple[str, ...], call: Callable[[Store], object]
) -> None:
    # The file and the tree set do not exist: the value is checked before
    # either is looked for (or a NotFoundError would come instead).
    with pytest.raises(InputError) as info:
        call(store)
    assert not isinstance(info.value, NotFoundError)
    assert info.value.field == argument
    text = info.value.describe()
    for value in allowed:
        assert repr(value) in text, text
    assert "--" not in text  # arguments, not the command line's options
    assert summarise_store(store).ledger_events == 0
