"""report.html in headless Chromium (Debian's ``chromium``): it loads, logs nothing to the
console, and every embedded image decodes. A screenshot is kept under test-artifacts/.

The page itself has no scripts; to see whether images decode, the test loads a copy with a small
probe script added that reads each image's natural size once the page has loaded (a PNG the
browser's own decoder cannot read has none).
Each check is first shown to catch a page that is broken on purpose.
"""

import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

pytestmark = pytest.mark.browser

ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"

PROBE = """<script>
window.addEventListener("load", () => {
  const images = [...document.images];
  const out = document.createElement("pre");
  out.id = "probe";
  // A broken image has completed loading with no natural size.
  out.textContent = JSON.stringify({count: images.length, sizes: images.map(
    i => (i.complete && i.naturalWidth > 0) ? [i.naturalWidth, i.naturalHeight] : "failed")});
  document.body.appendChild(out);
});
</script>"""


def _chromium():
    path = shutil.which("chromium") or ("/usr/bin/chromium" if os.path.exists("/usr/bin/chromium")
                                        else None)
    if path:
        return path
    if os.environ.get("CI"):
        pytest.fail("CI is set but chromium is missing: .ci/run must install Debian's chromium "
                    "(apt-get install -y chromium)")
    pytest.skip("headless Chromium not installed (apt-get install -y chromium); under CI=true "
                "this is a failure")


def _run(page, tmp_path, *extra):
    profile = tmp_path / f"profile-{len(list(tmp_path.glob('profile-*')))}"
    cmd = [_chromium(), "--headless", "--no-sandbox", "--disable-gpu",
           "--disable-background-networking", "--disable-quic", "--no-first-run",
           "--disable-component-update", "--disable-sync", f"--user-data-dir={profile}",
           "--enable-logging=stderr", "--v=0", "--virtual-time-budget=10000", *extra,
           page.resolve().as_uri()]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    console = [line for line in done.stderr.splitlines() if ":CONSOLE" in line]
    return done.stdout, console


def _probe(page, tmp_path):
    copy = tmp_path / f"probe-{page.name}"
    copy.write_text(page.read_text().replace("</body>", PROBE + "</body>"))
    dom, _ = _run(copy, tmp_path, "--dump-dom")
    found = re.search(r'<pre id="probe">(.*?)</pre>', dom, re.S)
    assert found, "the probe did not run: " + dom[-500:]
    return json.loads(found.group(1).replace("&quot;", '"'))


def test_probe_catches_a_broken_page(tmp_path):
    bad = tmp_path / "bad.html"
    bad.write_text('<!DOCTYPE html><html><body><img src="data:image/png;base64,AAAA">'
                   '<script>console.error("on purpose")</script></body></html>')
    _, console = _run(bad, tmp_path, "--dump-dom")
    assert any("on purpose" in line for line in console)
    result = _probe(bad, tmp_path)
    assert result["count"] == 1 and result["sizes"][0].startswith("failed")


def test_report_loads_without_console_messages(written_report, tmp_path):
    out, html = written_report
    dom, console = _run(html, tmp_path, "--dump-dom")
    assert console == []
    assert "Case synthetic-1" in dom and "Where along the culprit" in dom
    # Self-contained: nothing is fetched from anywhere (every src is a data: URI, no links).
    page = html.read_text()
    assert re.findall(r'src="(?!data:)', page) == []
    assert "<link" not in page and "http://" not in page and "https://" not in page
    assert "<script" not in page


def test_every_image_decodes(written_report, tmp_path):
    out, html = written_report
    result = _probe(html, tmp_path)
    figures = json.loads((out / "report.json").read_text())["files"]["figures"]
    assert result["count"] == len(figures) > 0
    for size in result["sizes"]:
        assert isinstance(size, list) and size[0] > 100 and size[1] > 100, size


def test_screenshot_is_kept(written_report, tmp_path):
    _, html = written_report
    ARTIFACTS.mkdir(exist_ok=True)
    shot = ARTIFACTS / "report-synthetic.png"
    shot.unlink(missing_ok=True)
    _run(html, tmp_path, f"--screenshot={shot}", "--window-size=1200,3200")
    assert shot.stat().st_size > 10_000
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
