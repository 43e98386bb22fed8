"""Importing tree files: Newick (one or many trees), NEXUS (TAXA and TREES
blocks with TRANSLATE, posterior samples) and NeXML.

Reading and storing are apart: :func:`read_tree_file` reads a file into
array views without touching the store, and :func:`import_trees` stores
what it read as one tree set, in one transaction with one ledger event.

Label policy (DEVELOPERS.md): labels are kept as written. The Newick rules
of 1986 and the NEXUS description (Maddison, Swofford and Maddison 1997)
both read an unquoted underscore as a blank; tipledger keeps it as an
underscore, because tree labels such as ``Genus_species_V1234`` must equal
the keys of trait tables exactly. A quoted label keeps its blanks.

Posterior samples: ``burn_in`` trees at the start of the file are skipped
and of the rest every ``keep_every``-th tree is kept (the first after the
burn-in always is). Only the trees kept are parsed, so thinning a large
sample is fast; a tree cut short at the end of the file is always reported.
"""

from __future__ import annotations

import io
import os
from dataclasses import replace
from pathlib import Path
from typing import Literal, get_args

from pydantic import BaseModel, ConfigDict

from curation.errors import FormatError, InputError, Problem, choice_error
from curation.formats.newick import relabel_tips, split_newick
from curation.formats.nexus import NexusTree, read_nexus, rooting_of_comments
from curation.formats.text import decode_text, locate, shift_error
from curation.imports.common import ImportResult, SourceInfo, read_source_bytes, register_source
from curation.progress import Progress
from curation.store.engine import Store
from curation.store.models import TreeSet
from curation.trees.arrays import TreeArrays, from_dendropy, parse_newick, to_newick
from curation.trees.stored import add_tree

__all__ = [
    "TREE_FORMATS",
    "TreeFormat",
    "ReadTree",
    "TreeFileContents",
    "TreeImportResult",
    "guess_tree_format",
    "import_trees",
    "read_tree_file",
]

#: The tree file formats tipledger reads.
TreeFormat = Literal["newick", "nexus", "nexml"]
TREE_FORMATS: tuple[str, ...] = get_args(TreeFormat)


# File name endings that say the format when the content does not.
_EXTENSIONS = {
    ".nwk": "newick",
    ".newick": "newick",
    ".tre": "newick",
    ".tree": "newick",
    ".trees": "newick",
    ".nex": "nexus",
    ".nexus": "nexus",
    ".nxs": "nexus",
    ".xml": "nexml",
    ".nexml": "nexml",
}

_MAX_PROBLEMS_PARSED = 1000  # stop parsing a hopeless file after this many


class ReadTree(BaseModel):
    """One tree read from a file, ready to store."""

    model_config = ConfigDict(arbitrary_types_allowed=True, frozen=True)

    index_in_file: int
    name: str
    arrays: TreeArrays
    newick: str


class TreeFileContents(BaseModel):
    """What :func:`read_tree_file` read: the trees kept and how many there were."""

    model_config = ConfigDict(arbitrary_types_allowed=True, frozen=True)

    format: str
    trees_in_file: int
    trees: list[ReadTree]
    burn_in: int
    keep_every: int
    warnings: list[str] = []


class TreeImportResult(ImportResult):
    """An :class:`ImportResult` that also names the tree set stored."""

    tree_set_id: int


def guess_tree_format(path: str | os.PathLike[str], data: bytes) -> str:
    """Return "newick", "nexus" or "nexml" for a file, from its first
    characters (#NEXUS, an XML declaration, '(' or '[') or else its name's
    ending (.nwk, .tre, .nex, .xml ...).

    Raises:
        FormatError: neither the content nor the name tells.
    """
    head = data[:4000].lstrip(b"\xef\xbb\xbf").lstrip()
    while head.startswith(b"[") and b"]" in head:
        # A comment before #NEXUS, as some databases write (a NEXUS file
        # should begin with #NEXUS, but the reader steps over comments).
        after = head[head.index(b"]") + 1 :].lstrip()
        if not after.upper().startswith((b"#NEXUS", b"[")):
            break
        head = after
    if head[:6].upper() == b"#NEXUS":
        return "nexus"
    if head.startswith(b"<"):
        return "nexml"
    if head.startswith((b"(", b"[")):
        return "newick"
    if head.startswith((b"\xff\xfe", b"\xfe\xff")) or head[:1] == b"\x00" or head[1:2] == b"\x00":
        return "newick"  # UTF-16 text: decoding says so with a clear message
    by_name = _EXTENSIONS.get(Path(path).suffix.lower())
    if by_name:
        return by_name
    name = Path(path).name
    raise FormatError(
        f"cannot tell the format of {name!r}: it does not begin like a Newick tree '(', "
        f"a NEXUS file '#NEXUS' or NeXML '<', found {head[:20]!r}",
        file=str(path),
        line=1,
        column=1,
        hint="give --format newick, --format nexus or --format nexml",
    )


