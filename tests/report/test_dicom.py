"""The DICOM objects of an explanation (overlays/dicom/), checked against the standard.

Outside references: pydicom reads every object back, highdicom's ``segread`` reads the
Segmentation; DICOM PS3.3 gives the meaning of each attribute checked: C.7.6.2.1.1 (Image
Position / Orientation (Patient)), C.7.6.16.2.3 / C.7.6.16.2.4 (Plane Position / Plane
Orientation functional groups), C.7.6.16.2.11 (Real World Value Mapping: value = stored x
slope + intercept), A.51 (Segmentation IOD) and A.75 (Parametric Map IOD). The lists of
required attributes below are from memory of those module tables (type 1 attributes of the
mandatory modules), not copied from the standard's text. SimpleITK reads the NIfTI overlays the
DICOM objects must agree with.
"""

import csv
import dataclasses
import json

import highdicom as hd
import numpy as np
import pydicom
import pytest
import SimpleITK as sitk

from explain.io import read_volume
from explain.phantom.dicom_writer import write_ct_series
from explain.report import write_dicom
from explain.report.dicom import dicom_files

# Invented patient identifiers, added to the test series to see where they end up.
PATIENT = {"PatientName": "Phantom^Demo", "PatientID": "PH-TEST-0042",
           "PatientBirthDate": "19010101"}


def _dicom_case(case, folder):
    """The synthetic case with its CT written as a DICOM series and read back."""
    write_ct_series(case.image, folder, case_id=case.case_id, seed=0)
    for path in sorted(folder.iterdir()):
        ds = pydicom.dcmread(path)
        for keyword, value in PATIENT.items():
            setattr(ds, keyword, value)
        ds.save_as(path)
    image, source = read_volume(folder)
    return dataclasses.replace(case, image=image, dicom=source)


@pytest.fixture(scope="module")
def written(synth, tmp_path_factory):
    root = tmp_path_factory.mktemp("dicom-out")
    case = _dicom_case(synth.make_case(), root / "ct")
    explanation = synth.make_explanation(case)
    out = root / "out"
    explanation.write(out)
    return explanation, case, out


def _frame_sources(ds):
    """Referenced source SOP Instance UID of each frame (Derivation Image functional group)."""
    return [f.DerivationImageSequence[0].SourceImageSequence[0].ReferencedSOPInstanceUID
            for f in ds.PerFrameFunctionalGroupsSequence]


def test_one_parametric_map_per_method_and_one_segmentation(written):
    explanation, _, out = written
    names = dicom_files(explanation.methods)
    report = json.loads((out / "report.json").read_text())
    assert report["files"]["dicom"] == [names[m] for m in explanation.methods] + [
        names["segmentation"]]
    for name in report["files"]["dicom"]:
        assert (out / name).is_file()
    for method in explanation.methods:
        ds = pydicom.dcmread(out / names[method])
        assert ds.SOPClassUID == "1.2.840.10008.5.1.4.1.1.30"    # Parametric Map Storage
        assert method in ds.SeriesDescription
    seg = hd.seg.segread(out / names["segmentation"])
    assert seg.SOPClassUID == "1.2.840.10008.5.1.4.1.1.66.4"     # Segmentation Storage


def test_frames_sit_on_the_source_slices(written):
    # PS3.3 C.7.6.16.2.3/4: each frame's Plane Position = its source slice's
    # ImagePositionPatient; the shared Plane Orientation = the series' ImageOrientationPatient.
    explanation, case, out = written
    source = case.dicom
    position = {uid: source.positions_mm[k] for k, uid in enumerate(source.sop_instance_uids)}
    for name in dicom_files(explanation.methods).values():
        ds = pydicom.dcmread(out / name)
        orientation = ds.SharedFunctionalGroupsSequence[0].PlaneOrientationSequence[0]
        np.testing.assert_allclose(np.asarray(orientation.ImageOrientationPatient, float),
                                   source.headers[0].ImageOrientationPatient, atol=1e-6)
        for uid, frame in zip(_frame_sources(ds), ds.PerFrameFunctionalGroupsSequence):
            ipp = np.asarray(frame.PlanePositionSequence[0].ImagePositionPatient, float)
            np.testing.assert_allclose(ipp, position[uid], atol=1e-5)
            np.testing.assert_allclose(ipp, pydicom.dcmread(source.files[
                source.sop_instance_uids.index(uid)]).ImagePositionPatient, atol=1e-5)


