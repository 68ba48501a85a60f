"""Open a gasledger report in headless Chromium, take a screenshot and check the figures were rendered.

    .venv/bin/python tools/check_report.py results/demo/report.html [--png shot.png] [--fold-png first_screen.png]

Exit status 0 when the screenshot shows the figures (enough pixels in matplotlib's line colours) and the campaign
figure lies wholly above the fold of a 1400x900 window, 1 when not, 2 when no Chromium is installed (Debian:
apt-get install chromium).
"""

from __future__ import annotations

import argparse
import base64
import io
import json
import re
import shutil
import subprocess
import sys
import tempfile
from html.parser import HTMLParser
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


def screenshot(html: Path, png: Path, height: int = 6000, timeout: float = 120, width: int = 1200) -> None:
    """Render ``html`` to ``png`` (``width`` px wide, 1200 unless given) with headless Chromium."""
    browser = find_chromium()
    if browser is None:
        raise FileNotFoundError("no chromium on PATH (Debian: apt-get install chromium)")
    with tempfile.TemporaryDirectory() as profile:
        cmd = [browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", f"--window-size={width},{height}",
               f"--screenshot={png}", html.resolve().as_uri()]
        subprocess.run(cmd, check=True, capture_output=True, timeout=timeout)


def figure_pixels(png: Path, tolerance: float = 0.08) -> int:
    """Number of screenshot pixels within ``tolerance`` of a figure line colour."""
    img = imread(png)[..., :3]
    dist = np.min(np.linalg.norm(img[..., None, :] - FIGURE_COLOURS[None, None], axis=-1), axis=-1)
    return int(np.sum(dist < tolerance))


#: the <img> id of the campaign figure (pipeline.report.campaign_figure.IMG_ID)
CAMPAIGN_FIGURE_ID = "campaign-figure"
#: the window a reader first sees: the campaign figure must lie wholly inside it
FOLD = (1400, 900)

_BOX_SCRIPT = """<script>window.addEventListener('load', function () {
  var e = document.getElementById(%s), p = document.createElement('pre'), r = e ? e.getBoundingClientRect() : null;
  p.id = 'check-report-box';
  p.textContent = r ? [r.left + scrollX, r.top + scrollY, r.right + scrollX, r.bottom + scrollY].join(' ') : 'none';
  document.body.appendChild(p);
});</script>"""


def element_box(html: Path, element_id: str, width: int = FOLD[0], timeout: float = 120
                ) -> tuple[float, float, float, float] | None:
    """Page coordinates (left, top, right, bottom, CSS px) of the element ``element_id`` in a ``width`` px window.

    Chromium loads a copy of the page with a small script that writes the element's box into the DOM once every
    image is loaded, and prints the DOM (--dump-dom); None when the page has no such element.
    """
    browser = find_chromium()
    if browser is None:
        raise FileNotFoundError("no chromium on PATH (Debian: apt-get install chromium)")
    text = html.read_text(encoding="utf-8")
    script = _BOX_SCRIPT % json.dumps(element_id)
    text = text.replace("</body>", script + "</body>") if "</body>" in text else text + script
    with tempfile.TemporaryDirectory() as tmp:
        page = Path(tmp) / "page.html"
        page.write_text(text, encoding="utf-8")
        cmd = [browser, *CHROMIUM_FLAGS, f"--user-data-dir={tmp}/profile", f"--window-size={width},{FOLD[1]}",
               "--virtual-time-budget=10000", "--dump-dom", page.as_uri()]
        out = subprocess.run(cmd, check=True, capture_output=True, text=True, timeout=timeout).stdout
    found = re.search(r'<pre id="check-report-box">([^<]*)</pre>', out)
    if found is None:
        raise RuntimeError("chromium printed no element box: the page's load event did not run")
    if found.group(1).strip() == "none":
        return None
    left, top, right, bottom = (float(x) for x in found.group(1).split())
    return left, top, right, bottom


