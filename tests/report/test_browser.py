"""Render report.html in headless Chromium: it draws a non-blank page and holds the verdict.

Skipped when Chromium is not installed. The flags keep Chromium off the network
(no background requests, no component updates, no sync) and out of the home
folder (a throw-away profile).
"""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from matplotlib.image import imread

WINDOW = (1200, 3000)
_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
          "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def _chromium() -> str:
    for candidate in ("/usr/bin/chromium", shutil.which("chromium"),
                      shutil.which("chromium-browser")):
        if candidate and Path(candidate).is_file():
            return candidate
    pytest.skip("Chromium not installed: apt-get install chromium")


def _run(args: list[str], tmp_path: Path) -> subprocess.CompletedProcess:
    command = [_chromium(), *_FLAGS, f"--user-data-dir={tmp_path / 'profile'}", *args]
    return subprocess.run(command, capture_output=True, text=True, timeout=90, check=False)


@pytest.fixture(scope="module")
def report_url(report_dir):
    out, _ = report_dir
    return (out / "report.html").resolve().as_uri()


def test_chromium_draws_a_non_blank_page(report_url, tmp_path):
    shot = tmp_path / "shot.png"
    result = _run([f"--screenshot={shot}", f"--window-size={WINDOW[0]},{WINDOW[1]}",
                   report_url], tmp_path)
    assert shot.is_file(), result.stderr[-2000:]
    image = imread(shot)
    assert image.shape[:2] == (WINDOW[1], WINDOW[0])
    assert float(np.var(image[..., :3])) > 0.0
    # Text and tables are drawn, not only the background: many pixels are not white.
    assert float((image[..., :3].min(axis=2) < 0.5).mean()) > 0.001


def test_chromium_dom_holds_the_recommendation(report_url, study, tmp_path):
    result = _run(["--dump-dom", report_url], tmp_path)
    dom = result.stdout
    assert "<main>" in dom, result.stderr[-2000:]
    assert f"Recommended design: {study.recommendation.label}." in dom
    for section in ("scenario", "market", "truth", "designs", "recommendation", "figures",
                    "caution"):
        assert f'<section id="{section}">' in dom
    assert dom.count('src="data:image/png;base64,') == 4
