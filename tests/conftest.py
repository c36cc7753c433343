"""Fixtures shared by every test folder: headless Chromium for the pages we write."""

import json
import os
import re
import shutil
import subprocess
from pathlib import Path
from types import SimpleNamespace

import pytest

# -- headless Chromium (Debian's chromium), shared by the browser tests --------------------------

ARTIFACTS = Path(__file__).resolve().parents[1] / "test-artifacts"

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
    """Load ``page`` in headless Chromium; return (stdout, console lines)."""
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
    """Load a copy of ``page`` with PROBE added; return what it found about the images."""
    copy = tmp_path / f"probe-{page.name}"
    copy.write_text(page.read_text().replace("</body>", PROBE + "</body>"))
    dom, _ = _run(copy, tmp_path, "--dump-dom")
    found = re.search(r'<pre id="probe">(.*?)</pre>', dom, re.S)
    assert found, "the probe did not run: " + dom[-500:]
    return json.loads(found.group(1).replace("&quot;", '"'))



@pytest.fixture
def chromium():
    """Runs pages in headless Chromium; skipped only when it is absent and CI is not set."""
    _chromium()
    return SimpleNamespace(run=_run, probe=_probe, artifacts=ARTIFACTS)
