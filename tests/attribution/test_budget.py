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
