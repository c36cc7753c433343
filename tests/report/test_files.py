"""The files an explanation writes, checked with outside readers.

Outside references: SimpleITK reads the overlays back (their geometry must be the CT's,
exactly), Python's csv and json modules read the table and the report, numpy reads the npz,
and the half-peak extent of the Gaussian blobs (FWHM = 2 sqrt(2 ln 2) sigma, elementary).
"""

import csv
import json
import math

import numpy as np
import pytest
import SimpleITK as sitk

from explain import CAUTION
from explain.errors import InputError


def test_every_file_is_written(written_report):
    out, html = written_report
    assert html == out / "report.html"
    names = {p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file()}
    assert {"report.json", "segments.csv", "attributions.npz", "report.html",
            "overlays/integrated_gradients.nii.gz", "overlays/occlusion.nii.gz",
            "overlays/culprit.nii.gz", "figures/contributions.png", "figures/tree.png",
            "figures/culprit_occlusion.png", "figures/profiles_integrated_gradients.png"} <= names
    # Nothing of the staging folder is left beside the output.
    assert [p.name for p in out.parent.iterdir()] == ["out"]


def test_report_json_fields(written_report, synthetic_explanation):
    out, _ = written_report
    report = json.loads((out / "report.json").read_text())
    assert report["format"] == "culprit-lens-report/2"
    assert report["case_id"] == "synthetic-1"
    assert set(report["model"]) >= {"name", "weights_hash"}
    assert report["settings"]["seed"] == 0
    assert set(report["prediction"]) >= {"grade", "scores"}
    assert report["target"]["requested"] == "predicted"
    assert report["culprit"]["segment_id"] == 7
    assert report["culprit"]["segment_name"] == "mid left anterior descending"
    assert report["culprit"]["margin"] == pytest.approx(1.05)
    assert CAUTION in report["cautions"]
    assert [s["id"] for s in report["segments"]] == [1, 6, 7]
    for s in report["segments"]:
        assert set(s) >= {"id", "name", "territory", "winning_channels", "gradient_x_feature",
                          "leave_one_out", "shapley", "peaks", "extent_mm"}
        for method in ("integrated_gradients", "occlusion"):
            assert set(s["peaks"][method]) >= {"arc_mm", "xyz_mm", "voxel", "value"}
            assert len(s["extent_mm"][method]) == 2
    # winners [2, 2, 0, 1, 2, 2]: segment index 2 (id 7) won channels 0, 1, 4, 5.
    assert report["segments"][2]["winning_channels"] == [0, 1, 4, 5]
    # This case's CT is no DICOM series: no DICOM objects, and a note says why.
    assert report["files"]["dicom"] == []
    dicom_notes = [n for n in report["notes"] if n.startswith("no DICOM objects written")]
    assert len(dicom_notes) == 1 and "not a DICOM series" in dicom_notes[0]
    # The report equals the in-memory dict, apart from what writing adds: the figure list and
    # the note on the DICOM objects.
    again = synthetic_explanation.to_dict()
    again["files"]["figures"] = report["files"]["figures"]
    again["notes"] += dicom_notes
    assert again == report
    # ... and both hold what tests/report/conftest.py put in, written out here by hand.
    _check_against_the_hand_made_inputs(report)


