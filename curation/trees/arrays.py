"""The array view of a tree: the compact form every check and statistic
runs on.

Nodes are numbered in preorder (the root is 0 and every parent comes before
its children), so reversing the numbering gives a postorder and a whole
tree can be processed with NumPy in O(n) without recursion. The view is
built once, straight from Newick text by :func:`parse_newick` (faster than
building a DendroPy tree), or from a DendroPy tree by :func:`from_dendropy`.

Label policy: labels are kept exactly as written. Unquoted underscores stay
underscores (they are not turned into spaces), quoted labels lose their
quotes and have doubled quotes ('') turned into one, and bracketed comments
([&rate=0.1], [&R]) are kept apart from labels (see :attr:`TreeArrays.comments`).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

from curation.errors import FormatError, InputError

__all__ = [
    "TreeArrays",
    "from_dendropy",
    "parse_newick",
    "path_sums",
    "quote_label",
    "to_newick",
    "written_decimals",
]

_TOKEN = re.compile(
    r"""
    (?P<quoted>'(?:[^']|'')*')      # quoted label, '' is an escaped quote
  | (?P<comment>\[[^\]]*\])         # bracketed comment
  | (?P<punct>[(),:;])
  | (?P<word>[^\s(),:;'\[\]]+)      # unquoted label or number
  | (?P<space>\s+)
  | (?P<bad>['\[\]])                # an unterminated quote or comment
    """,
    re.VERBOSE,
)

# Characters that force quoting on write (Newick punctuation, blanks,
# quotes, brackets); underscores do not, since we keep them as written.
_NEEDS_QUOTES = re.compile(r"[\s(),:;'\[\]]")


@dataclass(frozen=True, eq=False)
class TreeArrays:
    """A tree as arrays over its nodes, numbered in preorder.

    Attributes:
        parent: index of each node's parent; -1 for the root.
        edge_length: length of the branch above each node; NaN where the
            file gives none (the root's is NaN unless written).
        labels: label of each node ('' where none).
        rooted: True for [&R], False for [&U], None when the file is silent.
        comments: bracketed comments by node index, as written.
        length_decimals: for each node, the number of decimal places its
            branch length was written with (``1.25`` -> 2, ``1e-3`` -> 3,
            ``12`` -> 0); -1 where no length was written. ``None`` when the
            tree was not read from text (the written precision is unknown).
    """

    parent: np.ndarray
    edge_length: np.ndarray
    labels: list[str]
    rooted: bool | None = None
    comments: dict[int, list[str]] = field(default_factory=dict)
    length_decimals: np.ndarray | None = None

    def __post_init__(self) -> None:
        n = len(self.parent)
        counts = np.bincount(self.parent[1:], minlength=n) if n > 1 else np.zeros(n, int)
        object.__setattr__(self, "child_count", counts)

    child_count: np.ndarray = field(init=False, repr=False)

    @property
    def node_count(self) -> int:
        """Number of nodes, tips included."""
        return len(self.parent)

    @property
    def is_tip(self) -> np.ndarray:
        """Boolean mask of nodes without children."""
        return self.child_count == 0

    @property
    def tips(self) -> np.ndarray:
        """Indices of the tips in the order they appear in the Newick text."""
        return np.flatnonzero(self.is_tip)

    @property
    def tip_labels(self) -> list[str]:
        """Labels of the tips in the order they appear in the Newick text."""
        return [self.labels[i] for i in self.tips]

    @property
    def postorder(self) -> np.ndarray:
        """Node indices with every child before its parent."""
        return np.arange(self.node_count - 1, -1, -1)

    def depths(self) -> np.ndarray:
        """Distance from the root to every node; missing lengths count as 0.

        Returns:
            float64 array, 0 at the root.
        """
        return path_sums(self.parent, np.nan_to_num(self.edge_length, nan=0.0))


def path_sums(parent: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Sum ``values`` along the path from each node up to (not including) the
    root, in O(n log height) vectorised steps.

    Pointer jumping: after k rounds every node has added the values of its
    2**k nearest ancestors' edges, and knows its 2**k-th ancestor.
    """
    total = values.astype(np.float64, copy=True)
    if len(total) == 0:
        return total
    total[0] = 0.0
    jump = parent.copy()
    jump[0] = 0
    while True:
        active = jump != 0
        if not active.any():
            return total
        total = np.where(active, total + total[jump], total)
        jump = np.where(active, jump[jump], jump)


def quote_label(label: str) -> str:
    """Return ``label`` as Newick text: quoted (with '' for ') only when it
    holds a character that would otherwise change its meaning."""
    if label and not _NEEDS_QUOTES.search(label):
        return label
    if not label:
        return ""
    return "'" + label.replace("'", "''") + "'"


def parse_newick(text: str, *, source: str | None = None) -> TreeArrays:
    """Parse one Newick tree into a :class:`TreeArrays`.

    Args:
        text: the tree, ending with ``;`` (a missing final ``;`` is an error).
        source: file name used in error messages.

    Returns:
        The array view, nodes in preorder.

    Raises:
        FormatError: unbalanced parentheses, an unterminated quote or
            comment, a branch length that is not a number, text after the
            final ``;``, or an empty input; the message gives the column.
    """
    parent: list[int] = []
    lengths: list[float] = []
    decimals: list[int] = []
    labels: list[str] = []
    comments: dict[int, list[str]] = {}
    pending: list[str] = []  # comments written before the node they belong to
    rooted: bool | None = None
    stack: list[int] = []
    current = -1  # the node that labels, lengths and comments attach to
    expect_length = False
    finished = False
    seen_any = False

    def fail(message: str, column: int, hint: str | None = None) -> FormatError:
        line = text.count("\n", 0, column) + 1
        col = column - (text.rfind("\n", 0, column) + 1) + 1
        return FormatError(message, file=source, line=line, column=col, hint=hint)

    def new_node(par: int) -> int:
        parent.append(par)
        lengths.append(np.nan)
        decimals.append(-1)
        labels.append("")
        node = len(parent) - 1
        if pending:
            comments[node] = pending.copy()
            pending.clear()
        return node

    for match in _TOKEN.finditer(text):
        kind = match.lastgroup
        value = match.group()
        pos = match.start()
        if kind == "space":
            continue
        if finished:
            if kind == "comment":
                continue
            raise fail(
                f"text {value!r} after the final ';'",
                pos,
                "put each tree on its own line, or remove the trailing text",
            )
        if kind == "bad":
            what = "quote" if value == "'" else "comment bracket"
            raise fail(f"unterminated {what} {value!r}", pos, "close the quote or bracket")
        if kind == "comment":
            body = value[1:-1]
            if not seen_any and body.upper() in ("&R", "&U"):
                rooted = body.upper() == "&R"
            elif current >= 0:
                comments.setdefault(current, []).append(value)
            else:
                # Before a node's label (or a tree's first '('): it belongs
                # to the node that comes next, e.g. "([&x]A,B)" to A and a
                # tree-header "[&lnP=-1] (A,B)" to the root.
                pending.append(value)
            continue
        seen_any = True
        if expect_length:
            expect_length = False
            if kind != "word":
                raise fail(f"expected a branch length after ':', found {value!r}", pos)
            try:
                lengths[current] = float(value)
                decimals[current] = written_decimals(value)
            except ValueError:
                raise fail(
                    f"branch length {value!r} is not a number",
                    pos,
                    "write lengths as decimal numbers such as 0.25 or 1e-3",
                ) from None
            continue
        if value == "(":
            node = new_node(stack[-1] if stack else -1)
            if not stack and len(parent) > 1:
                raise fail("a second tree starts before ';'", pos, "end each tree with ';'")
            stack.append(node)
            current = -1
        elif value == ",":
            if not stack:
                raise fail("',' outside any parentheses", pos)
            if current == -1 or parent[current] != stack[-1]:
                # An empty sibling, e.g. "(,A)": a tip without a label.
                current = new_node(stack[-1])
            current = -1
        elif value == ")":
            if not stack:
                raise fail("')' without a matching '('", pos, "check the parentheses")
            if current == -1 or parent[current] != stack[-1]:
                new_node(stack[-1])  # an empty last child, e.g. "(A,)"
            current = stack.pop()
        elif value == ":":
            if current == -1:
                current = new_node(stack[-1] if stack else -1)
            expect_length = True
        elif value == ";":
            if stack:
                raise fail(
                    f"{len(stack)} unclosed '(' at the end of the tree",
                    pos,
                    "the file may be truncated; check the parentheses",
                )
            if not parent:
                new_node(-1)
            finished = True
        else:  # a label, quoted or not
            if current == -1:
                current = new_node(stack[-1] if stack else -1)
            elif labels[current]:
                raise fail(f"two labels for one node: {labels[current]!r} and {value!r}", pos)
            labels[current] = value[1:-1].replace("''", "'") if kind == "quoted" else value
    if expect_length:
        raise fail("the tree ends after ':' without a branch length", len(text))
    if not finished:
        if not seen_any:
            raise fail("no tree found (the text is empty)", 0, "give a Newick tree ending in ';'")
        raise fail(
            "the tree does not end with ';'",
            len(text),
            "the file may be truncated; a Newick tree ends with ';'",
        )
    roots = sum(1 for p in parent if p == -1)
    if roots != 1:
        raise fail("the text holds more than one tree", 0, "end each tree with ';'")
    return TreeArrays(
        parent=np.asarray(parent, dtype=np.int64),
        edge_length=np.asarray(lengths, dtype=np.float64),
        labels=labels,
        rooted=rooted,
        comments=comments,
        length_decimals=np.asarray(decimals, dtype=np.int16),
    )


def written_decimals(number: str) -> int:
    """Return the decimal places a number was written with: the position of
    its last written digit after the point (``"0.250"`` -> 3, ``"2.5e-3"``
    -> 4, ``"12"`` -> 0, ``"1.5e2"`` -> 0); used to judge how much of a
    deviation rounding in the file can explain."""
    mantissa, _, exponent = number.lower().partition("e")
    _, _, fraction = mantissa.partition(".")
    places = len(fraction) - (int(exponent) if exponent else 0)
    return max(places, 0)


def to_newick(
    tree: TreeArrays,
    *,
    lengths: bool = True,
    precision: int | None = None,
    decimals: int | None = None,
    comments: bool = False,
) -> str:
    """Write ``tree`` as Newick text, quoting only labels that need it.

    Args:
        lengths: write branch lengths (missing ones are left out).
        precision: significant digits for lengths; ``None`` writes
            Python's shortest round-trip form (repr).
        decimals: digits after the point for every length, in fixed
            notation (``decimals=3`` writes ``1.500``); instead of
            ``precision``.
        comments: write each node's bracketed comments
            (:attr:`TreeArrays.comments`) after its label.

    Returns:
        One line ending in ';', children in stored order; [&R] or [&U]
        first when the rooting is known.

    Raises:
        InputError: both ``precision`` and ``decimals`` are given.
    """
    if precision is not None and decimals is not None:
        raise InputError(
            "give the lengths either significant digits or decimal places, not both",
            field="decimals",
            hint="leave precision or decimals as None",
        )
    n = tree.node_count
    children: list[list[int]] = [[] for _ in range(n)]
    for node, parent in enumerate(tree.parent.tolist()[1:], start=1):
        children[parent].append(node)

    if decimals is not None:
        spec = f".{decimals}f"
    elif precision is not None:
        spec = f".{precision}g"
    else:
        spec = ""
    # Lengths formatted once, from Python floats (much faster than NumPy
    # scalars one by one).
    length_text = [
        ""
        if not lengths or math.isnan(value)
        else ":" + (format(value, spec) if spec else repr(value))
        for value in tree.edge_length.tolist()
    ]
    notes = tree.comments if comments else {}

    parts: list[str] = []
    # Iterative walk: deep trees (caterpillars of 100,000 tips) must not
    # hit Python's recursion limit.
    stack: list[tuple[int, int]] = [(0, 0)]
    while stack:
        node, state = stack.pop()
        kids = children[node]
        if state == 0 and kids:
            parts.append("(")
            stack.append((node, 1))
            stack.append((kids[0], 0))
            continue
        if 0 < state < len(kids):
            parts.append(",")
            stack.append((node, state + 1))
            stack.append((kids[state], 0))
            continue
        if kids:
            parts.append(")")
        parts.append(quote_label(tree.labels[node]))
        if node in notes:
            parts.append("".join(notes[node]))
        parts.append(length_text[node])
    prefix = {True: "[&R] ", False: "[&U] ", None: ""}[tree.rooted]
    return prefix + "".join(parts) + ";"


def from_dendropy(tree: object) -> TreeArrays:
    """Build the array view of a ``dendropy.Tree``.

    Tip labels are taken from the taxa (or node labels where a node has no
    taxon) exactly as DendroPy holds them.
    """
    nodes = list(tree.preorder_node_iter())  # type: ignore[attr-defined]
    index = {id(node): i for i, node in enumerate(nodes)}
    parent = np.full(len(nodes), -1, dtype=np.int64)
    lengths = np.full(len(nodes), np.nan)
    labels: list[str] = []
    for i, node in enumerate(nodes):
        if node.parent_node is not None:
            parent[i] = index[id(node.parent_node)]
        if node.edge.length is not None:
            lengths[i] = node.edge.length
        if node.taxon is not None:
            labels.append(node.taxon.label or "")
        else:
            labels.append(node.label or "")
    rooted = getattr(tree, "is_rooted", None)
    return TreeArrays(parent=parent, edge_length=lengths, labels=labels, rooted=rooted)