def _check_thinning(burn_in: int, keep_every: int) -> None:
    problems = []
    if burn_in < 0:
        problems.append(
            Problem(f"burn-in {burn_in} is negative", field="burn_in", hint="give 0 or more")
        )
    if keep_every < 1:
        problems.append(
            Problem(
                f"keep-every {keep_every} is less than 1",
                field="keep_every",
                hint="give 1 to keep every tree, 10 to keep every 10th",
            )
        )
    if problems:
        raise InputError(
            "; ".join(p.message for p in problems),
            field=problems[0].field,
            hint=" / ".join(
                f"--{p.field.replace('_', '-')}: {p.hint}" for p in problems if p.field
            ),
        )


def _kept_indices(total: int, burn_in: int, keep_every: int, file: str) -> range:
    if total == 0:
        return range(0)
    if burn_in >= total:
        raise InputError(
            f"burn-in {burn_in} skips every tree: the file holds {total} "
            f"tree{'s' if total != 1 else ''}",
            file=file,
            field="burn_in",
            hint=f"give --burn-in less than {total}",
        )
    return range(burn_in, total, keep_every)


def _raise_problems(problems: list[Problem], file: str, what: str) -> None:
    if not problems:
        return
    first = problems[0]
    if len(problems) == 1:
        raise FormatError(
            first.message, file=file, line=first.line, column=first.column, hint=first.hint
        )
    raise FormatError(
        f"{len(problems)} problems in {what}; the first: {first.message}",
        file=file,
        line=first.line,
        column=first.column,
        hint=first.hint,
        problems=problems,
    )


def _problem_of(error: FormatError) -> Problem:
    return Problem(
        error.message, file=error.file, line=error.line, column=error.column, hint=error.hint
    )


def _read_newick(
    text: str, file: str, burn_in: int, keep_every: int, progress: Progress | None
) -> tuple[int, list[ReadTree]]:
    pieces = split_newick(text, file=file)
    if not pieces:
        raise FormatError(
            "no tree found: the file holds only blanks and comments",
            file=file,
            line=1,
            column=1,
            hint="give a file with Newick trees, each ending in ';'",
        )
    complete = [p for p in pieces if p.complete]
    kept = _kept_indices(len(complete), burn_in, keep_every, file) if complete else range(0)
    wanted = [complete[i] for i in kept] + [p for p in pieces if not p.complete]
    trees: list[ReadTree] = []
    problems: list[Problem] = []
    for done, piece in enumerate(wanted, start=1):
        try:
            arrays = parse_newick(piece.text, source=file)
        except FormatError as error:
            problems.append(_problem_of(shift_error(error, text, piece.offset)))
            if len(problems) >= _MAX_PROBLEMS_PARSED:
                break
            continue
        if arrays.node_count == 1 and not arrays.labels[0]:
            line, column = locate(text, piece.offset + len(piece.text) - 1)
            problems.append(
                Problem(
                    "an empty tree: nothing stands before this ';'",
                    file=file,
                    line=line,
                    column=column,
                    hint="remove the stray ';'",
                )
            )
            continue
        trees.append(
            ReadTree(index_in_file=piece.index, name="", arrays=arrays, newick=_tidy(piece.text))
        )
        if progress:
            progress(done, len(wanted))
    _raise_problems(problems, file, "the Newick trees")
    return len(complete), trees


def _tidy(text: str) -> str:
    """The tree's text as stored: without the blanks around it."""
    return text.strip()


