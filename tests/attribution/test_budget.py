"""Batch sizes of the model passes follow the memory budget (our own rule, explain.attribution.budget).

The probe's byte count is checked on a model whose saved tensors are known by hand: the encoder
squares its input and sums it (``torch.pow`` saves its input for the backward pass; ``sum``
saves none), the head multiplies by a number (saves none). So one segment of N x H x W float32
saves N*H*W*4 bytes, plus the probe input itself; one head row saves nothing but its input.
"""

import pytest
import torch

from explain.attribution.budget import BATCH_CAPS, batches_for_budget
from explain.errors import InputError
from explain.model import wrap_model


class Squares(torch.nn.Module):
    def encode_segments(self, x):
        return (x ** 2).sum(dim=(2, 3, 4))[..., None]   # (B, S, 1)

    def head(self, pooled):
        return pooled * 3.0


S, N, H, W = 4, 6, 5, 5
SEGMENT_BYTES = 2 * N * H * W * 4          # pow's saved input + the probe input
HEAD_BYTES = 1 * 4                          # the pooled row (C = 1)
STEP_BYTES = 4 * S * SEGMENT_BYTES + 4 * HEAD_BYTES   # four times the saved bytes (our rule)


@pytest.fixture
def wrapped():
    return wrap_model(Squares(), name="squares")


@pytest.mark.parametrize("steps", [1, 3, 7])
def test_ig_steps_per_call_are_what_fits(wrapped, steps):
    x = torch.ones(1, S, N, H, W)
    budget = (steps * STEP_BYTES + STEP_BYTES // 2) / 1e9
    b = batches_for_budget(wrapped, x, memory_budget_gb=budget)
    assert b.integrated_gradients == steps
    assert b.occlusion == min(BATCH_CAPS["occlusion"], int(budget * 1e9 // SEGMENT_BYTES))
    assert b.segment_mb == pytest.approx(SEGMENT_BYTES / 1e6)


def test_large_budget_keeps_the_fixed_counts_and_tiny_one_gives_one(wrapped):
    x = torch.ones(1, S, N, H, W)
    big = batches_for_budget(wrapped, x, memory_budget_gb=100.0)
    assert (big.integrated_gradients, big.occlusion, big.head) == (
        BATCH_CAPS["integrated_gradients"], BATCH_CAPS["occlusion"], BATCH_CAPS["head"])
    tiny = batches_for_budget(wrapped, x, memory_budget_gb=1e-9)
    assert (tiny.integrated_gradients, tiny.occlusion, tiny.head) == (1, 1, 1)


@pytest.mark.parametrize("bad", [0, -1.0, float("nan"), float("inf"), "1", True])
def test_bad_budget_is_refused(wrapped, bad):
    with pytest.raises(InputError, match="memory_budget_gb"):
        batches_for_budget(wrapped, torch.ones(1, S, N, H, W), memory_budget_gb=bad)


def test_bad_budget_message_names_the_field(wrapped):
    with pytest.raises(InputError, match=r"^memory_budget_gb: expected a number of GB > 0"):
        batches_for_budget(wrapped, torch.ones(1, S, N, H, W), memory_budget_gb=0)


class LinearHead(Squares):
    """The same encoder; a torch.nn.Linear(1, 2) head, whose saved tensors are known by hand:
    addmm saves its input row (1, 1) for the weight's gradient and the weight (2, 1) for the
    input's gradient (torch autograd derivatives.yaml, ``addmm``); the bias saves nothing."""

    def __init__(self):
        super().__init__()
        self.fc = torch.nn.Linear(1, 2)

    def head(self, pooled):
        return self.fc(pooled)


LINEAR_HEAD_BYTES = (1 + 2) * 4 + 1 * 4   # saved row and weight, plus the row itself


@pytest.mark.parametrize("rows", [1, 5, 40])
def test_head_rows_per_call_are_what_fits(rows):
    wrapped = wrap_model(LinearHead(), name="linear-head")
    x = torch.ones(1, S, N, H, W)
    item = 4 * LINEAR_HEAD_BYTES              # four times the saved bytes (our rule)
    budget = (rows * item + item // 2) / 1e9
    b = batches_for_budget(wrapped, x, memory_budget_gb=budget)
    assert b.head == rows
    assert b.memory_budget_gb == pytest.approx(budget, rel=1e-12)
    step = 4 * S * SEGMENT_BYTES + item
    assert b.integrated_gradients == max(1, min(BATCH_CAPS["integrated_gradients"],
                                                int(budget * 1e9 // step)))


def test_one_byte_short_of_two_items_fits_one(wrapped):
    # Floor division: 2 * item - 1 bytes hold one item, not 1.99 rounded anywhere else.
    x = torch.ones(1, S, N, H, W)
    b = batches_for_budget(wrapped, x, memory_budget_gb=(2 * SEGMENT_BYTES - 1) / 1e9)
    assert b.occlusion == 1
    b = batches_for_budget(wrapped, x, memory_budget_gb=(2 * SEGMENT_BYTES) / 1e9)
    assert b.occlusion == 2


def test_ig_steps_count_the_head_pass_too():
    # one byte short of 3 steps (encoder of S segments and the head, our rule): 2 steps
    wrapped = wrap_model(LinearHead(), name="linear-head")
    step = 4 * S * SEGMENT_BYTES + 4 * LINEAR_HEAD_BYTES
    b = batches_for_budget(wrapped, torch.ones(1, S, N, H, W), memory_budget_gb=(3 * step - 1) / 1e9)
    assert b.integrated_gradients == 2
