"""report.html renders in a real browser (headless Chromium) with every figure loaded.

The check copies the report, appends a tiny script that writes each
image's ``complete`` flag and natural size into the DOM, and reads the DOM
back with ``--dump-dom``.  A control page with a broken image proves the
check can fail.  Skipped (with the reason) only where Chromium is absent.
"""
from __future__ import annotations

import base64
import json
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

CANDIDATES = ("/usr/bin/chromium", shutil.which("chromium") or "", shutil.which("chromium-browser") or "")
CHROMIUM = next((p for p in CANDIDATES if p and Path(p).exists()), None)
needs_chromium = pytest.mark.skipif(CHROMIUM is None, reason="Chromium not installed (Debian package 'chromium'); "
                                                             "the browser render check needs it")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
         "--disable-component-update", "--disable-sync"]
PROBE = ("<script>window.addEventListener('load', () => {"
         "const r = [...document.images].map(i => ({complete: i.complete, w: i.naturalWidth, h: i.naturalHeight}));"
         "const p = document.createElement('pre'); p.id = 'kncast-img-check'; p.textContent = JSON.stringify(r);"
         "document.body.appendChild(p);});</script>")
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """report.html of the demo plan (``kncast demo``), built once for this module."""
    from kncast.planner.cli import main

    out = tmp_path_factory.mktemp("render") / "demo"
    assert main(["demo", "--out", str(out)]) == 0
    return out / "report.html"


def _chromium(tmp_path, *args, timeout=120):
    profile = tmp_path / "chromium-profile"
    profile.mkdir(exist_ok=True)
    return subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", *args], capture_output=True,
                          text=True, timeout=timeout)


def _image_states(tmp_path, html_text: str) -> list[dict]:
    page = tmp_path / "probe.html"
    page.write_text(html_text.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    r = _chromium(tmp_path, "--virtual-time-budget=10000", "--dump-dom", page.as_uri())
    m = re.search(r'<pre id="kncast-img-check">(.*?)</pre>', r.stdout, re.S)
    assert m, f"Chromium did not run the probe (exit {r.returncode}): {r.stderr[-400:]}"
    return json.loads(m.group(1).replace("&quot;", '"'))


def test_every_img_is_an_embedded_png(report):
    text = report.read_text(encoding="utf-8")
    srcs = re.findall(r'<img[^>]*\ssrc="([^"]+)"', text)
    assert len(srcs) >= 3  # campaign chart, light curve, at least one spectral panel
    for src in srcs:
        assert src.startswith("data:image/png;base64,"), src[:60]
        data = base64.b64decode(src.split(",", 1)[1], validate=True)
        assert data[:8] == PNG_SIGNATURE
    assert not re.search(r'\s(src|href)="(?!data:)[^"#]', text), "report.html must not link outside itself"


@needs_chromium
def test_chromium_loads_every_figure(report, tmp_path):
    states = _image_states(tmp_path, report.read_text(encoding="utf-8"))
    assert states, "no images found by the browser"
    assert all(s["complete"] and s["w"] > 100 and s["h"] > 100 for s in states), states


@needs_chromium
def test_probe_detects_a_broken_image(tmp_path):
    broken = ('<!DOCTYPE html><html><body><img alt="x" src="data:image/png;base64,'
              + base64.b64encode(b"not a png").decode() + '"></body></html>')
    states = _image_states(tmp_path, broken)
    assert states == [{"complete": True, "w": 0, "h": 0}]


@needs_chromium
def test_screenshot_is_not_blank(report, tmp_path):
    import matplotlib.image as mpimg

    shot = tmp_path / "shot.png"
    r = _chromium(tmp_path, "--window-size=1200,2400", "--virtual-time-budget=10000", f"--screenshot={shot}",
                  report.as_uri())
    assert shot.exists(), r.stderr[-400:]
    pixels = mpimg.imread(shot)[..., :3]
    assert pixels.shape[0] >= 2000 and pixels.shape[1] >= 1100
    # a rendered page has text and figures: many distinct grey levels, not one flat colour
    grey = np.round(pixels.mean(axis=2) * 255).astype(int)
    assert grey.std() > 10 and np.unique(grey).size > 50
