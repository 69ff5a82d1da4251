"""PDF from the report's HTML, printed by headless Chromium (Debian's ``chromium`` package).

The browser runs with a fresh, throw-away profile and with its background network traffic
(component updates, sync, safe-browsing lists) switched off; the report itself is a local file
that loads nothing, so printing makes no request.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

from ..errors import AnalysisError

CANDIDATES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--no-default-browser-check",
         "--disable-extensions", "--mute-audio")


def find_chromium() -> str | None:
    """The browser to print with: ``LIFTLAG_CHROMIUM`` if set, else the first of CANDIDATES on PATH."""
    explicit = os.environ.get("LIFTLAG_CHROMIUM")
    if explicit:
        return explicit if Path(explicit).exists() else None
    for name in CANDIDATES:
        found = shutil.which(name)
        if found:
            return found
    return None


def require_chromium() -> str:
    browser = find_chromium()
    if browser is None:
        raise AnalysisError(
            "--pdf needs a headless Chromium and none was found on PATH (looked for "
            + ", ".join(CANDIDATES) + "); install Debian's package with `apt-get install chromium` (or set "
            "LIFTLAG_CHROMIUM to the browser's path), or run without --pdf: report.html prints the same from any browser"
        )
    return browser


def chromium_command(browser: str, profile: Path, *extra: str) -> list[str]:
    """The browser's command line with liftlag's fixed flags and a fresh profile folder."""
    return [browser, *FLAGS, f"--user-data-dir={profile}", *extra]


def html_to_pdf(html_path: Path, pdf_path: Path, *, timeout: float = 180.0) -> Path:
    """Print ``html_path`` to ``pdf_path`` (A4 by the report's print CSS, no browser header or footer).

    Raises
    ------
    AnalysisError
        When Chromium is missing, fails, or writes no PDF.
    """
    browser = require_chromium()
    html_path, pdf_path = Path(html_path).resolve(), Path(pdf_path).resolve()
    with tempfile.TemporaryDirectory(prefix="liftlag-chromium-") as profile:
        command = chromium_command(browser, Path(profile), "--no-pdf-header-footer", "--run-all-compositor-stages-before-draw",
                                   f"--print-to-pdf={pdf_path}", html_path.as_uri())
        try:
            done = subprocess.run(command, capture_output=True, text=True, timeout=timeout)
        except subprocess.TimeoutExpired:
            raise AnalysisError(f"Chromium did not finish printing {html_path} within {timeout:.0f} s") from None
    if done.returncode != 0 or not pdf_path.exists() or pdf_path.stat().st_size == 0:
        tail = (done.stderr or "").strip().splitlines()[-5:]
        raise AnalysisError(f"Chromium ({browser}) could not print {html_path} to PDF (exit {done.returncode}): "
                            + " | ".join(tail))
    return pdf_path
