"""The streamed NIfTI writer against SimpleITK's own writer (SimpleITK is the reference)."""

import gzip

import numpy as np
import pytest
import SimpleITK as sitk

from explain.errors import InputError
from explain.io import write_image
from explain.geometry import place
from explain.geometry.splat import SplatBox
from explain.report.nifti_stream import write_placed_nifti


def _oblique(size=(9, 7, 6)):
    image = sitk.Image(list(size), sitk.sitkInt16)
    image.SetOrigin((12.5, -30.25, 101.0))
    image.SetSpacing((0.42, 0.39, 0.625))
    image.SetDirection(sitk.VersorTransform((0.2, -0.1, 0.9), 0.5).GetMatrix())
    return image


@pytest.mark.parametrize("start,shape", [((2, 1, 3), (2, 4, 5)), ((0, 0, 0), (6, 7, 9)),
                                         ((8, 6, 5), (1, 1, 1)), ((0, 0, 0), (0, 0, 0))])
def test_streamed_file_reads_back_as_simpleitk_writes_it(tmp_path, start, shape):
    like = _oblique()
    rng = np.random.default_rng(3)
    values = rng.normal(size=shape).astype(np.float32)
    ours = write_placed_nifti(values, start, like, tmp_path / "ours.nii.gz")
    # SimpleITK's writer on the whole placed volume, the way the overlays were written before
    whole = place(SplatBox(start, values, values.astype(np.float64), tuple(like.GetSize())), like)
    sitk.WriteImage(whole, str(tmp_path / "sitk.nii.gz"), True)
    sitk.WriteImage(whole, str(tmp_path / "sitk.nii"), False)
    a, b = (sitk.ReadImage(str(tmp_path / n)) for n in ("ours.nii.gz", "sitk.nii.gz"))
    assert a.GetPixelID() == b.GetPixelID() == sitk.sitkFloat32
    assert a.GetSize() == b.GetSize() == like.GetSize()
    assert (a.GetOrigin(), a.GetSpacing(), a.GetDirection()) == (
        b.GetOrigin(), b.GetSpacing(), b.GetDirection())
    np.testing.assert_array_equal(sitk.GetArrayViewFromImage(a), sitk.GetArrayViewFromImage(b))
    # byte for byte the uncompressed file SimpleITK writes, header and voxels
    assert gzip.decompress(ours.read_bytes()) == (tmp_path / "sitk.nii").read_bytes()


def test_same_values_give_the_same_bytes(tmp_path):
    like = _oblique()
    values = np.ones((2, 2, 2), np.float32)
    a = write_placed_nifti(values, (1, 1, 1), like, tmp_path / "a.nii.gz").read_bytes()
    b = write_placed_nifti(values, (1, 1, 1), like, tmp_path / "b.nii.gz").read_bytes()
    assert a == b


def test_a_box_outside_the_image_is_refused_and_nothing_is_left(tmp_path):
    like = _oblique()
    with pytest.raises(InputError, match="does not fit the image"):
        write_placed_nifti(np.ones((2, 2, 2)), (8, 0, 0), like, tmp_path / "x.nii.gz")
    assert list(tmp_path.iterdir()) == []


def test_the_file_has_the_usual_permissions_like_every_output(tmp_path):
    # the same rule as explain.io.write_image: the umask's permissions, not mkstemp's 0600
    like = _oblique()
    ours = write_placed_nifti(np.ones((1, 1, 1)), (0, 0, 0), like, tmp_path / "p.nii.gz")
    theirs = write_image(sitk.Image([2, 2, 2], sitk.sitkFloat32), tmp_path / "q.nii.gz")
    assert ours.stat().st_mode & 0o777 == theirs.stat().st_mode & 0o777
