"""sample_case: every segment of a case, ascending SCCT number, as one patient tensor."""

import subprocess
import sys
from types import SimpleNamespace

import numpy as np
import pytest
import SimpleITK as sitk

from explain.errors import InputError
from explain.geometry import CaseSections, Centerline, sample_case, sample_cross_sections


def fake_case():
    rng = np.random.default_rng(42)  # seed recorded
    image = sitk.GetImageFromArray(rng.normal(100.0, 30.0, size=(24, 24, 24)).astype(np.float32))
    segments = tuple(
        SimpleNamespace(id=sid, centerline=Centerline([[x, 12.0, 3.0], [x, 12.0, 20.0]]))
        for sid, x in ((7, 6.0), (1, 12.0), (12, 18.0))  # deliberately out of order
    )
    return SimpleNamespace(image=image, segments=segments)


def test_segments_come_out_in_ascending_id_and_match_single_sampling():
    case = fake_case()
    sections = sample_case(case, points=8, size=5, pixel_mm=0.8, rotation_deg=15.0)
    assert sections.segment_ids == (1, 7, 12)
    by_id = {s.id: s for s in case.segments}
    for sid, cs in zip(sections.segment_ids, sections.sections):
        single = sample_cross_sections(case.image, by_id[sid].centerline, points=8, size=5,
                                       pixel_mm=0.8, rotation_deg=15.0)
        assert np.array_equal(cs.values, single.values)
        assert np.array_equal(cs.points_mm, single.points_mm)
    assert sections.values.shape == (3, 8, 5, 5) and sections.values.dtype == np.float32
    assert "3 segments [1, 7, 12]" in repr(sections)


def test_tensor_is_the_patient_tensor():
    import torch

    sections = sample_case(fake_case(), points=4, size=3, pixel_mm=1.0)
    x = sections.tensor()
    assert x.dtype == torch.float32 and tuple(x.shape) == (1, 3, 4, 3, 3)
    assert np.array_equal(x[0].numpy(), sections.values)


def test_geometry_imports_without_torch():
    code = "import sys, explain.geometry; print('torch' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_bad_cases_raise_input_error():
    case = fake_case()
    with pytest.raises(InputError, match="case: expected an object with .image and .segments"):
        sample_case(object(), points=4, size=3, pixel_mm=1.0)
    with pytest.raises(InputError, match="no segments"):
        sample_case(SimpleNamespace(image=case.image, segments=()), points=4, size=3, pixel_mm=1.0)
    twice = SimpleNamespace(image=case.image, segments=case.segments + case.segments[:1])
    with pytest.raises(InputError, match="ids repeat"):
        sample_case(twice, points=4, size=3, pixel_mm=1.0)
    bad_line = SimpleNamespace(image=case.image,
                               segments=(SimpleNamespace(id=3, centerline=np.zeros((4, 3))),))
    with pytest.raises(InputError, match=r"segments\[0\] \(id 3\): .centerline must be"):
        sample_case(bad_line, points=4, size=3, pixel_mm=1.0)
    with pytest.raises(InputError, match="case.image: expected a SimpleITK image"):
        sample_case(SimpleNamespace(image=None, segments=case.segments), points=4, size=3,
                    pixel_mm=1.0)
    with pytest.raises(InputError, match="pixel_mm"):
        sample_case(case, points=4, size=3, pixel_mm=0)


def test_case_sections_check_pairing():
    with pytest.raises(InputError, match="must pair up"):
        CaseSections(segment_ids=(1, 2), sections=())


def test_case_sections_refuse_stacks_of_different_shape():
    case = fake_case()
    line = case.segments[0].centerline
    small = sample_cross_sections(case.image, line, points=4, size=3, pixel_mm=1.0)
    large = sample_cross_sections(case.image, line, points=4, size=5, pixel_mm=1.0)
    message = r"^CaseSections: stacks differ in shape \[\(4, 3, 3\), \(4, 5, 5\)\]$"
    with pytest.raises(InputError, match=message):
        CaseSections(segment_ids=(1, 2), sections=(small, large))


