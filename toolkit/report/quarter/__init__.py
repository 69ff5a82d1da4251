"""The quarterly promotion health report (``liftlag quarter``).

``api.build_quarter_report`` runs what a quarter needs (campaign readouts, purchase timing, the
long-run analyses when present), derives the report's own tables (``derive.py``, ``health.py``),
lays everything out (``context.py`` + ``templates/quarter.html.j2``, charts from
``toolkit/report/charts.py``) and writes tables, ``report.html``, ``report.pdf`` and
``manifest.json`` into a temporary folder that replaces the output folder only at the end.
"""
