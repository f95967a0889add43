"""Render the demo report in headless Chromium and check the screenshot is not blank.

Usage: python scripts/check_report.py [REPORT.html] [--screenshot OUT.png]

Without a report, ranks the bundled field sample into a temporary folder and writes
its report first.  Chromium runs with no network-related background services and an
empty profile; the screenshot must show a page that is not one flat colour (at least
``MIN_DISTINCT_SHADES`` grey levels and ``MIN_INK_FRACTION`` of non-white pixels).
Exit code 0 when the check passes, 1 otherwise.
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

MIN_DISTINCT_SHADES = 16
MIN_INK_FRACTION = 0.02
WINDOW = "1280,4000"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars"]


def chromium() -> str:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    sys.exit("chromium not found: install the Debian package `chromium` (make check-report does)")


def screenshot(report: Path, out: Path) -> None:
    with tempfile.TemporaryDirectory(prefix="prioritize-chromium-") as profile:
        command = [chromium(), *FLAGS, f"--user-data-dir={profile}", f"--window-size={WINDOW}",
                   f"--screenshot={out}", report.resolve().as_uri()]
        subprocess.run(command, check=True, timeout=180, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)


def not_blank(png: Path) -> tuple[bool, str]:
    import numpy as np
    from matplotlib.image import imread

    image = imread(png)[..., :3]
    grey = np.round(image.mean(axis=2) * 255).astype(int)
    shades = np.unique(grey).size
    ink = float((grey < 250).mean())
    text = f"{image.shape[1]}x{image.shape[0]} px, {shades} grey levels, {ink:.1%} non-white"
    return shades >= MIN_DISTINCT_SHADES and ink >= MIN_INK_FRACTION, text


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("report", nargs="?", type=Path)
    parser.add_argument("--screenshot", type=Path, default=Path("report_screenshot.png"))
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="prioritize-report-") as work:
        report = args.report
        if report is None:
            root = Path(__file__).resolve().parents[1]
            ranked = Path(work) / "field_ranked.csv"
            subprocess.run([sys.executable, "-m", "prioritize.cli", "rank",
                            str(root / "sample_catalogs" / "field_stars.csv"), "-o", str(ranked), "--report"],
                           check=True, stdout=subprocess.DEVNULL)
            report = Path(work) / "field_ranked_report.html"
        screenshot(report, args.screenshot)
    ok, text = not_blank(args.screenshot)
    print(f"{'ok' if ok else 'BLANK'}: screenshot {args.screenshot} of {report.name}: {text}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
