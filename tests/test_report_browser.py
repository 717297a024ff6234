"""report.html in a real browser (headless Chromium, the Debian package): every image loads, the page is not blank.

Chromium is an outside check of "self-contained": the page is opened from a
file with networking disabled, so an image that is not embedded as a data: URI
would not load. Skips with a reason when /usr/bin/chromium is absent
(.ci/run installs it).
"""
from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import cv2
import numpy as np
import pytest

from test_outputs import fake_stages, write_synthetic_video

CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="headless Chromium not installed (apt-get install chromium)")

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]

#: Appended to a copy of the page: after load, count images that failed to decode and write the
#: counts into the DOM, which --dump-dom prints.
PROBE = """<script>
window.addEventListener('load', function () {
  var imgs = Array.from(document.images);
  var broken = imgs.filter(function (i) { return !i.complete || i.naturalWidth === 0; }).length;
  var p = document.createElement('p');
  p.id = 'probe';
  p.textContent = 'images=' + imgs.length + ' broken=' + broken;
  document.body.appendChild(p);
});
</script>"""


def _chromium(tmp_path: Path, *args: str) -> subprocess.CompletedProcess:
    profile = tmp_path / f"profile{len(list(tmp_path.glob('profile*')))}"
    profile.mkdir()
    return subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", "--virtual-time-budget=5000", *args],
                          capture_output=True, text=True, timeout=120, cwd=tmp_path)


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    mp = pytest.MonkeyPatch()
    try:
        from feltlab.pipeline import AnalyzeSettings, analyze_clip

        tmp = tmp_path_factory.mktemp("report")
        tracks, contacts, cal = fake_stages(mp, name_b="<red & 'co'>")
        clip = write_synthetic_video(tmp / "drill <1>.mp4", tracks, cal)
        res = analyze_clip(clip, tmp / "results" / "drill", AnalyzeSettings(video=False))
        yield res.out_dir / "report.html"
    finally:
        mp.undo()


def test_report_images_load(report, tmp_path):
    html = report.read_text(encoding="utf-8")
    srcs = re.findall(r'<img src="([^"]*)"', html)
    assert len(srcs) >= 4  # two plots, a contact close-up and a whole frame
    assert all(s.startswith("data:image/png;base64,") for s in srcs)
    probe = tmp_path / "probe.html"
    probe.write_text(html.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    r = _chromium(tmp_path, "--dump-dom", probe.as_uri())
    m = re.search(r"images=(\d+) broken=(\d+)", r.stdout)
    assert m, f"no probe output from Chromium: {r.stderr[-500:]}"
    assert int(m.group(1)) == len(srcs)
    assert int(m.group(2)) == 0
    # escaped labels arrive as text, not markup
    assert "&lt;red &amp; 'co'&gt;" in r.stdout or "&lt;red &amp; &#39;co&#39;&gt;" in r.stdout


def test_report_screenshot_not_blank(report, tmp_path):
    shot = tmp_path / "shot.png"
    r = _chromium(tmp_path, "--window-size=1200,1800", f"--screenshot={shot}", report.as_uri())
    assert shot.is_file(), r.stderr[-500:]
    img = cv2.imread(str(shot), cv2.IMREAD_GRAYSCALE)
    assert img is not None and img.shape == (1800, 1200)
    assert float(np.var(img)) > 200.0  # text, tables and plots, not an empty page
    # and the page shows pictures: a good share of pixels are neither white nor black text
    mid = np.mean((img > 40) & (img < 215))
    assert mid > 0.05
