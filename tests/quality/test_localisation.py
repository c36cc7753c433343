"""localisation(): pointing, peak error, relevance mass and rank against the case's reference.

The distance to the lesion mask is checked against a brute force over the mask's voxels in
physical mm (SimpleITK's index-to-point transform), independent of scipy's distance transform.
Relevance mass and rank are the functions checked against Quantus 0.6 (Hedström et al. 2023)
in test_array_metrics.py; here the lesion region they are given is checked by direct counting.
"""

import dataclasses

import numpy as np
from scipy import ndimage
import pytest
import SimpleITK as sitk

from explain.case import Lesion
from explain.errors import InputError
from explain.quality import localisation, relevance_mass_accuracy
from explain.quality.localisation import _mask_distance_mm, _mask_voxels_mm


def _with_reference(case, **changes):
    return dataclasses.replace(case, reference=dataclasses.replace(case.reference, **changes))


def test_no_reference_gives_none(case, explanation):
    assert localisation(explanation, dataclasses.replace(case, reference=None)) is None


def test_culprit_hit_and_ties(case, explanation):
    assert localisation(explanation, case)["culprit_hit"] is True     # 7 has 60 %, culprit 7
    tie = _with_reference(case, stenosis_percent={7: 60.0, 6: 60.0})
    assert localisation(explanation, tie)["culprit_hit"] is True      # any of a tie
    other = _with_reference(case, stenosis_percent={6: 80.0, 7: 60.0})
    assert localisation(explanation, other)["culprit_hit"] is False
    none = _with_reference(case, stenosis_percent={7: 0.0})
    assert localisation(explanation, none)["culprit_hit"] is None


def test_pointing_along_the_arc_with_tolerance(case, explanation):
    m = "integrated_gradients"
    peak = explanation.culprit.locations[m].peak.arc_mm
    out = localisation(explanation, case)                 # lesion 6-10 mm, peak near 8 mm
    assert out["pointing_hit"][m] is True
    assert out["peak_error_mm"][m] == pytest.approx(abs(peak - 8.0))
    far = _with_reference(case, lesions=(Lesion(7, peak + 4.0, peak + 6.0),))
    assert localisation(explanation, far, tolerance_mm=3.0)["pointing_hit"][m] is False
    assert localisation(explanation, far, tolerance_mm=4.5)["pointing_hit"][m] is True
    assert localisation(explanation, far)["peak_error_mm"][m] == pytest.approx(5.0)


def test_region_without_mask_is_the_arc_extent_times_the_lumen_disc(case, explanation):
    out = localisation(explanation, case)
    assert out["region"] == "lesion_extent_disc" and out["region_radius"] == "centerline radius"
    # count directly: cross-sections of segment 7 with arc in [6, 10], pixels within 1.4 mm
    s = explanation.sections.segment_ids.index(7)
    cs = explanation.sections.sections[s]
    rows, cols = np.mgrid[0:11, 0:11] - 5
    disc = int((0.5 * np.hypot(rows, cols) <= 1.4).sum())
    along = int(((cs.arc_mm >= 6.0) & (cs.arc_mm <= 10.0)).sum())
    assert out["region_pixels"] == disc * along


def _mask_case(case, box):
    arr = np.zeros(tuple(reversed(case.image.GetSize())), dtype=np.uint8)
    (k0, k1), (j0, j1), (i0, i1) = box
    arr[k0:k1, j0:j1, i0:i1] = 1
    mask = sitk.GetImageFromArray(arr)
    mask.CopyInformation(case.image)
    return _with_reference(case, lesion_mask=mask), arr


def test_mask_distance_matches_a_brute_force_in_mm(case):
    masked, arr = _mask_case(case, ((20, 23), (30, 33), (30, 34)))
    mask = masked.reference.lesion_mask
    image = case.image
    mask_mm = _mask_voxels_mm(mask, image)
    # the box the case loader keeps (explain.case._labelled_box) gives the same voxels
    box = sitk.RegionOfInterest(mask, [4, 3, 3], [30, 30, 20])
    np.testing.assert_array_equal(_mask_voxels_mm(box, image), mask_mm)
    inside = np.argwhere(arr > 0)                                     # [k, j, i]
    pts = np.array([image.TransformIndexToPhysicalPoint((int(i), int(j), int(k)))
                    for k, j, i in inside])
    # scipy.ndimage.distance_transform_edt with the CT spacing, the reference transform
    edt = ndimage.distance_transform_edt(arr == 0, sampling=image.GetSpacing()[::-1])
    for voxel in [(10, 5, 3), (31, 31, 21), (40, 50, 30), (32, 31, 21)]:
        i, j, k = voxel
        p = np.array(image.TransformIndexToPhysicalPoint(voxel))
        got = _mask_distance_mm(mask_mm, voxel, mask.GetSpacing())
        # brute force over SimpleITK's physical points of the mask voxels
        assert got == pytest.approx(np.linalg.norm(pts - p, axis=1).min())
        assert got == pytest.approx(edt[k, j, i], abs=1e-12)
    assert _mask_distance_mm(mask_mm, (31, 31, 21), mask.GetSpacing()) == 0.0  # inside
    empty = sitk.Image(mask.GetSize(), sitk.sitkUInt8)
    assert _mask_voxels_mm(empty, image) is None


def test_mask_pointing_and_mass_use_the_mask(case, explanation):
    m = "integrated_gradients"
    peak = explanation.culprit.locations[m].peak
    i, j, k = peak.voxel
    masked, _ = _mask_case(case, ((k - 1, k + 2), (j - 1, j + 2), (i - 1, i + 2)))
    out = localisation(explanation, masked)
    assert out["region"] == "lesion_mask"
    assert out["pointing_hit_mask"][m] is True
    far, _ = _mask_case(case, ((0, 2), (0, 2), (0, 2)))
    assert localisation(explanation, far)["pointing_hit_mask"][m] is False
    # the mass against the region sampled onto the pixels, recomputed by nearest neighbour
    region = []
    arr = sitk.GetArrayFromImage(masked.reference.lesion_mask)
    for cs in explanation.sections.sections:
        idx = np.array([case.image.TransformPhysicalPointToIndex(tuple(p))
                        for p in cs.points_mm.reshape(-1, 3)])
        ok = np.all((idx >= 0) & (idx < case.image.GetSize()), axis=1)
        hit = np.zeros(len(idx), dtype=bool)
        hit[ok] = arr[idx[ok, 2], idx[ok, 1], idx[ok, 0]] > 0
        region.append(hit.reshape(cs.shape))
    expected = relevance_mass_accuracy(explanation.maps[m], np.stack(region)).value
    assert out["relevance_mass"][m] == pytest.approx(expected)


def test_negative_tolerance_is_refused(case, explanation):
    with pytest.raises(InputError, match="tolerance_mm"):
        localisation(explanation, case, tolerance_mm=-1.0)