def _taxon_lookup(taxa: list[str]) -> tuple[dict[str, str], dict[str, str | None]]:
    exact = {label: label for label in taxa}
    # NEXUS names are case-insensitive and an unquoted underscore is a blank
    # (Maddison, Swofford and Maddison 1997), so 'Homo sapiens' in TAXLABELS
    # and Homo_sapiens in a tree are one taxon. None marks an ambiguous key.
    loose: dict[str, str | None] = {}
    for label in taxa:
        key = label.replace("_", " ").casefold()
        loose[key] = None if key in loose and loose[key] != label else label
    return exact, loose


def _translate_nexus_tree(
    tree: NexusTree,
    text: str,
    file: str,
    taxa: list[str],
    exact: dict[str, str],
    loose: dict[str, str | None],
    problems: list[Problem],
) -> str:
    """Return the tree's description with tip tokens turned into taxon names."""
    translate = tree.translate
    if not translate and not taxa:
        return tree.text
    folded = {key.casefold(): value for key, value in translate.items()}

    def rename(label: str, position: int) -> str | None:
        if label in translate:
            return translate[label]
        if label.casefold() in folded:
            return folded[label.casefold()]
        if label in exact:
            return None
        if taxa:
            found = loose.get(label.replace("_", " ").casefold(), "")
            if found:
                return found
            # Taxa may be referred to by their number in the TAXA block
            # (Maddison, Swofford and Maddison 1997) when nothing translates.
            if not translate and label.isdigit() and 1 <= int(label) <= len(taxa):
                return taxa[int(label) - 1]
        line, column = locate(text, tree.offset + position)
        table = "its TRANSLATE table" if translate else "the TAXA block"
        problems.append(
            Problem(
                f"tip {label!r} of tree {tree.name!r} is not in {table}"
                + (" nor a taxon of the TAXA block" if translate and taxa else ""),
                file=file,
                line=line,
                column=column,
                hint="add the token to TRANSLATE (token name,) or correct the tree",
            )
        )
        return None

    return relabel_tips(tree.text, rename)


def _read_nexus(
    text: str, file: str, burn_in: int, keep_every: int, progress: Progress | None
) -> tuple[int, list[ReadTree]]:
    nexus = read_nexus(text, file=file)
    if not nexus.trees:
        raise FormatError(
            "the NEXUS file holds no TREE command (no TREES block with trees)",
            file=file,
            hint="give a NEXUS file with a TREES block, or check the file",
        )
    problems = list(nexus.problems)
    lookups: dict[int, tuple[dict[str, str], dict[str, str | None]]] = {}
    kept = _kept_indices(len(nexus.trees), burn_in, keep_every, file)
    trees: list[ReadTree] = []
    for done, index in enumerate(kept, start=1):
        tree = nexus.trees[index]
        before = len(problems)
        if id(tree.taxa) not in lookups:  # one lookup per TAXA block
            lookups[id(tree.taxa)] = _taxon_lookup(tree.taxa)
        exact, loose = lookups[id(tree.taxa)]
        body = _translate_nexus_tree(tree, text, file, tree.taxa, exact, loose, problems)
        try:
            arrays = parse_newick(body, source=file)
        except FormatError as error:
            located = error
            if body is not tree.text:
                # Renaming moved the columns: the text as written gives the
                # place in the file.
                try:
                    parse_newick(tree.text, source=file)
                except FormatError as original:
                    located = original
            problems.append(_problem_of(shift_error(located, text, tree.offset)))
            if len(problems) >= _MAX_PROBLEMS_PARSED:
                break
            continue
        if len(problems) > before:
            continue
        newick = _tidy(body)
        if tree.comments:
            # Comments between the name and '=' ([&lnP=...], [&R]) belong to
            # the whole tree: keep them in front of the stored text, where the
            # Newick reader gives them to the root (and reads the rooting).
            newick = " ".join(tree.comments) + " " + newick
            header = [c for c in tree.comments if rooting_of_comments([c]) is None]
            comments = dict(arrays.comments)
            if header:
                comments[0] = header + comments.get(0, [])
            rooted = arrays.rooted if arrays.rooted is not None else tree.rooted
            arrays = replace(arrays, rooted=rooted, comments=comments)
        elif tree.rooted is not None and arrays.rooted is None:  # UTREE
            arrays = replace(arrays, rooted=tree.rooted)
            newick = "[&U] " + newick
        trees.append(ReadTree(index_in_file=index, name=tree.name, arrays=arrays, newick=newick))
        if progress:
            progress(done, len(kept))
    _raise_problems(problems, file, "the NEXUS file")
    return len(nexus.trees), trees


