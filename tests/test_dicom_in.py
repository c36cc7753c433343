"""DICOM series input (explain.dicom_in, through explain.io.read_volume and load_case).

Outside references: pydicom's test data (CT_small.dcm, a real-format CT slice) and pydicom's own
``apply_modality_lut`` for the rescale (DICOM PS3.3 C.11.1: HU = stored x RescaleSlope +
RescaleIntercept); SimpleITK's GDCM series reader for the geometry of a clean series; the
DICOM PS3.3 C.7.6.2.1.1 definition of ImagePositionPatient / ImageOrientationPatient.
"""

import json
import random

import numpy as np
import pydicom
import pytest
import SimpleITK as sitk
from pydicom.data import get_testdata_file
from pydicom.pixels import apply_modality_lut
from pydicom.uid import generate_uid

from explain.case import load_case
from explain.errors import InputError
from explain.io import read_image, read_volume
from explain.phantom import write_phantom_case
from explain.phantom.dicom_writer import PATIENT_NAME


def _ct_small_series(folder, n=4, *, gap=5.0, shift=None, series_uid=None, rescale=None,
                     tilt=None, names=None):
    """``n`` copies of pydicom's CT_small.dcm as one series, stepped by ``gap`` mm along the
    normal (plus ``shift`` (3,) mm per slice in-plane when given)."""
    folder.mkdir(parents=True, exist_ok=True)
    source = pydicom.dcmread(get_testdata_file("CT_small.dcm"))
    series_uid = series_uid or generate_uid(entropy_srcs=[str(folder)])
    orient = np.asarray(source.ImageOrientationPatient, float)
    normal = np.cross(orient[:3], orient[3:])
    start = np.asarray(source.ImagePositionPatient, float)
    offsets = gap if np.ndim(gap) else gap * np.arange(n)
    uids = []
    for k in range(n):
        ds = source.copy()
        position = start + offsets[k] * normal + (0 if shift is None else k * np.asarray(shift))
        ds.ImagePositionPatient = [f"{v:.6f}" for v in position]
        ds.SeriesInstanceUID = series_uid
        ds.SOPInstanceUID = generate_uid(entropy_srcs=[series_uid, str(k)])
        ds.file_meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
        if rescale is not None:
            ds.RescaleSlope, ds.RescaleIntercept = rescale[k]
        if tilt is not None:
            ds.GantryDetectorTilt = tilt
        uids.append(ds.SOPInstanceUID)
        name = names[k] if names else f"s{k:03d}.dcm"
        ds.save_as(folder / name)
    return series_uid, uids


def test_rescale_per_slice_matches_pydicom_modality_lut(tmp_path):
    # pydicom's test data CT_small.dcm; the reference is pydicom's apply_modality_lut
    # (DICOM PS3.3 C.11.1), per slice with its own slope and intercept.
    rescale = [(1, -1024), (2, -1024), (0.5, -1000), (1, 0)]
    _ct_small_series(tmp_path / "s", rescale=rescale)
    image, source = read_volume(tmp_path / "s")
    hu = sitk.GetArrayFromImage(image)
    for k, path in enumerate(source.files):
        ds = pydicom.dcmread(path)
        np.testing.assert_allclose(hu[k], apply_modality_lut(ds.pixel_array, ds), rtol=1e-6)


def test_geometry_matches_simpleitk_gdcm_reader(tmp_path):
    # SimpleITK's (GDCM) series reader as the reference for origin, spacing, direction, values.
    _ct_small_series(tmp_path / "s", n=5, gap=2.5)
    image = read_image(tmp_path / "s")
    reader = sitk.ImageSeriesReader()
    reader.SetFileNames(reader.GetGDCMSeriesFileNames(str(tmp_path / "s")))
    ref = reader.Execute()
    assert image.GetSize() == ref.GetSize()
    np.testing.assert_allclose(image.GetOrigin(), ref.GetOrigin(), atol=1e-4)
    np.testing.assert_allclose(image.GetSpacing(), ref.GetSpacing(), atol=1e-4)
    np.testing.assert_allclose(image.GetDirection(), ref.GetDirection(), atol=1e-6)
    np.testing.assert_allclose(sitk.GetArrayFromImage(image), sitk.GetArrayFromImage(ref))


