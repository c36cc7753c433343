"""The bundled reference network: shipped weights load, the spec and labels are declared."""

from __future__ import annotations

import json
from importlib import resources

import pytest
import torch

from explain.attribution import attribute, trace_segments
from explain.grading import CATEGORIES
from explain.model import REFERENCE_SPEC, load_model


@pytest.fixture(scope="module")
def reference():
    return load_model("builtin:reference")


def test_shipped_weights_load(reference):
    assert reference.kind == "protocol" and reference.name == "reference"
    assert reference.spec == REFERENCE_SPEC and reference.grade_labels == CATEGORIES
    shipped = resources.files("explain.model").joinpath("reference.pt")
    assert shipped.stat().st_size < 5_000_000  # "a few MB at most"
    metrics = json.loads(resources.files("explain.model").joinpath("reference-metrics.json").read_text())
    assert len(metrics["confusion_rows_true_cols_predicted"]) == len(CATEGORIES)


def test_training_metrics_recomputed_independently():
    # Not what the training script says, but what can be recomputed: the case seeds of the
    # train and held-out cohorts from explain.phantom.plan_cohort (no overlap), and the
    # accuracies from the confusion matrix (trace / total; within one category: the three
    # central diagonals), elementary arithmetic.
    import numpy as np

    from explain.phantom import plan_cohort

    metrics = json.loads(resources.files("explain.model").joinpath("reference-metrics.json").read_text())
    cfg = metrics["settings"]
    train = {e.seed for e in plan_cohort(count=cfg["train_count"], seed=cfg["train_cohort_seed"])}
    held = {e.seed for e in plan_cohort(count=cfg["heldout_count"], seed=cfg["heldout_cohort_seed"])}
    test = {e.seed for e in plan_cohort(count=cfg["test_count"], seed=cfg["test_cohort_seed"])}
    assert len(train) == cfg["train_count"] and len(held) == cfg["heldout_count"]
    assert not train & held and not train & test
    assert metrics["case_seed_overlap_train_heldout"] == len(train & held)
    m = np.asarray(metrics["confusion_rows_true_cols_predicted"])
    assert m.shape == (7, 7) and m.sum() == metrics["heldout_cases"] == cfg["heldout_count"]
    assert metrics["heldout_accuracy"] == pytest.approx(np.trace(m) / m.sum(), abs=1e-12)
    near = sum(np.trace(m, offset=k) for k in (-1, 0, 1))
    assert metrics["heldout_within_one_category"] == pytest.approx(near / m.sum(), abs=1e-12)
    # the held-out cohort's true categories are the ones plan_cohort planned for it
    planned = [e.category for e in plan_cohort(count=cfg["heldout_count"],
                                               seed=cfg["heldout_cohort_seed"])]
    assert m.sum(axis=1).tolist() == [planned.count(c) for c in CATEGORIES]


def test_reference_runs_all_steps_on_a_small_patient(reference):
    x = torch.full((1, 2) + REFERENCE_SPEC.shape, -80.0)
    x[:, :, :, 8:16, 8:16] = 350.0  # a bright lumen in fat
    x[0, 1, 10:14, 9:15, 9:15] = 60.0  # a soft plaque narrowing segment 1
    out = reference(x)
    assert out.shape == (1, len(CATEGORIES)) and torch.isfinite(out).all()
    tr = trace_segments(reference, x, target="expected")
    assert abs(tr.shapley.sum() - (tr.value_all - tr.value_empty)) < 1e-9  # Shapley 1953 efficiency
    cam = attribute(reference, x, method="gradcam", target="expected")
    assert cam.shape == x.shape and torch.isfinite(cam).all()


def test_maps_fail_to_survive_weight_randomisation(reference):
    # sanity check of Adebayo et al., NeurIPS 2018: re-initialise the weights and the gradient
    # map must change (Spearman rank correlation with the trained map well below 1)
    from scipy.stats import spearmanr

    from explain.model import build_reference, wrap_model

    x = torch.full((1, 2) + REFERENCE_SPEC.shape, -80.0)
    x[:, :, :, 8:16, 8:16] = 350.0
    x[0, 1, 10:14, 9:15, 9:15] = 60.0
    g = torch.Generator().manual_seed(0)
    x = x + 20.0 * torch.randn(x.shape, generator=g)
    trained = attribute(reference, x, method="gradient", target="expected")
    random = attribute(wrap_model(build_reference(seed=123)), x, method="gradient", target="expected")
    rho = spearmanr(trained.flatten().numpy(), random.flatten().numpy()).statistic
    assert rho < 0.5


def test_texture_channel_is_the_local_standard_deviation():
    # outside reference: scipy.ndimage.generic_filter with numpy's population sd over the
    # in-plane 3 x 3 neighbourhood (pixels outside the plane left out, as nanstd does)
    import numpy as np
    from scipy import ndimage

    from explain.model.reference import _FLOOR_HU, _NOISE_HU, _SCALE_HU, local_sd

    g = torch.Generator().manual_seed(0)
    z = torch.randn((1, 1, 3, 7, 6), generator=g, dtype=torch.float64)
    z[0, 0, 1, 1:5, 1:5] = 0.25  # a flat window
    want = ndimage.generic_filter(z[0, 0].numpy(), np.nanstd, size=(1, 3, 3), mode="constant",
                                  cval=np.nan)
    want = np.sqrt(want**2 + (_FLOOR_HU / _SCALE_HU) ** 2) * (_SCALE_HU / _NOISE_HU)
    got = local_sd(z)[0, 0].numpy()
    np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-9)
    # inside the flat window only the floor is left: 2 HU / 25 HU (arithmetic)
    np.testing.assert_allclose(got[1, 2:4, 2:4], _FLOOR_HU / _NOISE_HU, rtol=1e-6)
