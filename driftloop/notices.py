"""Notices that the command line, the summaries and the report carry."""

from __future__ import annotations

__all__ = ["CAUTION", "CAUTION_SHORT"]

#: The caution that goes with every drift result.
CAUTION = (
    "driftloop is a research tool, not an operational search-and-rescue (SAR) system. "
    "Its flags, drift statistics and loop events may be wrong; do not base life-saving "
    "decisions on them alone. Defer to the responsible SAR authority and to licensed "
    "practice."
)

#: One-line form for the command line.
CAUTION_SHORT = (
    "Research tool, not an operational SAR system: defer to the responsible authority."
)