def test_slices_sorted_along_normal_and_identifiers_kept(tmp_path):
    names = [f"{c}.dcm" for c in "dbca"]          # file names out of slice order
    series, uids = _ct_small_series(tmp_path / "s", names=names)
    image, source = read_volume(tmp_path / "s")
    assert source.series_instance_uid == series
    assert source.sop_instance_uids == tuple(uids)   # volume order = position order
    first = pydicom.dcmread(source.files[0])
    assert source.study_instance_uid == first.StudyInstanceUID
    assert source.frame_of_reference_uid == first.FrameOfReferenceUID
    # PS3.3 C.7.6.2.1.1: slice k's ImagePositionPatient is the physical point of voxel (0, 0, k).
    for k, path in enumerate(source.files):
        ipp = np.asarray(pydicom.dcmread(path).ImagePositionPatient, float)
        np.testing.assert_allclose(image.TransformIndexToPhysicalPoint((0, 0, k)), ipp, atol=1e-4)


def test_several_series_listed_and_one_chosen(tmp_path):
    a, _ = _ct_small_series(tmp_path / "s", n=3)
    b, _ = _ct_small_series(tmp_path / "s", n=3, series_uid=generate_uid(entropy_srcs=["b"]),
                            names=["b0.dcm", "b1.dcm", "b2.dcm"])
    with pytest.raises(InputError, match="2 DICOM series") as err:
        read_image(tmp_path / "s")
    assert a in str(err.value) and b in str(err.value) and "series_instance_uid" in str(err.value)
    _, source = read_volume(tmp_path / "s", series_instance_uid=b)
    assert source.series_instance_uid == b and len(source.sop_instance_uids) == 3
    with pytest.raises(InputError, match="is not in"):
        read_image(tmp_path / "s", series_instance_uid="1.2.3.4")


def test_missing_slice_refused(tmp_path):
    _ct_small_series(tmp_path / "s", n=5, gap=np.array([0, 5, 10, 20, 25.0]))
    with pytest.raises(InputError, match="slices missing"):
        read_image(tmp_path / "s")


def test_uneven_spacing_noted_within_tolerance_refused_beyond(tmp_path):
    _, _ = _ct_small_series(tmp_path / "ok", n=5, gap=np.array([0, 5.05, 10, 15, 20.0]))
    _, source = read_volume(tmp_path / "ok")
    assert any("off an even grid" in note for note in source.notes)
    _ct_small_series(tmp_path / "bad", n=5, gap=np.array([0, 6, 10, 15, 20.0]))
    with pytest.raises(InputError, match="uneven slice spacing"):
        read_image(tmp_path / "bad")


@pytest.mark.parametrize("shift, tilt", [((0.0, 0.9, 0.0), None), (None, 12.0)])
def test_gantry_tilt_refused(tmp_path, shift, tilt):
    _ct_small_series(tmp_path / "s", shift=shift, tilt=tilt)
    with pytest.raises(InputError, match="gantry tilt"):
        read_image(tmp_path / "s")


def test_non_dicom_files_skipped(tmp_path):
    _ct_small_series(tmp_path / "s", n=3)
    (tmp_path / "s" / "README.txt").write_text("not DICOM")
    assert read_image(tmp_path / "s").GetSize()[2] == 3


def test_series_uid_on_a_file_refused(tmp_path):
    path = tmp_path / "ct.mha"
    sitk.WriteImage(sitk.Image(4, 4, 4, sitk.sitkFloat32), str(path))
    with pytest.raises(InputError, match="not a DICOM folder"):
        read_image(path, series_instance_uid="1.2.3")


