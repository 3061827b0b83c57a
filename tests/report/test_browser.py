"""A real browser opens the report from disk: headless Chromium takes a screenshot of
a station page and of the overview, with no failed resource and a picture that is not blank."""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest

CHROMIUM = Path("/usr/bin/chromium")
pytestmark = pytest.mark.skipif(not CHROMIUM.exists(),
                                reason="/usr/bin/chromium is absent (Debian package 'chromium'; "
                                       "tools/ensure-system-libs.sh installs it)")
ERRORS = re.compile(r"Failed to load resource|ERR_|Uncaught")


def screenshot(page: Path, tmp_path: Path) -> tuple[Path, str]:
    png = tmp_path / f"{page.stem}.png"
    done = subprocess.run(
        [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         f"--user-data-dir={tmp_path / 'profile'}", f"--screenshot={png}", "--window-size=1280,2000",
         "--enable-logging=stderr", "--v=0", page.resolve().as_uri()],
        capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr[-2000:]
    return png, done.stderr


@pytest.mark.parametrize("which", ["station", "index"])
def test_page_renders_in_chromium(report_case, tmp_path, which):
    if which == "station":
        (clock,) = [f for f in report_case.injected["faults"] if f["kind"] == "clock_one_hour_off"]
        page = report_case.index.parent / f"station-{clock['station']}.html"
    else:
        page = report_case.index
    png, log = screenshot(page, tmp_path)
    assert png.is_file() and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    img = mpimg.imread(png)
    assert img.shape[:2] == (2000, 1280)
    rgb = np.round(img[..., :3] * 255).astype(np.uint8).reshape(-1, 3)
    colours = np.unique(rgb, axis=0).shape[0]
    assert colours > 200, f"only {colours} distinct colours: blank or unstyled page?"
    assert (rgb.min(axis=1) < 128).mean() > 0.01, "almost no dark pixels: no text drawn?"
    bad = [ln for ln in log.splitlines() if ERRORS.search(ln)]
    assert not bad, bad
