"""Long-run section 'responsiveness' (being built; the skeleton lets the other sections and the report wire in)."""

from __future__ import annotations

from ..errors import AnalysisError


def analyse(con, settings, through_end):
    raise AnalysisError("section 'responsiveness' is not built yet")
