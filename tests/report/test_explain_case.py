"""explain_case end to end with a tiny hand-built model whose answer is known.

The model's only feature is the darkest lumen centre along each segment (see conftest), so
the culprit must be the segment painted with a narrowed (darker) lumen. With the bright lumen
value (350 HU) as the "absent" value, Integrated Gradients of this model are (x - 350) times
the path-averaged gradient, non-zero only where x differs from 350 HU, i.e. in the painted
stretch, and they sum to F(x) - F(baseline) (Sundararajan et al. 2017), and occlusion drops the output only
where a window covers it (Zeiler and Fergus 2014), so both must peak there.
"""

import numpy as np
import pytest
import torch

from explain import CAUTION
from explain.errors import InputError
from explain.model import wrap_model
from explain.report import explain_case


@pytest.fixture(scope="module")
def dark_case(synth):
    return synth.make_case(lesion_hu=100.0)


@pytest.fixture(scope="module")
def model(synth):
    return wrap_model(synth.DarkCentre(), grade_labels=["none", "dark"], name="dark-centre")


@pytest.fixture(scope="module")
def explained(model, dark_case):
    messages = []
    e = explain_case(model, dark_case, methods=("integrated_gradients", "occlusion"), target=1, points=20,
                     size=11, pixel_mm=0.5, baseline_hu=350.0, seed=3, progress=messages.append)
    return e, messages


