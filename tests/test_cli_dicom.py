"""The command line with DICOM: a phantom written as a DICOM series, explained end to end.

Outside references: pydicom reads the slices and the written objects; highdicom's ``segread``
reads the Segmentation; the SOP Class UIDs are those of DICOM PS3.4 B.5 (CT Image Storage
1.2.840.10008.5.1.4.1.1.2, Parametric Map Storage 1.2.840.10008.5.1.4.1.1.30, Segmentation
Storage 1.2.840.10008.5.1.4.1.1.66.4).
"""

import json

import highdicom as hd
import pydicom
import pytest

from explain.cli import main
from explain.phantom import write_phantom_case


def test_phantom_image_format_dicom(tmp_path, capsys):
    assert main(["phantom", "--out", str(tmp_path / "p"), "--seed", "2", "--lesion", "6:50",
                 "--image-format", "dicom"]) == 0
    manifest = json.loads((tmp_path / "p" / "case.json").read_text())
    folder = tmp_path / "p" / manifest["image"]
    files = sorted(folder.glob("*.dcm"))
    assert folder.is_dir() and len(files) > 10
    assert not (tmp_path / "p" / "image.nii.gz").exists()
    ds = pydicom.dcmread(files[0])
    assert ds.SOPClassUID == "1.2.840.10008.5.1.4.1.1.2"
    assert ds.SeriesInstanceUID == manifest["series_instance_uid"]
    assert str(ds.PatientName) == "Phantom^Demo" and not ds.get("PatientBirthDate")


def test_phantom_image_format_refused(tmp_path, capsys):
    with pytest.raises(SystemExit) as done:
        main(["phantom", "--out", str(tmp_path / "p"), "--image-format", "png"])
    assert done.value.code == 2
    assert not (tmp_path / "p").exists()


@pytest.mark.slow
def test_explain_a_dicom_phantom_writes_dicom_objects(tmp_path, capsys):
    case = write_phantom_case(tmp_path / "case", seed=0, lesions=["7:70:soft"],
                              image_format="dicom", spacing_mm=0.9)
    common = ["explain", "--case", str(case), "--model", "builtin:reference", "--methods",
              "gradient", "--quiet"]
    assert main(common + ["--out", str(tmp_path / "out")]) == 0
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    assert report["files"]["dicom"] == ["overlays/dicom/map-gradient.dcm",
                                        "overlays/dicom/culprit-regions.dcm"]
    pm = pydicom.dcmread(tmp_path / "out" / report["files"]["dicom"][0])
    assert pm.SOPClassUID == "1.2.840.10008.5.1.4.1.1.30"
    seg = hd.seg.segread(tmp_path / "out" / report["files"]["dicom"][1])
    assert seg.SOPClassUID == "1.2.840.10008.5.1.4.1.1.66.4"
    ct = pydicom.dcmread(next((tmp_path / "case" / "ct").glob("*.dcm")))
    assert seg.FrameOfReferenceUID == pm.FrameOfReferenceUID == ct.FrameOfReferenceUID
    assert seg.StudyInstanceUID == ct.StudyInstanceUID
    assert main(common + ["--out", str(tmp_path / "off"), "--no-dicom"]) == 0
    assert not (tmp_path / "off" / "overlays" / "dicom").exists()
    off = json.loads((tmp_path / "off" / "report.json").read_text())
    assert off["files"]["dicom"] == [] and any("turned off" in n for n in off["notes"])


@pytest.mark.slow
def test_demo_image_format_dicom(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path / "demo"), "--image-format", "dicom",
                 "--quiet"]) == 0
    report = json.loads((tmp_path / "demo" / "report.json").read_text())
    methods = report["settings"]["methods"]
    assert report["files"]["dicom"] == [f"overlays/dicom/map-{m}.dcm" for m in methods] + [
        "overlays/dicom/culprit-regions.dcm"]
    assert (tmp_path / "demo" / "case" / "ct").is_dir()
    for name in report["files"]["dicom"]:
        assert (tmp_path / "demo" / name).is_file()
