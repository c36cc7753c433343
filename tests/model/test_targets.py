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


def test_tuple_and_list_targets_name_an_entry_by_index():
    logits = np.array([[0.3, -1.0, 2.0, 0.5, 0.0, -0.2, 1.1]])
    out = (torch.tensor(logits), torch.tensor([[7.0, -2.0]]))
    assert resolve_target(out, "1:0")(out).tolist() == [7.0]
    assert resolve_target(list(out), "1:predicted").label == "1:0"
    # the expected category of entry 0 against scipy.special.softmax, CAD-RADS 2.0 ranks
    t = resolve_target(out, "0:expected", grade_labels=CATEGORIES)
    want = float((softmax(logits[0]) * np.arange(7)).sum())
    assert float(t(out)) == pytest.approx(want, rel=1e-12)
    with pytest.raises(InputError, match=r"no output entry 2; have \[0, 1\]"):
        resolve_target(out, "2:0")
    with pytest.raises(InputError, match="by its index"):
        resolve_target(out, "grade:0")


def test_several_entries_unnamed_is_an_error_with_a_real_key():
    out = {"stenosis": torch.tensor([[0.0, 3.0]]), "calcium": torch.tensor([[7.0]])}
    with pytest.raises(InputError, match=r"--target 'stenosis:0' or 'stenosis:expected'"):
        resolve_target(out, "auto")
    with pytest.raises(InputError, match=r"--target '0:0' or '0:expected'"):
        resolve_target((out["calcium"], out["stenosis"]), "predicted")


def test_a_one_entry_output_is_explained_with_a_note():
    from explain.model.targets import target_note

    out = {"logits": torch.tensor([[0.0, 3.0]])}
    t = resolve_target(out, "predicted")
    assert t.label == "logits:1"
    assert "one entry 'logits'" in target_note(out, "predicted", t)
    assert target_note(out, "logits:1", resolve_target(out, "logits:1")) is None
    assert target_note(out["logits"], "predicted", resolve_target(out["logits"], "predicted")) is None
