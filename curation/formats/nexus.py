"""A reader of the NEXUS blocks that hold trees: TAXA and TREES.

Follows the NEXUS description of Maddison, Swofford and Maddison (1997,
Systematic Biology 46: 590-621): a file begins with ``#NEXUS``; blocks run
from ``BEGIN name;`` to ``END;`` (or ``ENDBLOCK;``); commands end with
``;``; keywords are case-insensitive; a token may be quoted with single
quotes ('' inside stands for one quote); comments are in square brackets
and may nest. TAXA gives the taxon names (DIMENSIONS NTAX, TAXLABELS);
TREES gives an optional TRANSLATE table from tokens to taxon names and one
TREE command per tree (``TREE [*] name = newick;``). Other blocks are
stepped over whole.

Labels are kept as written: an unquoted underscore stays an underscore
(the project's label policy). The tree descriptions themselves are kept as
text, with their place in the file, so a posterior sample of many trees is
read quickly and only the trees wanted are parsed.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass, field

from curation.errors import FormatError, Problem
from curation.formats.text import locate

__all__ = ["NexusFile", "NexusTree", "read_nexus", "rooting_of_comments"]

_SPACE = re.compile(r"\s+")
_WORD = re.compile(r"[^\s;=,'\[\]]+")
_QUOTED = re.compile(r"'(?:[^']|'')*'")
_BRACKET = re.compile(r"[\[\]]")
# Inside a command: the next thing that matters when looking for its ';'
# (a quoted token or a comment without nesting is stepped over whole).
_COMMAND_PART = re.compile(r"'(?:[^']|'')*'|\[[^\[\]]*\]|[\[;']")


@dataclass(frozen=True)
class NexusTree:
    """One TREE command of a TREES block.

    Attributes:
        index: 0-based position among all trees of the file.
        name: the tree's name as written (unquoted).
        text: the tree description, from just after '=' to its ';'.
        offset: where ``text`` starts in the file's text.
        rooted: True for [&R], False for [&U] written between TREE and '=',
            None when not written there (the description may say it).
        translate: the TRANSLATE table of the tree's block (token -> name).
        comments: the comments written between TREE and '=' (such as
            [&lnP=-1234.5] or [&R]), as written.
        taxa: the TAXLABELS of the TAXA block the tree's block refers to
            (by ``LINK TAXA = title;``, else the last one before it).
    """

    index: int
    name: str
    text: str
    offset: int
    rooted: bool | None
    translate: dict[str, str] = field(repr=False)
    comments: tuple[str, ...] = ()
    taxa: list[str] = field(default_factory=list, repr=False)


@dataclass
class NexusFile:
    """What a NEXUS file says about trees.

    Attributes:
        taxa: TAXLABELS of the last TAXA block, in order (empty without one);
            each tree carries those of the block it refers to.
        trees: every TREE command, in file order.
        problems: problems that do not stop the reading (a duplicated
            TRANSLATE token, NTAX not matching TAXLABELS ...).
    """

    taxa: list[str]
    trees: list[NexusTree]
    problems: list[Problem]


def rooting_of_comments(comments: list[str]) -> bool | None:
    """Return True for a [&R] among ``comments``, False for [&U], else None."""
    for comment in comments:
        body = comment[1:-1].strip().upper()
        if body == "&R":
            return True
        if body == "&U":
            return False
    return None


@dataclass
class _Token:
    kind: str  # word | quoted | punct
    value: str
    start: int

    def is_keyword(self, *words: str) -> bool:
        return self.kind == "word" and self.value.upper() in words


class _Scanner:
    """Reads NEXUS tokens one at a time, collecting the comments it passes."""

    def __init__(self, text: str, file: str | None) -> None:
        self.text = text
        self.file = file
        self.pos = 0
        self.comments: list[str] = []

    def error(self, message: str, position: int, hint: str | None = None) -> FormatError:
        line, column = locate(self.text, position)
        return FormatError(message, file=self.file, line=line, column=column, hint=hint)

    def problem(self, message: str, position: int, hint: str | None = None) -> Problem:
        line, column = locate(self.text, position)
        return Problem(message, file=self.file, line=line, column=column, hint=hint)

    def comment_end(self, start: int) -> int:
        """Return the position just after the comment opening at ``start``."""
        depth = 0
        for match in _BRACKET.finditer(self.text, start):
            depth += 1 if match.group() == "[" else -1
            if depth == 0:
                return match.end()
        raise self.error(
            "unterminated comment: '[' is never closed by ']'",
            start,
            "close the comment; the file may be truncated",
        )

    def token(self) -> _Token | None:
        """Return the next token, or None at the end of the text."""
        text = self.text
        while True:
            space = _SPACE.match(text, self.pos)
            if space:
                self.pos = space.end()
            if self.pos >= len(text):
                return None
            if text[self.pos] != "[":
                break
            end = self.comment_end(self.pos)
            self.comments.append(text[self.pos : end])
            self.pos = end
        start = self.pos
        char = text[start]
        if char in ";=,":
            self.pos += 1
            return _Token("punct", char, start)
        if char == "'":
            quoted = _QUOTED.match(text, start)
            if quoted is None:
                raise self.error(
                    "unterminated quote: a quoted token is never closed",
                    start,
                    "close the quote (write '' for a quote inside a quoted name)",
                )
            self.pos = quoted.end()
            return _Token("quoted", quoted.group()[1:-1].replace("''", "'"), start)
        if char == "]":
            raise self.error("']' without an opening '['", start, "remove it or open the comment")
        word = _WORD.match(text, start)
        assert word is not None  # every other character starts a word
        self.pos = word.end()
        return _Token("word", word.group(), start)

    def command_end(self, start: int, what: str) -> int:
        """Step to just after the ';' that ends the command begun at
        ``start``, skipping quoted tokens and comments; return the ';''s
        position."""
        pos = self.pos
        while True:
            match = _COMMAND_PART.search(self.text, pos)
            if match is None:
                raise self.error(
                    f"the {what} command is not ended by ';'",
                    start,
                    "the file may be truncated; every NEXUS command ends with ';'",
                )
            token = match.group()
            if token == ";":
                self.pos = match.end()
                return match.start()
            if token == "[":  # a comment with comments nested in it
                pos = self.comment_end(match.start())
            elif token == "'":
                raise self.error(
                    "unterminated quote: a quoted token is never closed",
                    match.start(),
                    "close the quote (write '' for a quote inside a quoted name)",
                )
            else:
                pos = match.end()

    def expect_semicolon(self, after: str, start: int) -> None:
        token = self.token()
        if token is None or token.value != ";" or token.kind != "punct":
            found = "the end of the file" if token is None else repr(token.value)
            raise self.error(
                f"expected ';' after {after}, found {found}",
                token.start if token else start,
                "end the command with ';'",
            )


def _block_commands(scanner: _Scanner, block: str, begin: int) -> Iterator[_Token]:
    """Yield the first token of each command of a block, up to its END."""
    while True:
        token = scanner.token()
        if token is None:
            line, _ = locate(scanner.text, begin)
            raise scanner.error(
                f"the {block} block begun on line {line} is not closed by END;",
                len(scanner.text),
                "the file may be truncated; a NEXUS block ends with END;",
            )
        if token.is_keyword("END", "ENDBLOCK"):
            scanner.expect_semicolon(token.value, token.start)
            return
        if token.kind == "punct" and token.value == ";":
            continue  # an empty command
        yield token


def _read_title(scanner: _Scanner, command: _Token) -> str:
    """Read the rest of ``TITLE name;`` and return the name."""
    name = scanner.token()
    if name is None or name.kind == "punct":
        raise scanner.error("expected a name after TITLE", command.start, "write TITLE name;")
    scanner.expect_semicolon(f"TITLE {name.value}", name.start)
    return name.value


def _read_taxa(
    scanner: _Scanner, begin: int, problems: list[Problem]
) -> tuple[list[str], str | None]:
    labels: list[str] = []
    ntax: tuple[int, int] | None = None
    taxlabels_at = begin
    title: str | None = None
    for command in _block_commands(scanner, "TAXA", begin):
        if command.is_keyword("DIMENSIONS"):
            while (token := scanner.token()) is not None and not (
                token.kind == "punct" and token.value == ";"
            ):
                if token.is_keyword("NTAX"):
                    equals, number = scanner.token(), scanner.token()
                    if equals is None or equals.value != "=" or number is None:
                        raise scanner.error("expected NTAX=<number>", token.start)
                    if not number.value.isdigit():
                        raise scanner.error(
                            f"NTAX must be a whole number, found {number.value!r}", number.start
                        )
                    ntax = (int(number.value), token.start)
            if token is None:
                raise scanner.error(
                    "the DIMENSIONS command is not ended by ';'", command.start, "end it with ';'"
                )
        elif command.is_keyword("TITLE"):
            title = _read_title(scanner, command)
        elif command.is_keyword("TAXLABELS"):
            taxlabels_at = command.start
            seen: dict[str, int] = {}
            while (token := scanner.token()) is not None and not (
                token.kind == "punct" and token.value == ";"
            ):
                if token.kind == "punct":
                    raise scanner.error(
                        f"unexpected {token.value!r} in TAXLABELS",
                        token.start,
                        "list taxon names separated by blanks; quote names with punctuation",
                    )
                if token.value in seen:
                    problems.append(
                        scanner.problem(
                            f"taxon {token.value!r} is listed twice in TAXLABELS",
                            token.start,
                            "each taxon name must be listed once",
                        )
                    )
                seen[token.value] = token.start
                labels.append(token.value)
            if token is None:
                raise scanner.error(
                    "the TAXLABELS command is not ended by ';'",
                    command.start,
                    "the file may be truncated; end TAXLABELS with ';'",
                )
        else:
            scanner.command_end(command.start, command.value)
    if ntax is not None and ntax[0] != len(labels):
        problems.append(
            scanner.problem(
                f"DIMENSIONS says NTAX={ntax[0]} but TAXLABELS lists {len(labels)} names",
                taxlabels_at,
                "make NTAX equal the number of taxon names",
            )
        )
    return labels, title


def _read_translate(scanner: _Scanner, start: int, problems: list[Problem]) -> dict[str, str]:
    table: dict[str, str] = {}
    while True:
        key = scanner.token()
        if key is None:
            raise scanner.error(
                "the TRANSLATE command is not ended by ';'",
                start,
                "the file may be truncated; end TRANSLATE with ';'",
            )
        if key.kind == "punct" and key.value == ";" and not table:
            return table
        if key.kind == "punct":
            raise scanner.error(
                f"expected a token to translate, found {key.value!r}",
                key.start,
                "write TRANSLATE as pairs 'token name' separated by commas",
            )
        name = scanner.token()
        if name is None or name.kind == "punct":
            found = "the end of the file" if name is None else repr(name.value)
            raise scanner.error(
                f"TRANSLATE token {key.value!r} has no taxon name (found {found})",
                name.start if name else key.start,
                "write TRANSLATE as pairs 'token name' separated by commas",
            )
        if key.value in table:
            problems.append(
                scanner.problem(
                    f"TRANSLATE token {key.value!r} is given twice "
                    f"({table[key.value]!r} and {name.value!r})",
                    key.start,
                    "give each token once",
                )
            )
        table[key.value] = name.value
        after = scanner.token()
        if after is None:
            raise scanner.error(
                "the TRANSLATE command is not ended by ';'",
                start,
                "the file may be truncated; end TRANSLATE with ';'",
            )
        if after.kind == "punct" and after.value == ";":
            return table
        if not (after.kind == "punct" and after.value == ","):
            raise scanner.error(
                f"expected ',' or ';' after the TRANSLATE entry {key.value!r}, "
                f"found {after.value!r}",
                after.start,
                "separate TRANSLATE entries with commas; quote names that hold blanks",
            )


def _read_link(
    scanner: _Scanner, command: _Token, taxa_blocks: dict[str, tuple[str, list[str]]]
) -> list[str]:
    """Read ``LINK TAXA = title;`` (Mesquite's way of naming the TAXA block
    a block refers to) and return that block's taxa."""
    what, equals, name = scanner.token(), scanner.token(), scanner.token()
    if (
        what is None
        or equals is None
        or name is None
        or equals.value != "="
        or name.kind == "punct"
    ):
        raise scanner.error("expected LINK TAXA = title;", command.start, "write LINK TAXA = name;")
    scanner.expect_semicolon(f"LINK {what.value} = {name.value}", name.start)
    if not what.is_keyword("TAXA"):
        return []
    linked = taxa_blocks.get(name.value.upper())
    if linked is None:
        known = ", ".join(repr(title) for title, _ in taxa_blocks.values()) or "none"
        raise scanner.error(
            f"LINK TAXA names {name.value!r}, but no TAXA block has that TITLE (titles: {known})",
            name.start,
            "give the TAXA block that TITLE, or correct the LINK",
        )
    return linked[1]


