"""report.html in headless Chromium (Debian's ``chromium``): it loads, logs nothing to the
console, and every embedded image decodes. A screenshot is kept under test-artifacts/.

The page itself has no scripts; to see whether images decode, the test loads a copy with a small
probe script added that reads each image's natural size once the page has loaded (a PNG the
browser's own decoder cannot read has none).
Each check is first shown to catch a page that is broken on purpose.
"""

import json
import re

import pytest

pytestmark = pytest.mark.browser

def test_probe_catches_a_broken_page(tmp_path, chromium):
    bad = tmp_path / "bad.html"
    bad.write_text('<!DOCTYPE html><html><body><img src="data:image/png;base64,AAAA">'
                   '<script>console.error("on purpose")</script></body></html>')
    _, console = chromium.run(bad, tmp_path, "--dump-dom")
    assert any("on purpose" in line for line in console)
    result = chromium.probe(bad, tmp_path)
    assert result["count"] == 1 and result["sizes"][0].startswith("failed")


def test_report_loads_without_console_messages(written_report, tmp_path, chromium):
    out, html = written_report
    dom, console = chromium.run(html, tmp_path, "--dump-dom")
    assert console == []
    assert "Case synthetic-1" in dom and "Where along the culprit" in dom
    # Self-contained: nothing is fetched from anywhere (every src is a data: URI, no links).
    page = html.read_text()
    assert re.findall(r'src="(?!data:)', page) == []
    assert "<link" not in page and "http://" not in page and "https://" not in page
    assert "<script" not in page


def test_every_image_decodes(written_report, tmp_path, chromium):
    out, html = written_report
    result = chromium.probe(html, tmp_path)
    figures = json.loads((out / "report.json").read_text())["files"]["figures"]
    assert result["count"] == len(figures) > 0
    for size in result["sizes"]:
        assert isinstance(size, list) and size[0] > 100 and size[1] > 100, size


def test_screenshot_is_kept(written_report, tmp_path, chromium):
    _, html = written_report
    chromium.artifacts.mkdir(exist_ok=True)
    shot = chromium.artifacts / "report-synthetic.png"
    shot.unlink(missing_ok=True)
    chromium.run(html, tmp_path, f"--screenshot={shot}", "--window-size=1200,3200")
    assert shot.stat().st_size > 10_000
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
