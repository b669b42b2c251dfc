"""Example excerpts for the report (the builder lives in :mod:`seqmine.mining.excerpts`,
where the detectors file uses it too)."""

from __future__ import annotations

from ..mining.excerpts import build_examples, find_occurrence

__all__ = ["build_examples", "find_occurrence"]