def test_repr_names_count_ids_shape_pixel_and_outside_pixels():
    # Expected strings written out by hand from the options: 3 segments, 8 points of 5 x 5 px at
    # 0.8 mm; every pixel lies within +-1.6 mm of a centerline at least 5 mm from each face of the
    # 24-voxel image, so none is outside.
    sections = sample_case(fake_case(), points=8, size=5, pixel_mm=0.8)
    assert repr(sections) == ("CaseSections(3 segments [1, 7, 12], each 8 x 5x5 px at 0.8 mm, "
                              "float32 HU, 0 px outside)")
    assert repr(CaseSections(segment_ids=(), sections=())) == (
        "CaseSections(0 segments [], each 0 x 0x0 px, float32 HU, 0 px outside)")


def test_repr_counts_outside_pixels_and_fill_value_reaches_them():
    # A 6-pixel-wide section (1 mm pixels) around a centerline on the image face x = 0: the
    # columns at x = -2.5, -1.5, -0.5 mm lie outside the [0, 23] mm extent, so 3 of 6 columns
    # x 6 rows x 2 points = 36 pixels (hand count) are outside and take the fill value.
    case = fake_case()
    edge = SimpleNamespace(id=5, centerline=Centerline([[0.0, 12.0, 6.0], [0.0, 12.0, 14.0]]))
    one = SimpleNamespace(image=case.image, segments=(edge,))
    default = sample_case(one, points=2, size=6, pixel_mm=1.0)
    filled = sample_case(one, points=2, size=6, pixel_mm=1.0, fill_value=-500.0)
    outside = default.sections[0].n_outside
    assert outside == 36
    assert repr(default).endswith(f"{outside} px outside)")
    # -1000 HU (air) is the documented default fill; common practice, no source
    assert np.sum(default.values == -1000.0) == 36
    assert np.sum(filled.values == -500.0) == 36


def test_bad_case_errors_name_what_was_given():
    case = fake_case()
    with pytest.raises(InputError, match=r"\(explain.case.Case\), got object$"):
        sample_case(object(), points=4, size=3, pixel_mm=1.0)
    with pytest.raises(InputError, match=r"^case: it has no segments; give at least one"):
        sample_case(SimpleNamespace(image=case.image, segments=()), points=4, size=3, pixel_mm=1.0)
    line = case.segments[0].centerline
    for bad_id, shown in (("3", "'3'"), (True, "True"), (2.0, "2.0")):
        segment = SimpleNamespace(id=bad_id, centerline=line)
        bad = SimpleNamespace(image=case.image, segments=(segment,))
        message = rf"^case.segments\[0\].id: expected an integer, got {shown}$"
        with pytest.raises(InputError, match=message):
            sample_case(bad, points=4, size=3, pixel_mm=1.0)
    no_id = SimpleNamespace(image=case.image, segments=(SimpleNamespace(centerline=line),))
    with pytest.raises(InputError, match=r"^case.segments\[0\].id: expected an integer, got None$"):
        sample_case(no_id, points=4, size=3, pixel_mm=1.0)


def test_default_rotation_is_none_and_default_fill_is_air():
    # Without options the stack equals single sampling with rotation 0 deg and fill -1000 HU
    # written out (air is -1000 HU by the Hounsfield scale's definition; the default itself is
    # common practice, no source).
    case = fake_case()
    sections = sample_case(case, points=4, size=5, pixel_mm=0.9)
    by_id = {s.id: s for s in case.segments}
    for sid, cs in zip(sections.segment_ids, sections.sections):
        explicit = sample_cross_sections(case.image, by_id[sid].centerline, points=4, size=5,
                                         pixel_mm=0.9, rotation_deg=0.0, fill_value=-1000.0)
        assert np.array_equal(cs.values, explicit.values)
