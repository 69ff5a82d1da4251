"""Long-run section 'drift' (being built; the skeleton lets the other sections and the report wire in)."""

from __future__ import annotations

from ..errors import AnalysisError


def analyse(con, settings, through_end):
    raise AnalysisError("section 'drift' is not built yet")