def _check_against_the_hand_made_inputs(report):
    assert set(report) == {"format", "case_id", "case", "model", "settings", "prediction",
                           "target", "culprit", "segments", "reference", "files", "cautions",
                           "notes", "warnings"}
    assert report["warnings"] == []  # the hand-made explanation has no finding to warn of
    a = math.radians(20)
    assert report["case"]["path"] == "/nowhere/case.json"
    assert report["case"]["segment_ids"] == [1, 6, 7]
    image = report["case"]["image"]
    assert image["size"] == [64, 60, 56]
    assert image["spacing_mm"] == pytest.approx([0.5, 0.5, 0.55])
    assert image["origin_mm"] == pytest.approx([-20.0, 12.0, 101.0])
    assert image["direction"] == pytest.approx(
        [math.cos(a), -math.sin(a), 0, math.sin(a), math.cos(a), 0, 0, 0, 1])
    assert report["model"] == {"name": "hand-made", "weights_hash": "0" * 16,
                               "grade_labels": ["0", "1", "2", "3"]}
    assert report["target"] == {"requested": "predicted", "label": 3, "value": 2.0}
    assert report["prediction"]["column"] == 3 and report["prediction"]["grade"] == "3"
    # the hand-made trace: gradient x feature, leave-one-out and Shapley per segment index
    rows = {s["id"]: s for s in report["segments"]}
    for sid, grad, loo, phi in ((1, 0.1, 0.05, 0.1), (6, 0.2, 0.1, 0.15), (7, 1.1, 0.9, 1.2)):
        assert rows[sid]["gradient_x_feature"] == pytest.approx(grad)
        assert "gradient" not in rows[sid]  # renamed in culprit-lens-report/2
        assert rows[sid]["leave_one_out"] == pytest.approx(loo)
        assert rows[sid]["shapley"] == pytest.approx(phi)
        assert rows[sid]["shapley_stderr"] is None
    assert [rows[i]["winning_channels"] for i in (1, 6, 7)] == [[2], [3], [0, 1, 4, 5]]
    assert [rows[i]["abbr"] for i in (1, 6, 7)] == ["pRCA", "pLAD", "mLAD"]  # SCCT 2014
    assert [rows[i]["reference_stenosis_percent"] for i in (1, 6, 7)] == [20.0, None, 60.0]
    assert report["culprit"]["shapley"] == pytest.approx(1.2)
    assert report["culprit"]["territory"] == "LAD"
    assert report["reference"] == {
        "grade": "3", "stenosis_percent": {"1": 20.0, "7": 60.0},
        "lesions": [{"segment": 7, "start_mm": 6.0, "end_mm": 10.0}], "has_lesion_mask": False}
    files = dict(report["files"])
    files.pop("figures")
    assert files == {
        "report": "report.json", "table": "segments.csv", "attributions": "attributions.npz",
        "html": "report.html", "dicom": [],
        "overlays": {"integrated_gradients": "overlays/integrated_gradients.nii.gz",
                     "occlusion": "overlays/occlusion.nii.gz",
                     "coverage": "overlays/coverage.nii.gz",
                     "culprit": "overlays/culprit.nii.gz"}}
    # the one note: no DICOM objects for a case whose CT is no DICOM series
    assert len(report["notes"]) == 1 and report["notes"][0].startswith("no DICOM objects written")


def test_peaks_where_the_hand_made_maps_peak(synthetic_explanation, synth):
    culprit = synthetic_explanation.culprit
    cs = synthetic_explanation.sections.sections[synthetic_explanation.culprit_index]
    step = cs.arc_mm[1] - cs.arc_mm[0]
    loc = culprit.locations["integrated_gradients"]
    assert abs(loc.peak.arc_mm - synth.BLOB_ARC_MM) <= step / 2
    # The blob's pixel centre is [5, 6] in every cross-section.
    assert (loc.peak.row, loc.peak.col) == (5, 6)
    # Profile along the arc is a Gaussian of sigma 2 mm: its FWHM is 2 sqrt(2 ln 2) 2 mm.
    start, end = loc.extent_mm
    assert end - start == pytest.approx(2 * math.sqrt(2 * math.log(2)) * 2.0, abs=0.25)
    # The peak voxel is the one SimpleITK gives for the peak pixel's position.
    image = synthetic_explanation.case.image
    assert loc.peak.voxel == image.TransformPhysicalPointToIndex(loc.peak.xyz_mm)


def test_overlays_have_the_ct_geometry(written_report, synthetic_explanation):
    out, _ = written_report
    ct = synthetic_explanation.case.image
    for name in ("integrated_gradients", "occlusion", "culprit"):
        img = sitk.ReadImage(str(out / "overlays" / f"{name}.nii.gz"))
        assert img.GetSize() == ct.GetSize()
        np.testing.assert_allclose(img.GetOrigin(), ct.GetOrigin(), atol=1e-5)
        np.testing.assert_allclose(img.GetSpacing(), ct.GetSpacing(), atol=1e-6)
        np.testing.assert_allclose(img.GetDirection(), ct.GetDirection(), atol=1e-6)


def test_overlay_peak_voxel_is_next_to_the_map_peak(written_report, synthetic_explanation):
    out, _ = written_report
    img = sitk.ReadImage(str(out / "overlays" / "integrated_gradients.nii.gz"))
    values = sitk.GetArrayFromImage(img)
    k, j, i = np.unravel_index(int(np.argmax(values)), values.shape)
    peak = synthetic_explanation.culprit.locations["integrated_gradients"].peak
    got = np.array(img.TransformIndexToPhysicalPoint((int(i), int(j), int(k))))
    # Within a voxel diagonal plus a cross-section step of the peak pixel.
    assert np.linalg.norm(got - np.array(peak.xyz_mm)) < 1.5


def test_culprit_label_covers_the_painted_lumen(written_report, synthetic_explanation):
    out, _ = written_report
    label = sitk.GetArrayFromImage(sitk.ReadImage(str(out / "overlays" / "culprit.nii.gz")))
    ct = sitk.GetArrayFromImage(synthetic_explanation.case.image)
    assert set(np.unique(label)) == {0, 7}
    # The label is the culprit's tube (radius 1.4 mm, same as painted): all of it is lumen.
    assert (ct[label == 7] == 350.0).all()
    # ...and it is a large part of the painted segment 7 lumen (the rest belongs to 1 and 6).
    assert (label == 7).sum() > 0.25 * (ct == 350.0).sum()


