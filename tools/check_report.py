"""Open a gasledger report in headless Chromium, take a screenshot and check the figures were rendered.

    .venv/bin/python tools/check_report.py results/demo/report.html [--png shot.png]

Exit status 0 when the screenshot shows the figures (enough pixels in matplotlib's line colours), 1 when it
does not, 2 when no Chromium is installed (Debian: apt-get install chromium).
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
from matplotlib.image import imread

#: matplotlib's default cycle colours used by the report figures (tab:blue, tab:orange, tab:green, tab:red)
FIGURE_COLOURS = np.array([(31, 119, 180), (255, 127, 14), (44, 160, 44), (214, 39, 40)]) / 255.0
CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--hide-scrollbars"]


def find_chromium() -> str | None:
    """Path of a Chromium binary, or None."""
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


def screenshot(html: Path, png: Path, height: int = 6000, timeout: float = 120) -> None:
    """Render ``html`` to ``png`` (1200 px wide) with headless Chromium."""
    browser = find_chromium()
    if browser is None:
        raise FileNotFoundError("no chromium on PATH (Debian: apt-get install chromium)")
    with tempfile.TemporaryDirectory() as profile:
        cmd = [browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", f"--window-size=1200,{height}",
               f"--screenshot={png}", html.resolve().as_uri()]
        subprocess.run(cmd, check=True, capture_output=True, timeout=timeout)


def figure_pixels(png: Path, tolerance: float = 0.08) -> int:
    """Number of screenshot pixels within ``tolerance`` of a figure line colour."""
    img = imread(png)[..., :3]
    dist = np.min(np.linalg.norm(img[..., None, :] - FIGURE_COLOURS[None, None], axis=-1), axis=-1)
    return int(np.sum(dist < tolerance))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("report", type=Path)
    parser.add_argument("--png", type=Path, default=None, help="keep the screenshot here")
    parser.add_argument("--min-pixels", type=int, default=3000)
    args = parser.parse_args(argv)
    if find_chromium() is None:
        print("check_report: no chromium on PATH (Debian: apt-get install chromium)", file=sys.stderr)
        return 2
    with tempfile.TemporaryDirectory() as tmp:
        png = args.png or Path(tmp) / "report.png"
        screenshot(args.report, png)
        n = figure_pixels(png)
    ok = n >= args.min_pixels
    print(f"check_report: {n} pixels in the figures' colours ({'ok' if ok else 'too few: figures not rendered?'})")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