def _read_trees(
    scanner: _Scanner,
    begin: int,
    trees: list[NexusTree],
    problems: list[Problem],
    taxa: list[str],
    taxa_blocks: dict[str, tuple[str, list[str]]],
) -> None:
    translate: dict[str, str] = {}
    for command in _block_commands(scanner, "TREES", begin):
        if command.is_keyword("LINK"):
            taxa = _read_link(scanner, command, taxa_blocks) or taxa
        elif command.is_keyword("TRANSLATE"):
            translate = _read_translate(scanner, command.start, problems)
        elif command.is_keyword("TREE", "UTREE"):
            scanner.comments = []
            name = scanner.token()
            if name is not None and name.kind == "word" and name.value == "*":
                name = scanner.token()  # '*' marks the default tree
            if name is not None and name.kind == "punct" and name.value == "=":
                equals: _Token | None = name
                tree_name = ""
            else:
                if name is None or name.kind == "punct":
                    raise scanner.error(
                        "expected a tree name after TREE", command.start, "write TREE name = (...);"
                    )
                tree_name = name.value
                equals = scanner.token()
            if equals is None or not (equals.kind == "punct" and equals.value == "="):
                found = "the end of the file" if equals is None else repr(equals.value)
                raise scanner.error(
                    f"expected '=' after the name of tree {tree_name!r}, found {found}",
                    equals.start if equals else command.start,
                    "write TREE name = (...);",
                )
            rooted = rooting_of_comments(scanner.comments)
            if command.is_keyword("UTREE") and rooted is None:
                rooted = False
            start = scanner.pos
            end = scanner.command_end(command.start, f"TREE {tree_name!r}")
            trees.append(
                NexusTree(
                    index=len(trees),
                    name=tree_name,
                    text=scanner.text[start : end + 1],
                    offset=start,
                    rooted=rooted,
                    translate=translate,
                    taxa=taxa,
                    comments=tuple(scanner.comments),
                )
            )
        else:
            scanner.command_end(command.start, command.value)


