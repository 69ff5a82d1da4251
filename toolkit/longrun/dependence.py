"""Long-run section 'dependence' (being built; the skeleton lets the other sections and the report wire in)."""

from __future__ import annotations

from ..errors import AnalysisError


def analyse(con, settings, through_end):
    raise AnalysisError("section 'dependence' is not built yet")
