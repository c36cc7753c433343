"""The demo: a phantom case explained with the bundled reference model, written as a report.

The outside reference for "where" is the phantom's lesion mask (the lesion as drawn), read back
with SimpleITK beside the overlay; overlays must have the CT's exact geometry (SimpleITK).
"""

import json

import numpy as np
import pytest
import SimpleITK as sitk

from explain.errors import InputError
from explain.report.demo import DEMO_LESIONS, run_demo


def test_demo_refuses_a_non_empty_folder_before_any_work(tmp_path):
    out = tmp_path / "demo"
    out.mkdir()
    (out / "mine.txt").write_text("keep")
    with pytest.raises(InputError, match="not empty"):
        run_demo(out, quiet=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["demo"]
    assert (out / "mine.txt").read_text() == "keep"


def test_demo_flow_with_an_untrained_network(tmp_path, monkeypatch, capsys):
    # The files and the summary, with an untrained reference network standing in for the
    # shipped one (what it says is meaningless; the slow tests below use the trained one).
    import explain.model as model_module
    from explain.model import build_reference, wrap_model

    monkeypatch.setattr(model_module, "load_model",
                        lambda name: wrap_model(build_reference(), name="untrained"))
    out = tmp_path / "demo"
    html = run_demo(out, seed=1, methods=("gradient",))
    captured = capsys.readouterr()
    assert "culprit segment" in captured.out and "gradient:" in captured.out
    assert "making phantom case" in captured.err
    assert html == out / "report.html" and html.exists()
    assert (out / "case" / "case.json").exists() and (out / "overlays" / "gradient.nii.gz").exists()
    report = json.loads((out / "report.json").read_text())
    assert report["model"]["name"] == "untrained" and report["settings"]["seed"] == 1
    assert report["case"]["path"] == str(out / "case" / "case.json")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["demo"]
    quiet = run_demo(tmp_path / "quiet", seed=1, methods=("gradient",), quiet=True)
    captured = capsys.readouterr()
    assert quiet.exists() and captured.out == "" and captured.err == ""


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    html = run_demo(out, seed=0, quiet=True)
    return out, html


@pytest.mark.slow
def test_demo_writes_the_report_and_the_case(demo):
    out, html = demo
    assert html == out / "report.html" and html.exists()
    assert (out / "case" / "case.json").exists()
    report = json.loads((out / "report.json").read_text())
    assert report["case"]["path"] == str(out / "case" / "case.json")
    assert report["settings"]["seed"] == 0
    segment = int(DEMO_LESIONS[0].split(":")[0])
    assert report["reference"]["lesions"][0]["segment"] == segment
    assert [p.name for p in out.parent.iterdir()] == ["out"]


@pytest.mark.slow
def test_demo_overlays_sit_on_the_ct(demo):
    out, _ = demo
    from explain.case import load_case

    case = load_case(out / "case" / "case.json")
    ct = case.image
    report = json.loads((out / "report.json").read_text())
    for method in report["settings"]["methods"]:
        overlay = sitk.ReadImage(str(out / "overlays" / f"{method}.nii.gz"))
        assert overlay.GetSize() == ct.GetSize()
        np.testing.assert_allclose(overlay.GetOrigin(), ct.GetOrigin(), atol=1e-5)
        np.testing.assert_allclose(overlay.GetSpacing(), ct.GetSpacing(), atol=1e-6)
        np.testing.assert_allclose(overlay.GetDirection(), ct.GetDirection(), atol=1e-6)
    label = sitk.ReadImage(str(out / "overlays" / "culprit.nii.gz"))
    assert label.GetSize() == ct.GetSize()
    assert (sitk.GetArrayFromImage(label) == report["culprit"]["segment_id"]).sum() > 100


def _overlay_peak_near_lesion(out, method):
    from explain.case import load_case

    case = load_case(out / "case" / "case.json")
    # the loader keeps the mask's labelled box; SimpleITK places it back on the CT's grid
    mask = sitk.GetArrayFromImage(sitk.Resample(case.reference.lesion_mask, case.image,
                                                sitk.Transform(), sitk.sitkNearestNeighbor,
                                                0)) > 0
    values = sitk.GetArrayFromImage(sitk.ReadImage(str(out / "overlays" / f"{method}.nii.gz")))
    k, j, i = np.unravel_index(int(np.argmax(values)), values.shape)
    return bool(mask[max(k - 1, 0):k + 2, max(j - 1, 0):j + 2, max(i - 1, 0):i + 2].any())


@pytest.mark.slow
@pytest.mark.parametrize("method", ["integrated_gradients", "occlusion"])
def test_demo_overlay_peaks_in_or_next_to_the_lesion(demo, method):
    out, _ = demo
    report = json.loads((out / "report.json").read_text())
    # The culprit is the lesion's segment, and the overlay's peak voxel lies in the phantom's
    # lesion mask or next to it (26-neighbourhood).
    assert report["culprit"]["segment_id"] == report["reference"]["lesions"][0]["segment"]
    assert _overlay_peak_near_lesion(out, method)


@pytest.mark.slow
@pytest.mark.browser
def test_demo_page_in_headless_chromium(demo, tmp_path, chromium):
    out, html = demo
    dom, console = chromium.run(html, tmp_path, "--dump-dom")
    assert console == []
    assert "Case phantom-0" in dom
    result = chromium.probe(html, tmp_path)
    figures = json.loads((out / "report.json").read_text())["files"]["figures"]
    assert result["count"] == len(figures)
    assert all(isinstance(size, list) and min(size) > 100 for size in result["sizes"])
    chromium.artifacts.mkdir(exist_ok=True)
    shot = chromium.artifacts / "report-demo.png"
    shot.unlink(missing_ok=True)
    chromium.run(html, tmp_path, f"--screenshot={shot}", "--window-size=1200,3200")
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
