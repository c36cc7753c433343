"""Fixtures shared by every test folder: headless Chromium for the pages we write, and the
demo case run by ``python -m explain.cli explain`` in subprocesses (tests/test_determinism.py,
tests/test_interrupt.py)."""

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import pytest

from explain.phantom import write_phantom_case
from explain.report.demo import DEMO_LESIONS

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


# -- explain runs of the demo case in subprocesses -------------------------------------------------

def _explain_command(case, out, *, quiet=True):
    """The command line of one explain run of ``case`` with the bundled model, gradient only."""
    cmd = [sys.executable, "-m", "explain.cli", "explain", "--case", str(case),
           "--model", "builtin:reference", "--methods", "gradient", "--seed", "0",
           "--out", str(out)]
    return cmd + (["--quiet"] if quiet else [])


def _child_env(hash_seed):
    """The environment of a child run: this worktree first on the path, a chosen hash seed."""
    env = dict(os.environ)
    root = str(Path(__file__).resolve().parents[1])
    env["PYTHONPATH"] = os.pathsep.join(p for p in (root, env.get("PYTHONPATH")) if p)
    env["PYTHONHASHSEED"] = str(hash_seed)
    return env


@pytest.fixture(scope="session")
def demo_case(tmp_path_factory):
    """The demo's phantom case (seed 0, the demo lesion), written once per test session."""
    folder = tmp_path_factory.mktemp("demo-case")
    return write_phantom_case(folder / "case", seed=0, lesions=list(DEMO_LESIONS))


@pytest.fixture(scope="session")
def first_run(demo_case, tmp_path_factory):
    """One complete run's output folder, to compare other runs against."""
    out = tmp_path_factory.mktemp("first") / "out"
    done = subprocess.run(_explain_command(demo_case, out), capture_output=True, text=True,
                          env=_child_env(1), timeout=300)
    if done.returncode != 0:
        raise RuntimeError(f"reference run failed ({done.returncode}): {done.stderr}")
    return out


@pytest.fixture(scope="session")
def explain_command():
    """``explain_command(case, out, quiet=True)``: the argv of one explain run."""
    return _explain_command


@pytest.fixture(scope="session")
def child_env():
    """``child_env(hash_seed)``: the environment of a child run."""
    return _child_env