def test_identifiers_shared_with_the_source_and_series_new(written):
    explanation, case, out = written
    source = case.dicom
    series = set()
    for name in dicom_files(explanation.methods).values():
        ds = pydicom.dcmread(out / name)
        assert ds.FrameOfReferenceUID == source.frame_of_reference_uid
        assert ds.StudyInstanceUID == source.study_instance_uid
        assert ds.SeriesInstanceUID != source.series_instance_uid
        series.add(ds.SeriesInstanceUID)
        assert set(_frame_sources(ds)) <= set(source.sop_instance_uids)
        referenced = {item.ReferencedSOPInstanceUID for s in ds.ReferencedSeriesSequence
                      for item in s.ReferencedInstanceSequence}
        assert referenced == set(source.sop_instance_uids)
        assert ds.ReferencedSeriesSequence[0].SeriesInstanceUID == source.series_instance_uid
    assert len(series) == len(explanation.methods) + 1          # a new series per object


def test_map_values_equal_the_nifti_overlay_within_quantisation(written):
    # PS3.3 C.7.6.16.2.11: real world value = stored value x slope + intercept.
    explanation, case, out = written
    order = {uid: k for k, uid in enumerate(case.dicom.sop_instance_uids)}
    for method in explanation.methods:
        ds = pydicom.dcmread(out / dicom_files([method])[method])
        rwvm = ds.SharedFunctionalGroupsSequence[0].RealWorldValueMappingSequence[0]
        slope, intercept = float(rwvm.RealWorldValueSlope), float(rwvm.RealWorldValueIntercept)
        real = ds.pixel_array.astype(np.float64) * slope + intercept
        nifti = sitk.GetArrayFromImage(sitk.ReadImage(str(out / f"overlays/{method}.nii.gz")))
        assert len(real) == len(nifti)                           # a frame for every slice
        for f, uid in enumerate(_frame_sources(ds)):
            np.testing.assert_allclose(real[f], nifti[order[uid]], rtol=0,
                                       atol=slope / 2 + 1e-6 * np.abs(nifti).max())
        assert method in rwvm.LUTExplanation and rwvm.LUTLabel
        assert rwvm.MeasurementUnitsCodeSequence[0].CodingSchemeDesignator == "UCUM"
        assert rwvm.MeasurementUnitsCodeSequence[0].CodeMeaning == "target units"


def test_window_shows_the_map(written):
    explanation, _, out = written
    for method in explanation.methods:
        ds = pydicom.dcmread(out / dicom_files([method])[method])
        voi = ds.SharedFunctionalGroupsSequence[0].FrameVOILUTSequence[0]
        centre, width = float(voi.WindowCenter), float(voi.WindowWidth)
        rwvm = ds.SharedFunctionalGroupsSequence[0].RealWorldValueMappingSequence[0]
        zero = -float(rwvm.RealWorldValueIntercept) / float(rwvm.RealWorldValueSlope)
        stored = ds.pixel_array
        top = stored.max()
        # The window starts at zero (or below) and its top is reached by the map's largest
        # values: a viewer opening it shows the map without adjusting.
        assert centre - width / 2 <= zero + 0.5
        assert zero < centre + width / 2 <= top + 0.5


def test_segmentation_round_trip_equals_culprit_overlay(written):
    explanation, case, out = written
    seg = hd.seg.segread(out / dicom_files(explanation.methods)["segmentation"])
    mask = seg.get_pixels_by_source_instance(
        source_sop_instance_uids=list(case.dicom.sop_instance_uids), segment_numbers=[1, 2],
        assert_missing_frames_are_empty=True)
    culprit = sitk.GetArrayFromImage(sitk.ReadImage(str(out / "overlays/culprit.nii.gz")))
    np.testing.assert_array_equal(mask[..., 0] > 0, culprit > 0)
    # The peak region lies along the culprit, within its half-peak extent of the first method.
    peak = mask[..., 1] > 0
    assert peak.any()
    k, j, i = np.nonzero(peak)
    xyz = np.array([case.image.TransformIndexToPhysicalPoint((int(a), int(b), int(c)))
                    for a, b, c in zip(i, j, k)])
    line = case.segment(explanation.culprit.id).centerline
    dense = line.position_at(np.linspace(0, line.length_mm, 400))
    arc = np.linspace(0, line.length_mm, 400)[np.argmin(
        np.linalg.norm(xyz[:, None] - dense[None], axis=2), axis=1)]
    start, end = explanation.culprit.locations[explanation.methods[0]].extent_mm
    assert arc.min() >= start - 1.0 and arc.max() <= end + 1.0