def test_attributions_npz(written_report, synthetic_explanation):
    out, _ = written_report
    with np.load(out / "attributions.npz") as data:
        assert data["segment_ids"].tolist() == [1, 6, 7]
        for method in ("integrated_gradients", "occlusion"):
            assert data[method].dtype == np.float32
            assert data[method].shape == (3, 20, 11, 11)
            np.testing.assert_array_equal(data[method], synthetic_explanation.maps[method])
        assert data["points_mm"].shape == (3, 20, 11, 11, 3)
        np.testing.assert_allclose(data["points_mm"][2],
                                   synthetic_explanation.sections.sections[2].points_mm,
                                   atol=1e-4)


def test_segments_csv(written_report, synth):
    out, _ = written_report
    with open(out / "segments.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert [r["id"] for r in rows] == ["1", "6", "7"]
    assert [r["culprit"] for r in rows] == ["no", "no", "yes"]
    assert float(rows[2]["shapley"]) == pytest.approx(1.2)
    assert rows[2]["reference_stenosis_percent"] == "60"
    assert rows[1]["reference_stenosis_percent"] == ""
    assert float(rows[2]["occlusion_peak_arc_mm"]) == pytest.approx(synth.BLOB_ARC_MM, abs=0.5)
    # culprit-lens-report/2: gradient x feature under its own name; each peak column names its
    # aggregate (the positive part for these two methods, docs/report-format.md)
    assert float(rows[2]["gradient_x_feature"]) == pytest.approx(1.1) and "gradient" not in rows[2]
    for method in ("integrated_gradients", "occlusion"):
        assert f"{method}_peak_positive_sum" in rows[2] and f"{method}_peak_value" not in rows[2]


def test_existing_output_refused_unless_force(tmp_path, synth):
    explanation = synth.make_explanation(methods=("occlusion",))
    out = tmp_path / "out"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(InputError, match="not empty"):
        explanation.write(out)
    assert (out / "keep.txt").read_text() == "mine"
    explanation.write(out, force=True)
    assert not (out / "keep.txt").exists()
    assert (out / "report.html").exists()


def test_nothing_half_written_after_an_error(tmp_path, monkeypatch, synth):
    explanation = synth.make_explanation(methods=("occlusion",))
    import explain.report.files as files

    def broken(*args, **kwargs):
        raise RuntimeError("figure drawing failed")

    monkeypatch.setattr(files, "write_figures", broken)
    with pytest.raises(RuntimeError, match="figure drawing failed"):
        explanation.write(tmp_path / "out")
    assert list(tmp_path.iterdir()) == []


def test_lesion_reference_in_report(written_report, synth):
    out, _ = written_report
    report = json.loads((out / "report.json").read_text())
    segment, start, end = synth.LESION
    assert report["reference"]["lesions"] == [
        {"segment": segment, "start_mm": start, "end_mm": end}]


def test_input_strings_are_escaped(tmp_path, synth):
    case = synth.make_case('<script>alert("x")</script>&co', path=tmp_path / "<b>case</b>.json")
    out = tmp_path / "out"
    synth.make_explanation(case, methods=("occlusion",)).write(out)
    page = (out / "report.html").read_text()
    assert "<script>" not in page and "<b>case</b>" not in page
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt;&amp;co" in page
    # report.json keeps the text as it was.
    assert json.loads((out / "report.json").read_text())["case_id"].startswith("<script>")


def test_check_out_dir_refuses_before_any_work(tmp_path):
    from explain.report import check_out_dir

    assert check_out_dir(tmp_path / "new") == tmp_path / "new"
    assert not (tmp_path / "new").exists()
    full = tmp_path / "full"
    full.mkdir()
    (full / "x").write_text("x")
    with pytest.raises(InputError, match="--out: .* not empty"):
        check_out_dir(full)
    assert check_out_dir(full, force=True) == full and (full / "x").exists()
    with pytest.raises(InputError, match="not a folder"):
        check_out_dir(full / "x")


def test_figures_state_the_unit_of_the_target(synthetic_explanation):
    # An explained column is in the model's own units, the expected CAD-RADS category in
    # categories; the figures say which (a wording check, no outside source).
    import dataclasses

    from explain.report.figures import contribution_figure, profile_figure

    def labels(e):
        fig = contribution_figure(e)
        return fig.axes[0].get_xlabel(), profile_figure(e, e.methods[0])._suptitle.get_text()

    column = labels(synthetic_explanation)
    assert all("target units" in text for text in column)
    expected = dataclasses.replace(synthetic_explanation,
                                   target={"requested": "auto", "label": "expected", "value": 2.4})
    assert all("CAD-RADS categories" in text and "target" not in text.split("(")[-1]
               for text in labels(expected))