def _read_nexml(
    data: bytes, file: str, burn_in: int, keep_every: int, progress: Progress | None
) -> tuple[int, list[ReadTree]]:
    from xml.etree.ElementTree import ParseError

    import dendropy

    try:
        # NeXML labels are XML attribute values: no underscore rule applies.
        read = dendropy.TreeList.get(file=io.BytesIO(data), schema="nexml")
    except ParseError as error:
        line, column = error.position
        raise FormatError(
            f"not well-formed XML: {error}",
            file=file,
            line=line,
            column=column + 1,
            hint="the file may be truncated or not be NeXML; check it or give --format",
        ) from None
    except Exception as error:  # DendroPy raises many kinds on bad NeXML
        line = getattr(error, "line_num", None)
        column = getattr(error, "col_num", None)
        raise FormatError(
            f"not readable as NeXML: {type(error).__name__}: {error}",
            file=file,
            line=line if isinstance(line, int) else None,
            column=column if isinstance(column, int) else None,
            hint="check that the file is NeXML (http://www.nexml.org/2009), or give --format",
        ) from None
    if len(read) == 0:
        raise FormatError(
            "the NeXML file holds no trees",
            file=file,
            hint="give a NeXML file with a <trees> element, or check the file",
        )
    kept = _kept_indices(len(read), burn_in, keep_every, file)
    trees: list[ReadTree] = []
    for done, index in enumerate(kept, start=1):
        tree = read[index]
        arrays = from_dendropy(tree)
        trees.append(
            ReadTree(
                index_in_file=index,
                name=tree.label or "",
                arrays=arrays,
                newick=to_newick(arrays),
            )
        )
        if progress:
            progress(done, len(kept))
    return len(read), trees


def _warnings(trees: list[ReadTree]) -> list[str]:
    notes: list[str] = []
    tip_sets = {frozenset(t.arrays.tip_labels) for t in trees}
    if len(tip_sets) > 1:
        notes.append(f"the trees do not all have the same tips ({len(tip_sets)} different sets)")
    doubled = [t for t in trees if len(set(t.arrays.tip_labels)) < len(t.arrays.tip_labels)]
    if doubled:
        notes.append(
            f"{len(doubled)} tree{'s' if len(doubled) != 1 else ''} have a tip label "
            "more than once (see check-trees)"
        )
    return notes


def _check_format(format: str | None) -> str | None:
    """Return ``format`` in lower case, or None to guess it.

    Raises:
        InputError: it is not one of :data:`TREE_FORMATS`.
    """
    if format is None:
        return None
    lowered = format.lower() if isinstance(format, str) else format
    if lowered not in TREE_FORMATS:
        raise choice_error(
            format,
            TREE_FORMATS,
            field="format",
            hint="give format one of them (in any case), or None to tell it from the file",
        )
    return lowered


def read_tree_file(
    path: str | os.PathLike[str],
    *,
    format: str | None = None,
    burn_in: int = 0,
    keep_every: int = 1,
    progress: Progress | None = None,
    data: bytes | None = None,
) -> TreeFileContents:
    """Read the trees of a Newick, NEXUS or NeXML file, without the store.

    Args:
        path: the file (its name is used in messages and to guess the format).
        format: "newick", "nexus" or "nexml"; guessed when None
            (:func:`guess_tree_format`).
        burn_in: trees to skip at the start of the file.
        keep_every: keep every k-th tree after the burn-in.
        progress: called as ``progress(done, total)`` while trees are read.
        data: the file's bytes when already read.

    Returns:
        The trees kept, each with its 0-based index in the file, its name,
        its array view and the Newick text to store (tip tokens of a NEXUS
        TRANSLATE table replaced by taxon names; comments kept).

    Raises:
        InputError: ``format`` is not one of :data:`TREE_FORMATS` (in any
            case; checked before the file is read), ``burn_in`` < 0 or not
            less than the number of trees, ``keep_every`` < 1, an empty file.
        FormatError: the file is not UTF-8 (the message says which encoding
            it looks like), not the format given, or malformed; every
            problem found is listed with its line and column.
        NotFoundError: no such file.
    """
    given = _check_format(format)
    _check_thinning(burn_in, keep_every)
    file = str(path)
    if data is None:
        data = read_source_bytes(path)
    elif not data.strip():
        read_source_bytes(path)  # the same message for an empty file
    chosen = given or guess_tree_format(path, data)
    if chosen == "nexml":
        total, trees = _read_nexml(data, file, burn_in, keep_every, progress)
    else:
        text = decode_text(data, file=file, what="Newick and NEXUS files")
        looks_nexus = text.lstrip()[:6].upper() == "#NEXUS"
        if chosen == "newick" and looks_nexus:
            raise FormatError(
                "the file begins with #NEXUS: it is a NEXUS file, not Newick",
                file=file,
                line=1,
                column=1,
                hint="give --format nexus, or leave --format out to guess",
            )
        reader = _read_nexus if chosen == "nexus" else _read_newick
        total, trees = reader(text, file, burn_in, keep_every, progress)
    return TreeFileContents(
        format=chosen,
        trees_in_file=total,
        trees=trees,
        burn_in=burn_in,
        keep_every=keep_every,
        warnings=_warnings(trees),
    )


