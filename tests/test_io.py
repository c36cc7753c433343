"""Reading CT volumes: each supported format, a DICOM series, and bad files.

Outside references: SimpleITK writes the files (its geometry is the reference), pydicom reads the
stored values and rescale tags (HU = stored value x RescaleSlope + RescaleIntercept, DICOM PS3.3
C.11.1), and pydicom's bundled CT_small.dcm is a real-format test file.
"""

import shutil

import numpy as np
import pytest
import SimpleITK as sitk

from explain.errors import InputError
from explain.io import atomic_output_dir, read_image, write_image


def _volume():
    rng = np.random.default_rng(1)
    image = sitk.GetImageFromArray(rng.normal(40, 100, (6, 7, 8)).astype(np.float32))
    image.SetOrigin((-12.5, 30.25, 101.0))
    image.SetSpacing((0.45, 0.5, 0.8))
    c, s = np.cos(0.4), np.sin(0.4)
    image.SetDirection((c, -s, 0.0, s, c, 0.0, 0.0, 0.0, 1.0))
    return image


@pytest.mark.parametrize("suffix", [".nii", ".nii.gz", ".nrrd", ".mha", ".mhd"])
def test_formats_keep_geometry_as_simpleitk_wrote_them(tmp_path, suffix):
    image = _volume()
    path = tmp_path / f"ct{suffix}"
    sitk.WriteImage(image, str(path))
    back = read_image(path)
    assert back.GetSize() == image.GetSize()
    np.testing.assert_allclose(back.GetOrigin(), image.GetOrigin(), atol=1e-4)
    np.testing.assert_allclose(back.GetSpacing(), image.GetSpacing(), atol=1e-5)
    np.testing.assert_allclose(back.GetDirection(), image.GetDirection(), atol=1e-5)
    np.testing.assert_allclose(sitk.GetArrayFromImage(back), sitk.GetArrayFromImage(image),
                               atol=1e-4)
    assert back.GetPixelID() == sitk.sitkFloat32


def _write_dicom_series(folder, stored, *, intercept, slope, spacing=(0.5, 0.5, 1.25),
                        origin=(-40.0, -30.0, 12.0)):
    """A CT series written slice by slice with SimpleITK (its documented series-writing recipe)."""
    folder.mkdir()
    writer = sitk.ImageFileWriter()
    writer.KeepOriginalImageUIDOn()
    for k in range(stored.shape[0]):
        sl = sitk.GetImageFromArray(stored[k])
        sl.SetSpacing(spacing[:2])
        for tag, value in [
            ("0008|0060", "CT"), ("0020|000d", "1.2.826.0.1.3680043.2.1125.1"),
            ("0020|000e", "1.2.826.0.1.3680043.2.1125.1.2"), ("0020|0013", str(k + 1)),
            ("0020|0032", "\\".join(str(v) for v in (origin[0], origin[1], origin[2] + k * spacing[2]))),
            ("0020|0037", "1\\0\\0\\0\\1\\0"), ("0018|0050", str(spacing[2])),
            ("0028|1052", str(intercept)), ("0028|1053", str(slope)),
        ]:
            sl.SetMetaData(tag, value)
        writer.SetFileName(str(folder / f"slice{k:03d}.dcm"))
        writer.Execute(sl)


def test_dicom_series_rescaled_to_hu_per_ps3_3(tmp_path):
    pydicom = pytest.importorskip("pydicom")
    rng = np.random.default_rng(2)
    stored = rng.integers(0, 2000, (4, 9, 10)).astype(np.int16)
    _write_dicom_series(tmp_path / "series", stored, intercept=-1024, slope=1)
    image = read_image(tmp_path / "series")
    assert image.GetSize() == (10, 9, 4)
    np.testing.assert_allclose(image.GetSpacing(), (0.5, 0.5, 1.25), atol=1e-4)
    np.testing.assert_allclose(image.GetOrigin(), (-40.0, -30.0, 12.0), atol=1e-4)
    # DICOM PS3.3 C.11.1: HU = stored x slope + intercept, from the files as pydicom reads them.
    hu = sitk.GetArrayFromImage(image)
    for k in range(4):
        ds = pydicom.dcmread(tmp_path / "series" / f"slice{k:03d}.dcm")
        expected = ds.pixel_array * float(ds.RescaleSlope) + float(ds.RescaleIntercept)
        np.testing.assert_allclose(hu[k], expected)


