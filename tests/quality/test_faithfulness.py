"""Faithfulness curves checked on hand-built models whose curves are worked out by hand.

Segment level: a max game on one feature, v(T) = max(features in T, baseline feature), a linear
head on one pooled feature. Cross-section level: a segment value linear in the pixels
(f = mean HU / 100), so deleting the k largest pixels lowers f by their sum / (100 n): the
deletion and insertion of Petsiuk, Das, Saenko 2018 (RISE) follow from a cumulative sum.
"""

import itertools

import numpy as np
import pytest
import torch

from explain.quality.faithfulness import (curve_auc, order_curves, section_faithfulness,
                                          segment_faithfulness)


def _identity_head(pooled):
    return pooled[:, 0].double().numpy()


FEATS = torch.tensor([[4.0], [1.0], [0.5]])
BASE = torch.tensor([0.0])
# Shapley values of the max game on (4, 1, 0.5) with v(empty) = 0, worked by hand:
# phi3 = 0.5/3, phi2 = 0.5/3 + 0.5/2, phi1 = phi2 + 3
SHAPLEY = [0.5 / 3 + 0.25 + 3.0, 0.5 / 3 + 0.25, 0.5 / 3]


def test_order_curves_are_the_max_over_what_is_left_and_what_was_added():
    deletion, insertion = order_curves(FEATS, BASE, [1, 0, 2])
    assert deletion[:, 0].tolist() == [4.0, 4.0, 0.5, 0.0]
    assert insertion[:, 0].tolist() == [0.0, 1.0, 4.0, 4.0]


def test_segment_curves_and_areas_by_hand():
    out = segment_faithfulness(_identity_head, FEATS, BASE, SHAPLEY, random_orders=4, seed=0)
    assert out["order"] == [0, 1, 2]
    assert out["deletion"] == [4.0, 1.0, 0.5, 0.0]
    assert out["insertion"] == [0.0, 4.0, 4.0, 4.0]
    # normalised deletion 1, .25, .125, 0; trapezoids of width 1/3
    assert out["deletion_auc"] == pytest.approx((0.625 + 0.1875 + 0.0625) / 3)
    # normalised insertion 0, 1, 1, 1
    assert out["insertion_auc"] == pytest.approx((0.5 + 1 + 1) / 3)
    assert (out["value_all"], out["value_none"]) == (4.0, 0.0)


def test_random_baseline_converges_to_the_mean_over_all_orders():
    # brute force: the expected area over all 3! orders, each equally likely
    aucs = {"deletion": [], "insertion": []}
    for order in itertools.permutations(range(3)):
        d, i = order_curves(FEATS, BASE, order)
        aucs["deletion"].append(curve_auc(d[:, 0].numpy(), 4.0, 0.0))
        aucs["insertion"].append(curve_auc(i[:, 0].numpy(), 4.0, 0.0))
    out = segment_faithfulness(_identity_head, FEATS, BASE, SHAPLEY, random_orders=3000, seed=1)
    assert out["random_deletion_auc"] == pytest.approx(np.mean(aucs["deletion"]), abs=0.01)
    assert out["random_insertion_auc"] == pytest.approx(np.mean(aucs["insertion"]), abs=0.01)
    assert out["deletion_minus_random"] == pytest.approx(
        out["deletion_auc"] - out["random_deletion_auc"])


def test_random_orders_are_seeded():
    a = segment_faithfulness(_identity_head, FEATS, BASE, SHAPLEY, random_orders=5, seed=3)
    b = segment_faithfulness(_identity_head, FEATS, BASE, SHAPLEY, random_orders=5, seed=3)
    assert a == b


def test_no_change_to_normalise_by_gives_no_area():
    assert curve_auc([1.0, 1.0], 1.0, 1.0) is None


def _mean_value(batch):
    return (batch.reshape(batch.shape[0], -1).double().mean(dim=1) / 100.0).numpy()


def test_cross_section_deletion_and_insertion_by_hand():
    original = torch.arange(16, dtype=torch.float32).reshape(1, 4, 4)   # sum 120
    out = section_faithfulness(_mean_value, original, {"m": original.numpy()}, steps=4,
                               fraction=0.5, baseline_hu=0.0, random_orders=2, seed=0,
                               value_all=120 / 1600, value_none=0.0)
    assert out["fraction_deleted"] == [0.0, 0.125, 0.25, 0.375, 0.5]
    curve = out["methods"]["m"]
    # 2, 4, 6, 8 largest pixels: 15+14 = 29, 54, 75, 92
    assert curve["deletion"] == pytest.approx(np.array([120, 91, 66, 45, 28]) / 1600)
    assert curve["insertion"] == pytest.approx(np.array([0, 29, 54, 75, 92]) / 1600)
    assert curve["deletion_auc"] == pytest.approx(curve_auc(curve["deletion"], 120 / 1600, 0.0))


def test_cross_section_order_of_a_reversed_map_deletes_the_smallest_first():
    original = torch.arange(16, dtype=torch.float32).reshape(1, 4, 4)
    out = section_faithfulness(_mean_value, original, {"m": -original.numpy()}, steps=2,
                               fraction=0.25, baseline_hu=0.0, random_orders=1, seed=0,
                               value_all=0.075, value_none=0.0)
    # -x ranks pixel 0 first, then 1, 2, 3: deleting 0+1 then 0+1+2+3 removes 1 and 6
    assert out["methods"]["m"]["deletion"] == pytest.approx(np.array([120, 119, 114]) / 1600)
