"""The case manifest: a good case loads with its geometry; every bad input named in the format
gets an InputError naming the file or field."""

import json

import numpy as np
import pytest
import SimpleITK as sitk

from explain.case import load_case
from explain.errors import InputError


def _write_csv(path, points, radius=None):
    lines = ["x,y,z" + (",radius" if radius is not None else "")]
    for n, p in enumerate(points):
        cells = [repr(float(v)) for v in p] + ([repr(float(radius[n]))] if radius is not None else [])
        lines.append(",".join(cells))
    path.write_text("\n".join(lines) + "\n")


@pytest.fixture
def case_dir(tmp_path):
    """A 40^3 volume of 0.5 mm voxels at a non-zero origin with two straight segments."""
    folder = tmp_path / "case"
    (folder / "centerlines").mkdir(parents=True)
    image = sitk.GetImageFromArray(np.full((40, 40, 40), -80.0, np.float32))
    image.SetOrigin((10.0, -20.0, 5.0))
    image.SetSpacing((0.5, 0.5, 0.5))
    sitk.WriteImage(image, str(folder / "image.nii.gz"))
    sitk.WriteImage(sitk.Cast(image * 0, sitk.sitkUInt8), str(folder / "mask.nii.gz"))
    t = np.linspace(0, 1, 21)[:, None]
    seg6 = np.array([12.0, -18.0, 10.0]) + t * np.array([0.0, 15.0, 0.0])   # 15 mm long
    seg1 = np.array([25.0, -15.0, 8.0]) + t * np.array([0.0, 0.0, 12.0])    # 12 mm long
    _write_csv(folder / "centerlines" / "seg6.csv", seg6, radius=np.full(21, 1.8))
    _write_csv(folder / "centerlines" / "seg1.csv", seg1)
    manifest = {
        "format": "culprit-lens-case/1",
        "case_id": "phantom-a",
        "image": "image.nii.gz",
        "segments": [{"id": 6, "centerline": "centerlines/seg6.csv"},
                     {"id": 1, "centerline": "centerlines/seg1.csv"}],
        "reference": {"grade": "3", "stenosis_percent": {"6": 60},
                      "lesions": [{"segment": 6, "start_mm": 4.0, "end_mm": 10.0}],
                      "lesion_mask": "mask.nii.gz"},
    }
    (folder / "case.json").write_text(json.dumps(manifest))
    return folder


def _edit(folder, change):
    data = json.loads((folder / "case.json").read_text())
    change(data)
    (folder / "case.json").write_text(json.dumps(data))


def test_good_case_loads(case_dir):
    case = load_case(case_dir / "case.json")
    assert case.case_id == "phantom-a"
    assert case.segment_ids == (1, 6)  # ascending SCCT number
    seg6 = case.segment(6)
    assert (seg6.abbr, seg6.territory) == ("pLAD", "LAD")  # SCCT 2014 table
    assert seg6.centerline.length_mm == pytest.approx(15.0)
    assert seg6.radius_mm is not None and case.segment(1).radius_mm is None
    assert case.reference.grade == "3" and case.reference.stenosis_percent == {6: 60.0}
    assert case.reference.lesions[0].centre_mm == pytest.approx(7.0)
    # an empty mask is kept as one voxel (the loader keeps the box of the labelled voxels)
    assert case.reference.lesion_mask.GetSize() == (1, 1, 1)
    assert load_case(case_dir).case_id == "phantom-a"  # the folder works too
    assert "segments=[1, 6]" in repr(case)


def test_manifest_missing(tmp_path):
    with pytest.raises(InputError, match="manifest not found"):
        load_case(tmp_path / "case.json")


def test_manifest_not_json(case_dir):
    (case_dir / "case.json").write_text("{not json")
    with pytest.raises(InputError, match="not valid JSON"):
        load_case(case_dir)


def test_wrong_format(case_dir):
    _edit(case_dir, lambda d: d.update(format="something/2"))
    with pytest.raises(InputError, match="'format'"):
        load_case(case_dir)


@pytest.mark.parametrize("name", ["case_id", "image", "segments"])
def test_missing_field(case_dir, name):
    _edit(case_dir, lambda d: d.pop(name))
    with pytest.raises(InputError, match=f"missing field '{name}'"):
        load_case(case_dir)


def test_image_missing(case_dir):
    (case_dir / "image.nii.gz").unlink()
    with pytest.raises(InputError, match="image.nii.gz does not exist"):
        load_case(case_dir)


def test_image_not_3d(case_dir):
    sitk.WriteImage(sitk.Image(8, 8, sitk.sitkFloat32), str(case_dir / "image.nii.gz"))
    with pytest.raises(InputError, match="3D CT volume"):
        load_case(case_dir)


def test_image_with_nan(case_dir):
    values = np.zeros((40, 40, 40), np.float32)
    values[3, 3, 3] = np.nan
    sitk.WriteImage(sitk.GetImageFromArray(values), str(case_dir / "image.mha"))
    _edit(case_dir, lambda d: d.update(image="image.mha"))
    with pytest.raises(InputError, match="NaN"):
        load_case(case_dir)


@pytest.mark.parametrize("bad", [0, 19, "LAD"])
def test_segment_id_outside_range(case_dir, bad):
    _edit(case_dir, lambda d: d["segments"][0].update(id=bad))
    with pytest.raises(InputError, match=r"segments\[0\]\.id"):
        load_case(case_dir)


def test_segment_repeated(case_dir):
    _edit(case_dir, lambda d: d["segments"][1].update(id=6))
    with pytest.raises(InputError, match="appears twice"):
        load_case(case_dir)