def campaign_figure_above_fold(html: Path, png: Path | None = None, min_pixels: int = 200) -> tuple[bool, str]:
    """Whether the campaign figure lies wholly above the fold of a 1400x900 window, with a one-line reason.

    The figure's box comes from the DOM (:func:`element_box`); a 1400x900 screenshot (kept at ``png``) must show
    figure colours inside that box, so the figure was drawn there and not merely laid out.
    """
    box = element_box(html, CAMPAIGN_FIGURE_ID)
    if box is None:
        return False, f"no element with id '{CAMPAIGN_FIGURE_ID}' (the campaign figure) in the page"
    left, top, right, bottom = box
    if right - left < 200 or bottom - top < 150:
        return False, f"the campaign figure is only {right - left:.0f}x{bottom - top:.0f} px"
    if top < 0 or bottom > FOLD[1] or right > FOLD[0]:
        return False, (f"the campaign figure spans y = {top:.0f}-{bottom:.0f} px, beyond the fold at {FOLD[1]} px "
                       f"of a {FOLD[0]}x{FOLD[1]} window")
    with tempfile.TemporaryDirectory() as tmp:
        shot = png or Path(tmp) / "fold.png"
        screenshot(html, shot, height=FOLD[1], width=FOLD[0])
        img = imread(shot)[..., :3]
        inside = img[int(top):int(np.ceil(bottom)), int(left):int(np.ceil(right))]
        dist = np.min(np.linalg.norm(inside[..., None, :] - FIGURE_COLOURS[None, None], axis=-1), axis=-1)
        n = int(np.sum(dist < 0.08))
    if n < min_pixels:
        return False, f"the campaign figure's box holds only {n} pixels in the figure colours: not rendered?"
    return True, (f"campaign figure above the fold: y = {top:.0f}-{bottom:.0f} px of {FOLD[1]}, {n} pixels in the "
                  "figure colours")


class _CubeImages(HTMLParser):
    """The ``<img class="cube-image">`` elements of a page: their alt text and decoded PNG size."""

    def __init__(self) -> None:
        super().__init__()
        self.images: list[tuple[str, tuple[int, int]]] = []

    def handle_starttag(self, tag: str, attrs) -> None:
        a = dict(attrs)
        if tag != "img" or "cube-image" not in (a.get("class") or "").split():
            return
        src = a.get("src") or ""
        size = (0, 0)
        if src.startswith("data:image/png;base64,"):
            try:
                img = imread(io.BytesIO(base64.b64decode(src.split(",", 1)[1])), format="png")
                size = (int(img.shape[1]), int(img.shape[0]))
            except (ValueError, OSError):
                size = (0, 0)
        self.images.append((a.get("alt") or "", size))


def cube_images(html: Path, timeout: float = 120) -> list[tuple[str, tuple[int, int]]]:
    """The cube images (``<img class="cube-image">``) of the page as headless Chromium parsed it (its DOM after
    loading): (alt text, (width, height) of the decoded PNG; (0, 0) when it does not decode), in page order."""
    browser = find_chromium()
    if browser is None:
        raise FileNotFoundError("no chromium on PATH (Debian: apt-get install chromium)")
    with tempfile.TemporaryDirectory() as profile:
        cmd = [browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "--dump-dom", html.resolve().as_uri()]
        dom = subprocess.run(cmd, check=True, capture_output=True, timeout=timeout, text=True).stdout
    parser = _CubeImages()
    parser.feed(dom)
    return parser.images


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("report", type=Path)
    parser.add_argument("--png", type=Path, default=None, help="keep the screenshot here")
    parser.add_argument("--min-pixels", type=int, default=3000)
    parser.add_argument("--fold-png", type=Path, default=None,
                        help="keep the 1400x900 screenshot (what a reader sees first) here")
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
    fold_ok, why = campaign_figure_above_fold(args.report, args.fold_png)
    print(f"check_report: {why}")
    return 0 if ok and fold_ok else 1


if __name__ == "__main__":
    sys.exit(main())
