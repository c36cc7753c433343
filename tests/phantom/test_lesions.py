"""Lesion text, lesion specs and the stenosis profile; bad input raises InputError."""

import numpy as np
import pytest

from explain.errors import InputError
from explain.phantom import LesionSpec, make_phantom, parse_lesion
from explain.phantom.lesions import lesion_profile


def test_parse_lesion_reads_the_documented_forms():
    assert parse_lesion("6:70") == LesionSpec(6, 70.0, None)
    assert parse_lesion(" 13:100:calcified ") == LesionSpec(13, 100.0, "calcified")
    assert parse_lesion("1:35.5:SOFT") == LesionSpec(1, 35.5, "soft")
    assert str(parse_lesion("6:70:soft")) == "6:70:soft"


@pytest.mark.parametrize("text", ["6", "6:70:soft:x", "x:50", "6:abc", "6:50:hard", "19:50",
                                  "0:50", "6:150", "6:-5", "6:nan", ""])
def test_parse_lesion_refuses_bad_text(text):
    with pytest.raises(InputError, match="ID:PERCENT"):
        parse_lesion(text)


def test_parse_lesion_refuses_non_text():
    with pytest.raises(InputError):
        parse_lesion(6)


@pytest.mark.parametrize("kwargs", [dict(segment=6, percent=101), dict(segment=6, percent=50,
                                    kind="mixed"), dict(segment=6, percent=50, length_mm=0.0),
                                    dict(segment=6, percent=50, centre_mm=float("inf")),
                                    dict(segment=True, percent=50)])
def test_lesion_spec_validates(kwargs):
    with pytest.raises(InputError):
        LesionSpec(**kwargs)


def test_profile_is_a_smooth_bump_with_a_flat_middle():
    arc = np.linspace(-2, 14, 1601)
    p = lesion_profile(arc, 0.0, 12.0)
    assert p[(arc < 0) | (arc > 12)].max() == 0.0
    assert np.all(p[(arc >= 4) & (arc <= 8)] == 1.0)
    assert np.abs(np.diff(p)).max() < 0.01  # continuous: no jumps at the ramp ends
    assert np.allclose(p, p[::-1])  # symmetric about the middle (arc grid is symmetric)


def test_placed_lesion_lies_inside_its_segment_and_clear_of_branches():
    for seed in range(5):
        case = make_phantom(seed=seed, lesions=["6:50", "13:60", "5:70", "3:40"], spacing_mm=1.5)
        for lesion in case.lesions:
            path = case.layout.segments[lesion.segment]
            assert 0.0 <= lesion.start_mm < lesion.end_mm <= path.length_mm
            for _, at, radius in path.branches:
                assert lesion.end_mm <= at - radius or lesion.start_mm >= at + radius


def test_hand_placed_lesion_keeps_its_numbers():
    case = make_phantom(seed=2, lesions=[LesionSpec(2, 45, "soft", 10.0, 8.0, eccentric=False)],
                        spacing_mm=1.5)
    (lesion,) = case.lesions
    assert (lesion.start_mm, lesion.end_mm, lesion.kind, lesion.eccentric) == (6.0, 14.0, "soft", False)
    assert case.reference["lesions"] == [{"segment": 2, "start_mm": 6.0, "end_mm": 14.0}]


@pytest.mark.parametrize("kwargs, field", [
    (dict(lesions=["15:50"]), "segment 15"),
    (dict(lesions=[LesionSpec(2, 50, centre_mm=500.0)]), "centre_mm"),
    (dict(seed=-1), "seed"),
    (dict(seed=1.5), "seed"),
    (dict(spacing_mm=0.01), "spacing_mm"),
    (dict(direction=np.ones((3, 3))), "direction"),
    (dict(lesions=[42]), "lesions"),
    (dict(variation=-1.0), "variation"),
    (dict(noise_sd_hu=-5.0), "noise_sd_hu"),
    (dict(blur_sigma_mm=float("nan")), "blur_sigma_mm"),
])
def test_make_phantom_refuses_bad_options(kwargs, field):
    with pytest.raises(InputError, match=field):
        make_phantom(**kwargs)


def test_optional_segments_appear_when_a_lesion_needs_them():
    case = make_phantom(seed=0, variation=0.0, lesions=["17:60", "18:30"], spacing_mm=1.5)
    assert {17, 18} <= set(case.segment_ids)
    assert case.reference["stenosis_percent"][17] == 60.0
