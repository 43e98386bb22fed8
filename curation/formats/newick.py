"""Newick files as text: splitting a file of one or many trees into the
text of each tree, and renaming tips in a tree's text.

Parsing one tree into arrays is :func:`curation.trees.arrays.parse_newick`;
this module only finds where each tree starts and ends, so a file of many
thousand trees can be split once and only the trees kept are parsed.
Quoted labels and bracketed comments may hold ``;``, so the split skips
over them, as the Newick rules require.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass

from curation.errors import FormatError
from curation.formats.text import locate
from curation.trees.arrays import quote_label

__all__ = ["NewickPiece", "relabel_tips", "split_newick"]

# What the splitter must step over: quoted labels ('' is an escaped quote)
# and comments, which may hold ';'. A lone quote or '[' is unterminated.
_SPLIT = re.compile(r"'(?:[^']|'')*'|\[[^\]]*\]|;|['\[]")
_ONLY_COMMENTS = re.compile(r"(?:\s+|\[[^\]]*\])*")

_TIP = re.compile(
    r"""
    '(?:[^']|'')*'                              # a quoted label not after ( or ,
  | \[[^\]]*\]                                 # a comment
  | [(,](?:\s|\[[^\]]*\])*(?P<tip>'(?:[^']|'')*'|[^\s(),:;'\[\]]+)
    """,
    re.VERBOSE,
)

_TOKEN = re.compile(
    r"""
    (?P<quoted>'(?:[^']|'')*')
  | (?P<comment>\[[^\]]*\])
  | (?P<punct>[(),:;])
  | (?P<word>[^\s(),:;'\[\]]+)
  | (?P<space>\s+)
  | (?P<bad>['\[\]])
    """,
    re.VERBOSE,
)


@dataclass(frozen=True)
class NewickPiece:
    """The text of one tree in a Newick file.

    Attributes:
        index: 0-based position of the tree in the file.
        text: the tree's text, from just after the previous ';' (blanks
            and comments before it included) to its own ';'.
        offset: where ``text`` starts in the file's text.
        complete: False for text after the last ';' that is not only blanks
            and comments: a tree cut short (the file may be truncated).
    """

    index: int
    text: str
    offset: int
    complete: bool = True


def split_newick(text: str, *, file: str | None = None) -> list[NewickPiece]:
    """Split the text of a Newick file into one piece per tree.

    Returns:
        The pieces in file order; the last one has ``complete=False`` when
        the file ends inside a tree. An empty list when the text holds no
        tree at all (only blanks and comments).

    Raises:
        FormatError: a quote or comment that is never closed (the line and
            column of where it opens).
    """
    pieces: list[NewickPiece] = []
    start = 0
    for match in _SPLIT.finditer(text):
        token = match.group()
        if token == ";":
            end = match.end()
            pieces.append(NewickPiece(len(pieces), text[start:end], start))
            start = end
        elif token in ("'", "["):
            line, column = locate(text, match.start())
            what = "quote" if token == "'" else "comment bracket '['"
            raise FormatError(
                f"unterminated {what}: it is never closed",
                file=file,
                line=line,
                column=column,
                hint="close the quote or bracket; the file may be truncated",
            )
    rest = text[start:]
    if _ONLY_COMMENTS.fullmatch(rest) is None:
        pieces.append(NewickPiece(len(pieces), rest, start, complete=False))
    return pieces


def relabel_tips(text: str, rename: Callable[[str, int], str | None]) -> str:
    """Return the Newick ``text`` with tip labels renamed, all else as written.

    ``rename(label, position)`` receives each tip label (unquoted, '' turned
    into ') and its position in ``text``; it returns the new label, or None
    to keep the old one. New labels are quoted only where they need it.
    Internal node labels, branch lengths and comments are left alone.
    """
    if "(" not in text:
        return _relabel_tips_slowly(text, rename)
    out: list[str] = []
    last = 0
    # A tip label is the label right after '(' or ',' (blanks and comments
    # between allowed); quoted labels and comments elsewhere are stepped
    # over whole so that a '(' or ',' inside them is not taken for one.
    for match in _TIP.finditer(text):
        value = match.group("tip")
        if value is None:
            continue
        start = match.start("tip")
        label = value[1:-1].replace("''", "'") if value[0] == "'" else value
        new = rename(label, start)
        if new is not None and new != label:
            out.append(text[last:start])
            out.append(quote_label(new))
            last = match.end("tip")
    out.append(text[last:])
    return "".join(out)


def _relabel_tips_slowly(text: str, rename: Callable[[str, int], str | None]) -> str:
    """Token by token; for trees without '(' (one tip) and as the reference."""
    out: list[str] = []
    last = 0
    previous: str | None = None  # the last token that is not a blank or comment
    for match in _TOKEN.finditer(text):
        kind = match.lastgroup
        if kind in ("space", "comment"):
            continue
        if kind == "bad":
            break  # parse_newick reports it with its place
        value = match.group()
        if kind == "punct":
            previous = value
            continue
        # A label right after '(' or ',' (or first of all) names a tip; one
        # after ')' names an internal node; a word after ':' is a length.
        if previous in (None, "(", ","):
            label = value[1:-1].replace("''", "'") if kind == "quoted" else value
            new = rename(label, match.start())
            if new is not None and new != label:
                out.append(text[last : match.start()])
                out.append(quote_label(new))
                last = match.end()
        previous = "label"
    out.append(text[last:])
    return "".join(out)