def test_pydicom_ct_small_reads_in_hu(tmp_path):
    pydicom = pytest.importorskip("pydicom")
    from pydicom.data import get_testdata_file

    source = get_testdata_file("CT_small.dcm")
    folder = tmp_path / "one"
    folder.mkdir()
    shutil.copy(source, folder / "CT_small.dcm")
    image = read_image(folder)
    ds = pydicom.dcmread(source)
    # pydicom test file CT_small.dcm, its own header: 128 x 128, pixel spacing 0.661468 mm, intercept -1024, slope 1.
    assert image.GetSize()[:2] == (128, 128)
    np.testing.assert_allclose(image.GetSpacing()[:2], (0.661468, 0.661468), atol=1e-5)
    assert float(ds.RescaleIntercept) == -1024 and float(ds.RescaleSlope) == 1
    expected = ds.pixel_array * float(ds.RescaleSlope) + float(ds.RescaleIntercept)
    np.testing.assert_allclose(sitk.GetArrayFromImage(image)[0], expected)


def test_missing_image(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_image(tmp_path / "nope.nii.gz")


def test_unreadable_image(tmp_path):
    path = tmp_path / "ct.nii.gz"
    path.write_bytes(b"this is not an image")
    with pytest.raises(InputError, match="cannot read"):
        read_image(path)


def test_unsupported_suffix(tmp_path):
    path = tmp_path / "ct.png"
    path.write_bytes(b"x")
    with pytest.raises(InputError, match="not a supported image"):
        read_image(path)


def test_2d_image_refused(tmp_path):
    path = tmp_path / "slice.nii"
    sitk.WriteImage(sitk.Image(5, 5, sitk.sitkFloat32), str(path))
    with pytest.raises(InputError, match="2D"):
        read_image(path)


# ITK's NIfTI reader turns NaN voxels into 0 on reading (seen with SimpleITK 2.5, while nibabel
# reads the NaN back), so the check is made on the formats that keep NaN.
@pytest.mark.parametrize("suffix", [".mha", ".nrrd"])
def test_nan_refused(tmp_path, suffix):
    values = np.zeros((3, 3, 3), np.float32)
    values[1, 1, 1] = np.nan
    path = tmp_path / f"ct{suffix}"
    sitk.WriteImage(sitk.GetImageFromArray(values), str(path))
    with pytest.raises(InputError, match="NaN"):
        read_image(path)


def test_empty_dicom_folder(tmp_path):
    with pytest.raises(InputError, match="no DICOM series"):
        read_image(tmp_path)


def test_write_image_leaves_no_temp(tmp_path):
    path = write_image(_volume(), tmp_path / "out" / "ct.nii.gz")
    assert [p.name for p in path.parent.iterdir()] == ["ct.nii.gz"]


def test_atomic_output_dir_refuses_and_cleans(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "old.txt").write_text("keep me")
    with pytest.raises(InputError, match="--force"):
        with atomic_output_dir(out):
            pass
    with pytest.raises(RuntimeError):
        with atomic_output_dir(out, force=True) as temp:
            (temp / "half.txt").write_text("half")
            raise RuntimeError("boom")
    assert [p.name for p in tmp_path.iterdir()] == ["out"]
    assert (out / "old.txt").read_text() == "keep me"
    with atomic_output_dir(out, force=True) as temp:
        (temp / "new.txt").write_text("new")
    assert sorted(p.name for p in out.iterdir()) == ["new.txt"]
    assert [p.name for p in tmp_path.iterdir()] == ["out"]


def test_outputs_have_usual_permissions(tmp_path):
    import os
    import stat

    mask = os.umask(0o022)
    try:
        path = write_image(_volume(), tmp_path / "ct.nii.gz")
        with atomic_output_dir(tmp_path / "out") as temp:
            (temp / "a.txt").write_text("a")
    finally:
        os.umask(mask)
    assert stat.S_IMODE(path.stat().st_mode) == 0o644
    assert stat.S_IMODE((tmp_path / "out").stat().st_mode) == 0o755
