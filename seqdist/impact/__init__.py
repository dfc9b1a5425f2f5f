"""What a matrix change does to the tree: comparisons on one taxon set, and bootstrap support."""

from seqdist.impact.compare import ImpactResult, impact, remedy_table
from seqdist.impact.result import ImpactReport, RemedyTable
from seqdist.impact.support import add_support, split_support

__all__ = ["impact", "ImpactResult", "ImpactReport", "RemedyTable", "remedy_table", "add_support", "split_support"]