def test_segment_descriptions_use_scct_and_snomed(written):
    explanation, _, out = written
    seg = hd.seg.segread(out / dicom_files(explanation.methods)["segmentation"])
    first, second = seg.SegmentSequence
    assert first.SegmentLabel == "culprit 7 (mLAD) lumen"
    for item in (first, second):
        for seq in ("SegmentedPropertyCategoryCodeSequence", "SegmentedPropertyTypeCodeSequence"):
            assert item[seq][0].CodingSchemeDesignator == "SCT"
        assert item.SegmentAlgorithmType == "AUTOMATIC"
    assert first.SegmentedPropertyTypeCodeSequence[0].CodeValue == "67170007"  # lumen of artery
    assert explanation.methods[0] in second.SegmentLabel


# DICOM PS3.3 A.51 (Segmentation IOD) and A.75 (Parametric Map IOD): type 1 (and some type 2)
# attributes of their mandatory modules, from memory of the module tables.
COMMON = ["PatientName", "PatientID", "StudyInstanceUID", "StudyDate", "StudyTime", "StudyID",
          "AccessionNumber", "ReferringPhysicianName", "Modality", "SeriesInstanceUID",
          "SeriesNumber", "FrameOfReferenceUID", "PositionReferenceIndicator", "Manufacturer",
          "ManufacturerModelName", "DeviceSerialNumber", "SoftwareVersions", "InstanceNumber",
          "ContentDate", "ContentTime", "ImageType", "SamplesPerPixel",
          "PhotometricInterpretation", "Rows", "Columns", "BitsAllocated", "BitsStored",
          "NumberOfFrames", "SharedFunctionalGroupsSequence", "PerFrameFunctionalGroupsSequence",
          "DimensionOrganizationSequence", "DimensionIndexSequence", "ContentLabel",
          "SOPClassUID", "SOPInstanceUID"]
SEGMENTATION = COMMON + ["HighBit", "PixelRepresentation", "LossyImageCompression",
                         "SegmentationType", "SegmentSequence", "ContentDescription",
                         "ContentCreatorName", "ReferencedSeriesSequence"]
PARAMETRIC_MAP = COMMON + ["ContentDescription", "ContentCreatorName", "PresentationLUTShape", "LossyImageCompression", "BurnedInAnnotation",
                           "RecognizableVisualFeatures", "ContentQualification",
                           "ReferencedSeriesSequence"]


def test_required_attributes_of_ps3_3_a51_segmentation(written):
    explanation, _, out = written
    ds = pydicom.dcmread(out / dicom_files(explanation.methods)["segmentation"])
    missing = [k for k in SEGMENTATION if k not in ds]
    assert not missing
    assert ds.Modality == "SEG" and ds.SegmentationType == "BINARY"
    assert ds.BitsAllocated == 1 and ds.PhotometricInterpretation == "MONOCHROME2"
    for item in ds.SegmentSequence:
        for keyword in ("SegmentNumber", "SegmentLabel", "SegmentAlgorithmType",
                        "SegmentedPropertyCategoryCodeSequence",
                        "SegmentedPropertyTypeCodeSequence"):
            assert keyword in item
    for frame in ds.PerFrameFunctionalGroupsSequence:
        assert "FrameContentSequence" in frame and "PlanePositionSequence" in frame
        assert "SegmentIdentificationSequence" in frame
    shared = ds.SharedFunctionalGroupsSequence[0]
    assert "PixelMeasuresSequence" in shared and "PlaneOrientationSequence" in shared


