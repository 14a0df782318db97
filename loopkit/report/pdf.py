"""Print the report page to PDF, or photograph it to PNG, with headless Chromium.

Chromium is found as ``$LOOPKIT_CHROMIUM``, else ``chromium`` or ``chromium-browser`` on the
PATH (Debian's package ``chromium``).  Each run gets a fresh profile folder and no network
services, and the page is loaded from a temporary file: the report refers to nothing outside
itself, so nothing else is fetched.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

from ..errors import DesignError

__all__ = ["CHROMIUM_FLAGS", "ChromiumMissing", "ReportRenderError", "find_chromium", "html_to_pdf", "html_to_png"]

#: Flags of every run: headless, no sandbox (CI runs as root), no GPU, no background network traffic.
CHROMIUM_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--disable-default-apps", "--disable-extensions", "--hide-scrollbars", "--mute-audio")
#: Longest a run may take, s.
TIMEOUT_S = 180


class ChromiumMissing(DesignError):
    """Headless Chromium is needed for a PDF (or PNG) and is not installed."""

    def __init__(self):
        super().__init__("chromium", "not found", "a PDF needs headless Chromium: install Debian's package"
                         " (apt-get install chromium) or set LOOPKIT_CHROMIUM to its path; the HTML report needs"
                         " nothing")


class ReportRenderError(DesignError):
    """Chromium ran but made no file."""


def find_chromium() -> str:
    """Path of the Chromium executable; :class:`ChromiumMissing` when there is none."""
    given = os.environ.get("LOOPKIT_CHROMIUM")
    if given:
        if Path(given).is_file() and os.access(given, os.X_OK):
            return given
        raise ChromiumMissing()
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    raise ChromiumMissing()


def _run(html_text: str, out_name: str, extra: list[str]) -> bytes:
    exe = find_chromium()
    with tempfile.TemporaryDirectory(prefix="loopkit-report-") as tmp:
        page = Path(tmp) / "report.html"
        page.write_text(html_text, encoding="utf-8")
        out = Path(tmp) / out_name
        profile = Path(tmp) / "profile"
        cmd = [exe, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", f"--crash-dumps-dir={tmp}/crash",
               *[a.replace("{out}", str(out)) for a in extra], page.as_uri()]
        env = dict(os.environ, HOME=tmp)  # nothing written into the user's own folders
        try:
            proc = subprocess.run(cmd, check=False, stdin=subprocess.DEVNULL, capture_output=True, timeout=TIMEOUT_S, env=env)
        except subprocess.TimeoutExpired:
            raise ReportRenderError("chromium", exe, f"did not finish within {TIMEOUT_S} s") from None
        if not out.is_file() or out.stat().st_size == 0:
            tail = proc.stderr.decode("utf-8", "replace").strip().splitlines()[-3:]
            raise ReportRenderError("chromium", exe, f"made no {out_name} (exit status {proc.returncode}): "
                                    + " / ".join(tail))
        return out.read_bytes()


def html_to_pdf(html_text: str, pdf_path=None) -> bytes:
    """The PDF of an HTML page (A4, the page's own print style, no browser header or footer).

    Returns the PDF's bytes and writes them to ``pdf_path`` when given.
    """
    data = _run(html_text, "report.pdf", ["--no-pdf-header-footer", "--print-to-pdf={out}"])
    if pdf_path is not None:
        Path(pdf_path).write_bytes(data)
    return data


def html_to_png(html_text: str, png_path=None, width: int = 1100, height: int = 1500) -> bytes:
    """A screenshot of the page's top ``width`` x ``height`` pixels as PNG bytes (written to ``png_path``)."""
    if not (200 <= width <= 4000 and 200 <= height <= 30000):
        raise DesignError("window size", f"{width}x{height}", "must be 200 to 4000 wide and 200 to 30000 high")
    data = _run(html_text, "shot.png", [f"--window-size={width},{height}", "--screenshot={out}"])
    if png_path is not None:
        Path(png_path).write_bytes(data)
    return data