def import_trees(
    store: Store,
    path: str | os.PathLike[str],
    *,
    format: str | None = None,
    burn_in: int = 0,
    keep_every: int = 1,
    info: SourceInfo | None = None,
    who: str | None = None,
    progress: Progress | None = None,
) -> TreeImportResult:
    """Import a tree file as a new source and tree set, in one transaction
    with one ledger event.

    Args:
        store: the open store.
        path: a Newick, NEXUS or NeXML file.
        format, burn_in, keep_every: as for :func:`read_tree_file`.
        info: label, citation, licence and notes of the source.
        who: recorded in the ledger as who imported it.
        progress: called as ``progress(done, total)``: the first half of
            ``total`` while reading trees, the second while storing them.

    Returns:
        A :class:`TreeImportResult` (source, event and tree set ids; counts
        of trees in the file, stored, skipped, and tips).

    Raises:
        InputError, FormatError, NotFoundError: as :func:`read_tree_file`;
            nothing is stored.
        ConflictError: the same file (by sha256) is already stored; nothing
            is stored.
    """
    _check_format(format)
    data = read_source_bytes(path)
    half: Progress | None = None
    if progress is not None:
        report = progress

        def half(done: int, total: int) -> None:
            report(done, 2 * total)

    contents = read_tree_file(
        path, format=format, burn_in=burn_in, keep_every=keep_every, progress=half, data=data
    )
    stored = len(contents.trees)
    counts = {
        "trees_in_file": contents.trees_in_file,
        "trees_stored": stored,
        "burn_in_skipped": min(burn_in, contents.trees_in_file),
        "tips": sum(len(t.arrays.tip_labels) for t in contents.trees),
        "distinct_tips": len({label for t in contents.trees for label in t.arrays.tip_labels}),
    }
    name = Path(path).name
    thinning = ""
    if burn_in or keep_every > 1:
        thinning = f" (burn-in {burn_in}, every {keep_every})"
    with store.transaction() as session:
        source, event = register_source(
            session,
            path,
            data,
            kind="tree",
            format=contents.format,
            info=info,
            options={"burn_in": burn_in, "keep_every": keep_every, **counts},
            who=who,
            summary=f"imported {stored} of {contents.trees_in_file} trees from {name}{thinning}",
        )
        tree_set = TreeSet(
            name=(info.label if info and info.label else name),
            source_id=source.id,
            event_id=event.id,
            tree_count=0,
        )
        session.add(tree_set)
        session.flush()
        for done, tree in enumerate(contents.trees, start=1):
            add_tree(
                session,
                tree_set,
                tree.arrays,
                index_in_file=tree.index_in_file,
                name=tree.name,
                source_id=source.id,
                newick=tree.newick,
                event_id=event.id,
            )
            if progress:
                progress(stored + done, 2 * stored)
        return TreeImportResult(
            source_id=source.id,
            event_id=event.id,
            sha256=source.sha256,
            file_name=source.file_name,
            kind="tree",
            format=contents.format,
            counts=counts,
            warnings=contents.warnings,
            tree_set_id=tree_set.id,
        )
