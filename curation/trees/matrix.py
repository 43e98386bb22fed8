"""The phylogenetic variance-covariance matrix, built only on request.

Under Brownian motion the covariance of two tips is the length of the path
they share from the root, that is the depth of their most recent common
ancestor, and a tip's variance is its own depth (Felsenstein 1985,
*Am. Nat.* 125:1-15; Martins and Hansen 1997, *Am. Nat.* 149:646-667).
Methods that invert it (GLS, likelihoods) need it positive definite.

The matrix takes n x n x 8 bytes, so every function here first states the
memory it needs and refuses above a limit.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from curation.errors import InputError
from curation.findings import Finding, Severity
from curation.trees.arrays import TreeArrays

__all__ = [
    "DEFAULT_MEMORY_LIMIT_BYTES",
    "check_covariance",
    "covariance_matrix",
    "covariance_report",
    "matrix_bytes",
]

DEFAULT_MEMORY_LIMIT_BYTES = 1 << 30
"""1 GiB: a matrix of about 11,500 tips."""

# The checks hold the matrix, its Cholesky factor and the eigen-solver's
# copy and eigenvectors at once.
_CHECK_COPIES = 4


def matrix_bytes(tips: int, copies: int = 1) -> int:
    """Return the bytes ``copies`` float64 matrices of ``tips`` x ``tips`` take."""
    return int(tips) * int(tips) * 8 * copies


def _human(nbytes: int) -> str:
    size = float(nbytes)
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB"):
        if size < 1024 or unit == "TiB":
            return f"{size:.0f} {unit}" if unit == "bytes" else f"{size:.1f} {unit}"
        size /= 1024
    return f"{size:.1f} TiB"  # pragma: no cover


def _guard(tips: int, copies: int, limit: int | None) -> None:
    limit = DEFAULT_MEMORY_LIMIT_BYTES if limit is None else limit
    needed = matrix_bytes(tips, copies)
    if needed > limit:
        raise InputError(
            f"the {tips} x {tips} covariance matrix needs {needed:,} bytes "
            f"({_human(needed)}{' with working copies' if copies > 1 else ''}), "
            f"above the limit of {limit:,} bytes ({_human(limit)})",
            field="memory limit",
            hint="raise --memory-limit if the machine has the memory, or prune the tree first",
        )


def covariance_matrix(
    tree: TreeArrays, *, memory_limit_bytes: int | None = None
) -> tuple[list[str], np.ndarray]:
    """Build the phylogenetic variance-covariance matrix of ``tree``.

    Entry (i, j) is the depth of the most recent common ancestor of tips i
    and j; the diagonal holds the tips' depths. In preorder the common
    ancestor of two neighbouring tips is the parent of the node right after
    the first, and that of tips i < j is the shallowest of the neighbours'
    ancestors between them, so each row is one running minimum: O(n^2).

    Returns:
        (tip labels in preorder, the float64 matrix).

    Raises:
        InputError: the matrix would exceed ``memory_limit_bytes`` (default
            1 GiB; the message states the bytes needed), or a branch length
            is missing.
    """
    tips = tree.tips
    m = len(tips)
    _guard(m, 1, memory_limit_bytes)
    missing = np.isnan(tree.edge_length[1:])
    if missing.any():
        raise InputError(
            f"{int(missing.sum())} branches have no length, so the covariance matrix is undefined",
            field="branch lengths",
            hint="check the tree with `tipledger check-trees`; give every branch a length",
        )
    depths = tree.depths()
    matrix = np.empty((m, m), dtype=np.float64)
    if m == 0:
        return [], matrix
    shared = depths[tree.parent[tips[:-1] + 1]]  # depth of each neighbours' ancestor
    for i in range(m):
        matrix[i, i] = depths[tips[i]]
        if i + 1 < m:
            row = np.minimum.accumulate(shared[i:])
            matrix[i, i + 1 :] = row
            matrix[i + 1 :, i] = row
    return [tree.labels[t] for t in tips], matrix


def covariance_report(tree: TreeArrays, *, memory_limit_bytes: int | None = None) -> dict[str, Any]:
    """Check the covariance matrix of ``tree`` for the properties inverse-
    based methods need.

    Returns:
        dict with tips, bytes (of the matrix), positive_definite (whether a
        Cholesky factorisation succeeds), smallest_eigenvalue,
        largest_eigenvalue, condition_number (largest over smallest
        eigenvalue; inf when singular) and singular_tips: the tips with
        weight in the matrix's null space (numerically zero eigenvalues,
        below n * machine epsilon * the largest), i.e. the tips whose rows
        are combinations of others, such as sister tips with zero-length
        terminal branches.

    Raises:
        InputError: above the memory limit (stating the bytes needed), or
            missing branch lengths.
    """
    m = len(tree.tips)
    _guard(m, _CHECK_COPIES, memory_limit_bytes)
    labels, matrix = covariance_matrix(tree, memory_limit_bytes=memory_limit_bytes)
    if m == 0:
        return {"tips": 0, "bytes": 0, "positive_definite": False, "singular_tips": []}
    try:
        np.linalg.cholesky(matrix)
        positive = True
    except np.linalg.LinAlgError:
        positive = False
    values, vectors = np.linalg.eigh(matrix)
    largest = float(values[-1])
    smallest = float(values[0])
    cutoff = m * np.finfo(float).eps * max(abs(largest), np.finfo(float).tiny)
    null = np.abs(values) <= cutoff
    singular: list[str] = []
    if null.any():
        weight = np.abs(vectors[:, null]).max(axis=1)
        singular = sorted(labels[i] for i in np.flatnonzero(weight > 1e-6))
    condition = largest / smallest if smallest > cutoff else float("inf")
    return {
        "tips": m,
        "bytes": matrix_bytes(m),
        "positive_definite": positive and not null.any(),
        "smallest_eigenvalue": smallest,
        "largest_eigenvalue": largest,
        "condition_number": condition,
        "singular_tips": singular,
    }


def check_covariance(tree: TreeArrays, *, memory_limit_bytes: int | None = None) -> list[Finding]:
    """Return findings about the covariance matrix of ``tree``: always one
    ``tree.covariance_matrix`` (info) with the smallest eigenvalue and the
    condition number, and ``tree.covariance_not_positive_definite`` (error)
    naming the tips that make it singular when it is not positive definite.

    Raises:
        InputError: as :func:`covariance_report`.
    """
    report = covariance_report(tree, memory_limit_bytes=memory_limit_bytes)
    if report["tips"] == 0:
        return []
    findings = [
        Finding(
            code="tree.covariance_matrix",
            severity=Severity.info,
            subject="tree",
            message=f"covariance matrix of {report['tips']} tips: smallest eigenvalue "
            f"{report['smallest_eigenvalue']:.6g}, condition number "
            f"{report['condition_number']:.3g}",
            details=_json_safe(report),
        )
    ]
    if not report["positive_definite"]:
        tips = report["singular_tips"]
        shown = ", ".join(repr(t) for t in tips[:10]) + (" ..." if len(tips) > 10 else "")
        findings.append(
            Finding(
                code="tree.covariance_not_positive_definite",
                severity=Severity.error,
                subject="tree",
                message="the covariance matrix is not positive definite (an eigenvalue is "
                "numerically zero or below, or Cholesky fails)"
                + (f"; tips that make it singular: {shown}" if tips else ""),
                details=_json_safe(report),
            )
        )
    return findings


def _json_safe(report: dict[str, Any]) -> dict[str, Any]:
    # JSON has no infinity: an infinite condition number is stored as None.
    return {
        k: (None if isinstance(v, float) and not np.isfinite(v) else v) for k, v in report.items()
    }
