"""Targets: columns, predicted, expected category (softmax times rank), dict keys."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from scipy.special import softmax

from explain.errors import InputError
from explain.grading import CATEGORIES
from explain.model import resolve_target


def test_expected_category_matches_scipy_softmax():
    # reference: scipy.special.softmax; ranks are CAD-RADS 2.0 order 0,1,2,3,4A,4B,5 (Cury 2022)
    logits = np.array([[0.3, -1.0, 2.0, 0.5, 0.0, -0.2, 1.1]])
    want = float((softmax(logits[0]) * np.arange(7)).sum())
    t = resolve_target(torch.tensor(logits), "expected", grade_labels=CATEGORIES)
    assert float(t(torch.tensor(logits))) == pytest.approx(want, rel=1e-12)


def test_expected_uses_only_grade_columns():
    logits = np.array([[0.3, -1.0, 2.0, 5.0]])
    t = resolve_target(torch.tensor(logits), "expected", grade_labels=("0", "4A", "5", "N"))
    p = softmax(logits[0, :3])
    assert float(t(torch.tensor(logits))) == pytest.approx(float(p @ [0, 4, 6]), rel=1e-12)


def test_predicted_is_fixed_at_the_explained_output():
    out = torch.tensor([[0.0, 3.0, 1.0]])
    t = resolve_target(out, "predicted")
    assert t.label == 1
    assert t(torch.tensor([[9.0, 0.5, 0.0]])).tolist() == [0.5]


def test_dict_targets():
    out = {"grade": torch.tensor([[0.0, 3.0]]), "score": torch.tensor([[7.0]])}
    assert resolve_target(out, "score").label == "score:0"
    assert resolve_target(out, "grade:predicted").label == "grade:1"
    assert resolve_target(out, "grade:0")(out).tolist() == [0.0]
    with pytest.raises(InputError, match="name one"):
        resolve_target(out, 1)
    with pytest.raises(InputError, match="2 columns"):
        resolve_target(out, "grade")
    with pytest.raises(InputError, match="outside"):
        resolve_target(out, "grade:5")


def test_auto_is_the_expected_category_for_a_cadrads_grader():
    # ranks are the CAD-RADS 2.0 order 0,1,2,3,4A,4B,5 (Cury 2022); softmax from scipy.special
    logits = np.array([[0.3, -1.0, 2.0, 0.5, 0.0, -0.2, 1.1]])
    t = resolve_target(torch.tensor(logits), "auto", grade_labels=CATEGORIES)
    assert t.label == "expected"
    want = float((softmax(logits[0]) * np.arange(7)).sum())
    assert float(t(torch.tensor(logits))) == pytest.approx(want, rel=1e-12)


@pytest.mark.parametrize("labels", [None, ("benign", "malignant", "unsure"), ("0", "high", "low")])
def test_auto_is_the_predicted_column_without_cadrads_labels(labels):
    out = torch.tensor([[0.0, 3.0, 1.0]])
    t = resolve_target(out, "auto", grade_labels=labels)
    assert t.label == 1          # the arg-max column, as "predicted" gives
    assert t(torch.tensor([[9.0, 0.5, 0.0]])).tolist() == [0.5]


def test_auto_on_a_dict_output_needs_the_entry_named():
    out = {"grade": torch.zeros(1, 7), "score": torch.zeros(1, 1)}
    assert resolve_target(out, "grade:auto", grade_labels=CATEGORIES).label == "grade:expected"
    with pytest.raises(InputError, match="name one"):
        resolve_target(out, "auto", grade_labels=CATEGORIES)