def test_culprit_is_the_narrowed_segment(explained):
    e, messages = explained
    assert e.culprit.id == 7
    # The margin derived exactly: each segment's feature by hand from its sampled stack,
    # f = 10 mean(((350 - centre HU) / 350)^2), the baseline (350 HU) at 0; v(T) = max over T, so
    # Shapley values have the airport-game closed form (Littlechild and Owen 1973):
    # phi_(i) = sum_{j <= i} (f_(j) - f_(j-1)) / (n - j + 1), ascending order.
    values = e.sections.values.astype(np.float64)
    h, w = values.shape[-2:]
    f = 10.0 * (((350.0 - values[:, :, h // 2, w // 2]) / 350.0) ** 2).mean(axis=1)
    order = np.argsort(f, kind="stable")
    steps = np.diff(np.concatenate([[0.0], f[order]])) / (len(f) - np.arange(len(f)))
    phi = np.empty(len(f))
    phi[order] = np.cumsum(steps)
    assert [s.shapley for s in e.segments] == pytest.approx(phi.tolist(), abs=1e-5)
    ranked = np.sort(phi)
    assert e.margin == pytest.approx(ranked[-1] - ranked[-2], abs=1e-5)
    assert e.margin > 0.5 * e.target["value"]  # segment 7 carries nearly the whole change
    assert e.prediction["grade"] == "dark"
    # About 5 of 20 cross-sections darkened by 250 HU (trilinear sampling blurs the ends).
    assert 0.1 * 10 * (250 / 350) ** 2 < e.target["value"] < 0.4 * 10 * (250 / 350) ** 2
    assert any("saliency" in m for m in messages) and any("tracing" in m for m in messages)


@pytest.mark.parametrize("method", ["integrated_gradients", "occlusion"])
def test_peak_lies_in_the_painted_lesion(explained, synth, method):
    e, _ = explained
    _, start, end = synth.LESION
    peak = e.culprit.locations[method].peak
    step = e.sections.sections[e.culprit_index].arc_mm[1]
    assert start - step <= peak.arc_mm <= end + step
    image = e.case.image
    lesion_voxels = _painted_voxels(e.case.image)
    # The peak voxel is in the painted lesion or touches it (26-neighbourhood).
    i, j, k = peak.voxel
    near = lesion_voxels[max(k - 1, 0):k + 2, max(j - 1, 0):j + 2, max(i - 1, 0):i + 2]
    assert near.any(), (peak, image.GetSize())


def _painted_voxels(image):
    import SimpleITK as sitk

    return sitk.GetArrayFromImage(image) == 100.0


def test_settings_record_every_option(explained):
    e, _ = explained
    s = e.settings
    assert (s["points"], s["size"], s["pixel_mm"], s["baseline_hu"], s["seed"]) == (
        20, 11, 0.5, 350.0, 3)
    assert s["methods"] == ["integrated_gradients", "occlusion"]
    # Occlusion hides 4 mm of arc: round(4 mm / (length / 19 spacings)) cross-sections on each
    # segment, slid by half a window (arithmetic from the segments' own lengths).
    occ = s["method_options"]["occlusion"]
    lengths = [seg.centerline.length_mm for seg in sorted(e.case.segments, key=lambda g: g.id)]
    along = [min(20, max(1, round(4.0 / (length / 19)))) for length in lengths]
    assert occ["window_mm"] == 4.0
    assert occ["window"] == [[n, 8, 8] for n in along]
    assert occ["stride"] == [[max(1, n // 2), 8, 8] for n in along]
    assert occ["arc_step_mm"] == pytest.approx([length / 19 for length in lengths])
    assert s["target"] == 1
    assert e.cautions[0] == CAUTION
    assert "culprit 7 (mLAD)" in repr(e)


def test_bad_options_are_input_errors(model, dark_case):
    common = dict(points=20, size=11, pixel_mm=0.5)
    with pytest.raises(InputError, match="unknown 'saliency'"):
        explain_case(model, dark_case, methods=("saliency",), **common)
    with pytest.raises(InputError, match="twice"):
        explain_case(model, dark_case, methods=("gradient", "gradient"), **common)
    with pytest.raises(InputError, match="seed"):
        explain_case(model, dark_case, methods=("gradient",), seed=1.5, **common)
    with pytest.raises(InputError, match="baseline_hu"):
        explain_case(model, dark_case, methods=("gradient",), baseline_hu="water", **common)
    with pytest.raises(InputError, match="wrap_model"):
        explain_case(torch.nn.Linear(2, 2), dark_case, **common)
    # The model states no sampling: points, size and pixel_mm must be given.
    with pytest.raises(InputError, match="--points"):
        explain_case(model, dark_case, methods=("gradient",))


def test_same_seed_same_maps(model, dark_case):
    def run(seed):
        return explain_case(model, dark_case, methods=("smoothgrad",), target=1, points=20,
                            size=11, pixel_mm=0.5, seed=seed).maps["smoothgrad"]

    first = run(5)
    np.testing.assert_array_equal(run(5), first)
    assert not np.array_equal(run(6), first)


def test_default_target_is_the_expected_category_for_cadrads_labels(synth, dark_case):
    # The same model, its two columns labelled as CAD-RADS 2.0 categories 0 and 4A (Cury 2022):
    # the default target "auto" explains the expected category, softmax(scores) . (0, 4),
    # checked against scipy.special.softmax.
    from scipy.special import softmax

    graded = wrap_model(synth.DarkCentre(), grade_labels=["0", "4A"], name="dark-centre")
    e = explain_case(graded, dark_case, methods=("gradient",), points=20, size=11, pixel_mm=0.5,
                     baseline_hu=350.0)
    assert e.settings["target"] == "auto"
    assert e.target["label"] == "expected"
    scores = [e.prediction["scores"][k] for k in ("0", "4A")]
    assert e.target["value"] == pytest.approx(float(softmax(scores) @ [0.0, 4.0]), rel=1e-6)
    assert e.culprit.id == 7
    # Labels that are not CAD-RADS categories: "auto" explains the predicted column.
    plain = explain_case(wrap_model(synth.DarkCentre(), grade_labels=["none", "dark"]), dark_case,
                         methods=("gradient",), points=20, size=11, pixel_mm=0.5, baseline_hu=350.0)
    assert plain.target["label"] == 1


def test_profile_aggregate_per_method(synth):
    # Gradients are sensitivities whose sign only says which way HU would move, so their profile
    # sums the magnitude (as the saliency maps of Simonyan, Vedaldi, Zisserman 2014 do); the
    # other methods are contributions, of which the positive part supports the target
    # (our choice, documented in docs/report-format.md). Profiles recomputed here with numpy.
    from explain.attribution import METHODS
    from explain.report.explanation import aggregate_of

    absolute = {"gradient", "smoothgrad"}
    assert {m: aggregate_of(m) for m in METHODS} == {
        m: "absolute" if m in absolute else "positive" for m in METHODS}
    e = synth.make_explanation(methods=("occlusion", "gradient", "smoothgrad"))
    for s, seg in enumerate(e.segments):
        for method in ("gradient", "smoothgrad"):
            m = e.maps[method][s].astype(np.float64)
            assert seg.locations[method].aggregate == "absolute"
            np.testing.assert_allclose(seg.locations[method].profile, np.abs(m).sum(axis=(1, 2)))
        m = e.maps["occlusion"][s].astype(np.float64)
        assert seg.locations["occlusion"].aggregate == "positive"
        np.testing.assert_allclose(seg.locations["occlusion"].profile,
                                   np.clip(m, 0, None).sum(axis=(1, 2)))
    # the signed map (-0.05 everywhere) makes the two rules differ
    assert not np.allclose(np.abs(e.maps["gradient"][0]).sum(), e.maps["gradient"][0].sum())