def test_centerline_missing(case_dir):
    (case_dir / "centerlines" / "seg1.csv").unlink()
    with pytest.raises(InputError, match="seg1.csv does not exist"):
        load_case(case_dir)


def test_centerline_non_numeric(case_dir):
    (case_dir / "centerlines" / "seg1.csv").write_text("x,y,z\n1,2,3\n1,two,3\n")
    with pytest.raises(InputError, match="line 3, column y"):
        load_case(case_dir)


def test_centerline_bad_header(case_dir):
    (case_dir / "centerlines" / "seg1.csv").write_text("a,b,c\n1,2,3\n")
    with pytest.raises(InputError, match="header"):
        load_case(case_dir)


@pytest.mark.parametrize("value", ["nan", "inf"])
def test_centerline_nan_or_inf(case_dir, value):
    (case_dir / "centerlines" / "seg1.csv").write_text(f"x,y,z\n25,-15,8\n25,-15,{value}\n")
    with pytest.raises(InputError, match="NaN or infinite"):
        load_case(case_dir)


def test_centerline_one_distinct_point(case_dir):
    (case_dir / "centerlines" / "seg1.csv").write_text("x,y,z\n25,-15,8\n25,-15,8\n")
    with pytest.raises(InputError, match="seg1.csv"):
        load_case(case_dir)


def test_centerline_duplicates_dropped_with_note(case_dir):
    pts = [[25, -15, 8], [25, -15, 9], [25, -15, 9], [25, -15, 10]]
    _write_csv(case_dir / "centerlines" / "seg1.csv", np.array(pts, float))
    case = load_case(case_dir)
    assert len(case.segment(1).centerline.points_mm) == 3
    assert any("seg1.csv" in note for note in case.notes)


def test_near_duplicate_drops_the_same_radius_row(case_dir):
    # Issue 15 section 1: points 1e-7 mm apart (not bit-equal) are one point for the centerline,
    # so the radius row beside the dropped point must go too, and the lumen label must build.
    from explain.mapping import lumen_label
    pts = np.array([[25, -15, 8], [25, -15, 9], [25, -15, 9 + 1e-7], [25, -15, 10]], float)
    radius = np.array([1.0, 1.1, 9.9, 1.3])  # 9.9 marks the row that must be dropped
    _write_csv(case_dir / "centerlines" / "seg1.csv", pts, radius=radius)
    case = load_case(case_dir)
    seg1 = case.segment(1)
    assert len(seg1.centerline.points_mm) == 3
    assert seg1.radius_mm.tolist() == [1.0, 1.1, 1.3]
    label = lumen_label(case.image, seg1.centerline.points_mm, seg1.radius_mm)
    assert sitk.GetArrayViewFromImage(label).any()


def test_centerline_far_outside_image(case_dir):
    # the image spans x 9.75..29.75 mm; a point at x = 60 mm is far outside
    _write_csv(case_dir / "centerlines" / "seg1.csv", np.array([[25, -15, 8], [60, -15, 8]], float))
    with pytest.raises(InputError, match="outside the image"):
        load_case(case_dir)


def test_centerline_just_outside_is_counted(case_dir):
    _write_csv(case_dir / "centerlines" / "seg1.csv",
               np.array([[25, -15, 8], [25, -15, 12], [30.5, -15, 12]], float))
    case = load_case(case_dir)
    assert case.segment(1).n_outside == 1
    assert any("outside the image" in note for note in case.notes)


def test_lesion_mask_is_kept_as_the_box_of_its_labels(case_dir):
    image = sitk.ReadImage(str(case_dir / "image.nii.gz"))
    arr = np.zeros(sitk.GetArrayViewFromImage(image).shape, dtype=np.uint8)
    arr[5:9, 10:12, 20:27] = 2   # [k, j, i]
    arr[7, 15, 22] = 1
    mask = sitk.GetImageFromArray(arr)
    mask.CopyInformation(image)
    sitk.WriteImage(mask, str(case_dir / "mask.nii.gz"))
    box = load_case(case_dir).reference.lesion_mask
    assert box.GetSize() == (7, 6, 4)
    # SimpleITK RegionOfInterest as the reference: same voxels at the same physical place
    expected = sitk.RegionOfInterest(mask, [7, 6, 4], [20, 10, 5])
    np.testing.assert_array_equal(sitk.GetArrayFromImage(box), sitk.GetArrayFromImage(expected))
    assert box.GetOrigin() == pytest.approx(image.TransformIndexToPhysicalPoint((20, 10, 5)))
    assert box.GetSpacing() == image.GetSpacing() and box.GetDirection() == image.GetDirection()


def test_lesion_mask_other_geometry(case_dir):
    mask = sitk.Image(20, 40, 40, sitk.sitkUInt8)
    sitk.WriteImage(mask, str(case_dir / "mask.nii.gz"))
    with pytest.raises(InputError, match="lesion_mask.*another geometry"):
        load_case(case_dir)


def test_lesion_extent_outside_segment(case_dir):
    _edit(case_dir, lambda d: d["reference"]["lesions"][0].update(end_mm=40.0))
    with pytest.raises(InputError, match=r"lesions\[0\].*outside segment 6"):
        load_case(case_dir)


def test_lesion_on_absent_segment(case_dir):
    _edit(case_dir, lambda d: d["reference"]["lesions"][0].update(segment=7))
    with pytest.raises(InputError, match="not in the case"):
        load_case(case_dir)


def test_bad_grade(case_dir):
    _edit(case_dir, lambda d: d["reference"].update(grade="6"))
    with pytest.raises(InputError, match="grade"):
        load_case(case_dir)
