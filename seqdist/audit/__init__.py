"""Auditing a distance matrix: violated triangles, bounds, tree-likeness and the suspect taxa."""

from seqdist.audit.report import AuditReport, audit
from seqdist.audit.suspects import Suspect, SuspectReport, find_suspects

__all__ = ["audit", "AuditReport", "find_suspects", "Suspect", "SuspectReport"]
