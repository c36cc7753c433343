"""Stability under rotation and centerline jitter, and grades under test-time augmentation."""

import dataclasses
import importlib.util
from pathlib import Path

import numpy as np
import pytest
import SimpleITK as sitk
from scipy.stats import spearmanr

from explain.case import load_case
from explain.errors import InputError
from explain.geometry import Centerline, sample_cross_sections
from explain.model import wrap_model
from explain.quality.stability import augmentation_stability, jittered_case, onto_grid

_spec = importlib.util.spec_from_file_location("sanity_models",
                                               Path(__file__).with_name("sanity_models.py"))
models = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(models)

SAMPLING = {"points": 8, "size": 12, "pixel_mm": 0.5}


@pytest.fixture(scope="module")
def small_case(demo_case):
    case = load_case(demo_case)
    return dataclasses.replace(case, segments=tuple(s for s in case.segments
                                                    if s.id in (6, 7, 11)))


@pytest.mark.parametrize("angle", [30.0, 90.0, 205.0])
def test_onto_grid_reproduces_a_linear_field_exactly(angle):
    # Elementary: bilinear interpolation is exact for a function linear in position, so a field
    # f(p) = a . p read from the rotated grid at the original pixels must equal f there.
    image = sitk.Image((20, 20, 20), sitk.sitkFloat32)
    line = Centerline(np.c_[np.linspace(2, 8, 6), np.linspace(3, 6, 6), np.linspace(1, 9, 6)])
    base = sample_cross_sections(image, line, points=5, size=10, pixel_mm=0.4)
    turned = sample_cross_sections(image, line, points=5, size=10, pixel_mm=0.4,
                                   rotation_deg=angle)
    a = np.array([0.3, -1.2, 2.0])
    got, valid = onto_grid(turned.points_mm @ a, turned.points_mm, base.points_mm, 0.4)
    want = base.points_mm @ a
    assert valid.mean() > (0.6 if angle % 90 else 0.999)
    np.testing.assert_allclose(got[valid], want[valid], atol=1e-9)


def test_quarter_turns_of_a_rotation_blind_model_agree_exactly(small_case):
    # A quarter turn of a square grid about its centre moves pixels onto pixels, so the mean of
    # (x / 100)^2 per segment (WeightBlind) cannot change, and the gradient 2 x w / (100^2 n)
    # turns with the pixels: brought back, it is the same map (Spearman 1, scipy.stats).
    model = wrap_model(models.WeightBlind())
    result = augmentation_stability(model, small_case, sampling=SAMPLING, methods=("gradient",),
                                    target=0, rotations_deg=(0, 90, 180), jitter_draws=0)
    assert [r.setting for r in result.augmented] == [90.0, 180.0]   # 0 is the unaugmented run
    for run in result.augmented:
        assert run.spearman["gradient"] == pytest.approx(1.0, abs=1e-6)
        assert run.target == pytest.approx(result.unaugmented.target, rel=1e-5)
    assert result.grade_agreement == 1.0 and result.culprit_agreement == 1.0
    assert result.mean_target == pytest.approx(result.unaugmented.target, rel=1e-5)


def test_jitter_is_seeded_and_its_numbers_are_consistent(small_case):
    model = wrap_model(models.WeightBlind())
    kw = dict(sampling=SAMPLING, methods=("gradient",), target=0, rotations_deg=(),
              jitter_draws=2)
    a = augmentation_stability(model, small_case, seed=5, **kw)
    b = augmentation_stability(model, small_case, seed=5, **kw)
    assert a.to_dict() == b.to_dict()
    d = a.to_dict()
    runs = [d["unaugmented"], *d["augmented"]]
    assert d["mean_target"] == pytest.approx(np.mean([r["target"] for r in runs]))
    assert d["culprit_agreement"] == np.mean([r["culprit"] == runs[0]["culprit"]
                                              for r in runs[1:]])
    assert d["settings"]["jitter_seeds"] == [[5, 0], [5, 1]]
    for run in a.augmented:
        assert -1.0 <= run.spearman["gradient"] < 1.0     # the jitter did move the sampling


def test_jittered_case_moves_every_centerline(small_case):
    moved = jittered_case(small_case, rms_mm=0.5, correlation_mm=5.0,
                          rng=np.random.default_rng(0))
    assert moved.segment_ids == small_case.segment_ids
    for old, new in zip(small_case.segments, moved.segments):
        assert new.radius_mm is None
        p = old.centerline.even_samples(50)[0]
        q = new.centerline.even_samples(50)[0]
        assert 0.2 < np.sqrt(((p - q) ** 2).sum(axis=1).mean()) < 1.0


@pytest.mark.parametrize("kwargs, match", [
    ({"rotations_deg": ("a",)}, "rotations"), ({"jitter_draws": -1}, "jitter draws"),
    ({"jitter_rms_mm": 0.0}, "jitter")])
def test_bad_augmentation_options(small_case, kwargs, match):
    model = wrap_model(models.WeightBlind())
    with pytest.raises(InputError, match=match):
        augmentation_stability(model, small_case, sampling=SAMPLING, methods=("gradient",),
                               target=0, **kwargs)


def test_spearman_on_valid_pixels_only_is_scipys():
    # the comparison itself is scipy.stats.spearmanr over the covered pixels
    rng = np.random.default_rng(0)
    a, b = rng.random((2, 5, 6, 6))
    from explain.quality.similarity import spearman

    valid = rng.random((5, 6, 6)) > 0.3
    assert spearman(a, b, valid=valid)[0] == pytest.approx(spearmanr(a[valid], b[valid]).statistic)