def test_required_attributes_of_ps3_3_a75_parametric_map(written):
    explanation, _, out = written
    for method in explanation.methods:
        ds = pydicom.dcmread(out / dicom_files([method])[method])
        missing = [k for k in PARAMETRIC_MAP if k not in ds]
        assert not missing
        assert ds.PhotometricInterpretation == "MONOCHROME2"
        assert ds.PresentationLUTShape == "IDENTITY"
        assert ds.BitsAllocated == 16 and ds.BitsStored == 16
        shared = ds.SharedFunctionalGroupsSequence[0]
        for keyword in ("PixelMeasuresSequence", "PlaneOrientationSequence",
                        "RealWorldValueMappingSequence", "ParametricMapFrameTypeSequence"):
            assert keyword in shared
        for frame in ds.PerFrameFunctionalGroupsSequence:
            assert "FrameContentSequence" in frame and "PlanePositionSequence" in frame


def test_patient_attributes_only_in_the_dicom_objects(written):
    explanation, _, out = written
    texts = {name: (out / name).read_text(encoding="utf-8")
             for name in ("report.json", "segments.csv", "report.html")}
    for value in PATIENT.values():
        for name, text in texts.items():
            assert value not in text, f"{value!r} in {name}"
            assert value.replace("^", " ") not in text, f"{value!r} in {name}"
    for name in dicom_files(explanation.methods).values():
        ds = pydicom.dcmread(out / name)
        assert str(ds.PatientName) == PATIENT["PatientName"]
        assert ds.PatientID == PATIENT["PatientID"]
        assert ds.PatientBirthDate == PATIENT["PatientBirthDate"]
    # The table searched is the real one: a header and a row per segment.
    rows = list(csv.reader(texts["segments.csv"].splitlines()))
    assert len(rows) == 1 + len(explanation.segments)


def test_same_explanation_same_uids(written, tmp_path):
    explanation, case, out = written
    again = write_dicom(explanation, case, tmp_path)
    for name in again.files:
        a, b = pydicom.dcmread(out / name), pydicom.dcmread(tmp_path / name)
        assert (a.SOPInstanceUID, a.SeriesInstanceUID) == (b.SOPInstanceUID, b.SeriesInstanceUID)
    other = dataclasses.replace(explanation, settings={**explanation.settings, "seed": 1})
    third = write_dicom(other, case, tmp_path / "other")
    for name in third.files:
        assert (pydicom.dcmread(tmp_path / "other" / name).SOPInstanceUID
                != pydicom.dcmread(out / name).SOPInstanceUID)


def test_no_dicom_turns_it_off(written, tmp_path):
    explanation, _, _ = written
    explanation.write(tmp_path / "off", dicom=False)
    report = json.loads((tmp_path / "off" / "report.json").read_text())
    assert report["files"]["dicom"] == [] and not (tmp_path / "off/overlays/dicom").exists()
    assert any("turned off" in n for n in report["notes"])


def test_not_dicom_writes_nothing_and_says_so(synthetic_explanation, tmp_path):
    result = write_dicom(synthetic_explanation, synthetic_explanation.case, tmp_path)
    assert result.files == () and not any(tmp_path.iterdir())
    assert "not a DICOM series" in result.notes[0]


def test_missing_type2_patient_attributes_written_empty(synth, tmp_path):
    # DICOM PS3.3 C.7.1.1: PatientID is type 2 (present, may be empty); a source slice
    # without it still gets DICOM objects, with the attribute present and empty.
    case = synth.make_case()
    folder = tmp_path / "ct"
    write_ct_series(case.image, folder, case_id=case.case_id, seed=0)
    for path in folder.iterdir():
        ds = pydicom.dcmread(path)
        del ds.PatientID
        ds.save_as(path)
    image, source = read_volume(folder)
    case = dataclasses.replace(case, image=image, dicom=source)
    explanation = synth.make_explanation(case, methods=("integrated_gradients",))
    result = write_dicom(explanation, case, tmp_path / "out")
    for name in result.files:
        assert pydicom.dcmread(tmp_path / "out" / name).PatientID == ""
    assert "PatientID" not in source.headers[0]          # the source was not changed