@pytest.fixture(scope="module")
def phantom_pair(tmp_path_factory):
    """The same small phantom (1 mm voxels, rotated axes) as NIfTI and as a DICOM series."""
    root = tmp_path_factory.mktemp("pair")
    c, s = np.cos(0.3), np.sin(0.3)
    options = dict(seed=3, lesions=["6:60"], spacing_mm=1.0,
                   direction=np.array([[c, -s, 0], [s, c, 0], [0, 0, 1.0]]))
    nifti = write_phantom_case(root / "nifti", **options)
    dicom = write_phantom_case(root / "dicom", image_format="dicom", **options)
    return load_case(nifti), load_case(dicom), dicom


def test_phantom_dicom_equals_its_nifti(phantom_pair):
    nifti, dicom, _ = phantom_pair
    assert dicom.dicom is not None and nifti.dicom is None
    assert dicom.image.GetSize() == nifti.image.GetSize()
    np.testing.assert_allclose(dicom.image.GetOrigin(), nifti.image.GetOrigin(), atol=1e-4)
    np.testing.assert_allclose(dicom.image.GetSpacing(), nifti.image.GetSpacing(), atol=1e-5)
    np.testing.assert_allclose(dicom.image.GetDirection(), nifti.image.GetDirection(), atol=1e-6)
    np.testing.assert_array_equal(sitk.GetArrayFromImage(dicom.image),
                                  sitk.GetArrayFromImage(nifti.image))


def test_phantom_dicom_identifiers_are_invented(phantom_pair):
    _, case, manifest = phantom_pair
    data = json.loads(manifest.read_text())
    assert data["series_instance_uid"] == case.dicom.series_instance_uid
    ds = pydicom.dcmread(random.Random(0).choice(case.dicom.files))
    assert str(ds.PatientName) == PATIENT_NAME
    for keyword in ("PatientBirthDate", "StudyDate", "StudyTime", "InstitutionName"):
        assert not ds.get(keyword), keyword
    assert ds.RescaleIntercept == -1024 and ds.Modality == "CT"


def test_manifest_series_uid_must_be_text(phantom_pair, tmp_path):
    _, _, manifest = phantom_pair
    data = json.loads(manifest.read_text())
    data["series_instance_uid"] = 12
    data["image"] = str(manifest.parent / data["image"])
    for entry in data["segments"]:
        entry["centerline"] = str(manifest.parent / entry["centerline"])
    data["reference"]["lesion_mask"] = str(manifest.parent / data["reference"]["lesion_mask"])
    bad = tmp_path / "case.json"
    bad.write_text(json.dumps(data))
    with pytest.raises(InputError, match="series_instance_uid"):
        load_case(bad)


def test_cohort_as_dicom_reads_back(tmp_path):
    from explain.phantom import write_cohort

    table = write_cohort(tmp_path / "cohort", count=1, seed=5, spacing_mm=1.2,
                         image_format="dicom")
    case = load_case(tmp_path / "cohort" / "case-0000" / "case.json")
    assert table.is_file() and case.dicom is not None
    assert len(case.dicom.sop_instance_uids) == case.image.GetSize()[2]


def test_undecodable_by_pydicom_falls_back_to_gdcm(tmp_path, monkeypatch):
    # SimpleITK's GDCM reader decodes what pydicom cannot (compressed data without a plugin);
    # it applies the same rescale (DICOM PS3.3 C.11.1), so the volume must not change.
    _ct_small_series(tmp_path / "s", n=3, rescale=[(1, -1024), (2, -1000), (1, 0)])
    expected = sitk.GetArrayFromImage(read_image(tmp_path / "s"))

    def undecodable(self):
        raise NotImplementedError("no pixel data handler for this transfer syntax")

    monkeypatch.setattr(pydicom.dataset.Dataset, "pixel_array", property(undecodable))
    np.testing.assert_allclose(sitk.GetArrayFromImage(read_image(tmp_path / "s")), expected)