def read_nexus(text: str, *, file: str | None = None) -> NexusFile:
    """Read the TAXA and TREES blocks of a NEXUS file's text.

    Returns:
        A :class:`NexusFile`: taxon names, every tree description (as text,
        with its place and its block's TRANSLATE table) and the problems
        that did not stop the reading.

    Raises:
        FormatError: the text does not begin with #NEXUS, or a block,
            command, quote or comment is not closed (the file may be
            truncated), or a TRANSLATE or TREE command is malformed; the
            message gives the line and column.
    """
    scanner = _Scanner(text, file)
    first = scanner.token()
    if first is None or first.value.upper() != "#NEXUS":
        found = "nothing" if first is None else repr(first.value)
        raise scanner.error(
            f"a NEXUS file begins with #NEXUS; found {found}",
            first.start if first else 0,
            "check the file, or give --format newick or --format nexml",
        )
    taxa: list[str] = []
    # TAXA blocks by TITLE in upper case: (the title as written, the taxa).
    taxa_blocks: dict[str, tuple[str, list[str]]] = {}
    trees: list[NexusTree] = []
    problems: list[Problem] = []
    while (token := scanner.token()) is not None:
        if not token.is_keyword("BEGIN"):
            raise scanner.error(
                f"expected BEGIN, found {token.value!r} outside any block",
                token.start,
                "every command of a NEXUS file stands inside BEGIN name; ... END;",
            )
        name = scanner.token()
        if name is None or name.kind == "punct":
            raise scanner.error("expected a block name after BEGIN", token.start)
        scanner.expect_semicolon(f"BEGIN {name.value}", name.start)
        block = name.value.upper()
        if block == "TAXA":
            taxa, title = _read_taxa(scanner, token.start, problems)
            if title is not None:
                taxa_blocks[title.upper()] = (title, taxa)
        elif block == "TREES":
            _read_trees(scanner, token.start, trees, problems, taxa, taxa_blocks)
        else:
            for command in _block_commands(scanner, name.value, token.start):
                scanner.command_end(command.start, command.value)
    return NexusFile(taxa=taxa, trees=trees, problems=problems)
