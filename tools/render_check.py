"""Headless render check of an HTML report: screenshot it with Chromium, fail if blank.

Usage: ``python tools/render_check.py REPORT.html SCREENSHOT.png``

Exit codes: 0 rendered (or skipped: no Chromium found, message on stdout), 1 no screenshot
was written or it is blank (nearly one colour), 2 bad usage.  The browser runs with a
fresh profile in a temporary folder, without network services, sandbox or GPU (for
containers and CI).
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

#: Browser executables tried, in order.
BROWSERS = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
#: A screenshot counts as blank when fewer than this fraction of its pixels differ from the
#: most common colour (a rendered report has text, tables and plots well above it).
MIN_INK_FRACTION = 0.005
TIMEOUT_S = 120


def find_browser() -> str | None:
    """Path of the first Chromium-family browser on PATH, or None."""
    return next((p for p in map(shutil.which, BROWSERS) if p), None)


def ink_fraction(png: Path) -> float:
    """Fraction of pixels that differ from the image's most common colour (by > 2 %)."""
    import matplotlib.image as mpimg  # only here: the check needs no plotting state

    img = np.asarray(mpimg.imread(png), dtype=float)
    rgb = img[..., :3].reshape(-1, 3) if img.ndim == 3 else img.reshape(-1, 1)
    colours, counts = np.unique(np.round(rgb, 2), axis=0, return_counts=True)
    common = colours[np.argmax(counts)]
    return float(np.mean(np.max(np.abs(rgb - common), axis=1) > 0.02))


def screenshot(browser: str, report: Path, png: Path) -> subprocess.CompletedProcess[str]:
    """Run the browser headless on ``file://report`` and write ``png``."""
    with tempfile.TemporaryDirectory(prefix="runup-render-") as profile:
        cmd = [
            browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            f"--user-data-dir={profile}", "--window-size=1400,3000", f"--screenshot={png}",
            report.resolve().as_uri(),
        ]
        return subprocess.run(cmd, capture_output=True, text=True, timeout=TIMEOUT_S, check=False)


def main(argv: list[str]) -> int:
    """Check one report; see the module docstring for the exit codes."""
    if len(argv) != 2:
        print("usage: python tools/render_check.py REPORT.html SCREENSHOT.png", file=sys.stderr)
        return 2
    report, png = Path(argv[0]), Path(argv[1])
    if not report.is_file():
        print(f"error: {report}: no such report", file=sys.stderr)
        return 2
    browser = find_browser()
    if browser is None:
        print("skipped: no chromium (install the 'chromium' package to run the render check)")
        return 0
    png.unlink(missing_ok=True)
    try:
        result = screenshot(browser, report, png)
    except subprocess.TimeoutExpired:
        print(f"render check failed: {browser} did not finish within {TIMEOUT_S} s", file=sys.stderr)
        return 1
    if not png.is_file() or png.stat().st_size == 0:
        tail = (result.stderr or "").strip().splitlines()[-3:]
        print(f"render check failed: no screenshot written (exit {result.returncode}): {' | '.join(tail)}",
              file=sys.stderr)
        return 1
    ink = ink_fraction(png)
    if ink < MIN_INK_FRACTION:
        print(f"render check failed: {png} is blank ({ink:.2%} of pixels differ from the background)",
              file=sys.stderr)
        return 1
    print(f"rendered: {png} ({ink:.1%} of pixels drawn)")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
