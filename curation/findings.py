"""The one shape every check reports: a finding.

A finding has a dotted ``code`` (``tree.zero_length_branch``), a
``severity``, a ``subject`` that identifies what it is about stably (a tip
label, a node named by two tips and its descendant count, a measurement
id), a ``message`` for a person and free-form ``details``.
"""

from __future__ import annotations

from enum import StrEnum
from typing import Any

import pandas as pd
from pydantic import BaseModel, ConfigDict, Field

__all__ = ["Severity", "Finding", "findings_frame"]


class Severity(StrEnum):
    """How much a finding matters for analysis."""

    info = "info"
    warning = "warning"
    error = "error"


class Finding(BaseModel):
    """One detected problem, in the shape shared by every check."""

    model_config = ConfigDict(frozen=True)

    code: str = Field(description="dotted code, e.g. 'tree.polytomy'")
    severity: Severity
    subject: str = Field(description="stable identifier of what it is about")
    message: str = Field(description="one sentence for a person")
    details: dict[str, Any] = Field(default_factory=dict)


FINDING_COLUMNS = ["code", "severity", "subject", "message", "details"]


def findings_frame(findings: list[Finding]) -> pd.DataFrame:
    """Return findings as a DataFrame with columns code, severity, subject,
    message and details, sorted by code then subject for stable output."""
    if not findings:
        return pd.DataFrame(columns=FINDING_COLUMNS)
    frame = pd.DataFrame(
        [
            {
                "code": f.code,
                "severity": f.severity.value,
                "subject": f.subject,
                "message": f.message,
                "details": f.details,
            }
            for f in findings
        ]
    )
    return frame.sort_values(["code", "subject"], kind="stable").reset_index(drop=True)
