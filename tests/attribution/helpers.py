"""Load the tiny hand-built models of tests/model/models.py (tests use importlib mode)."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import torch

_spec = importlib.util.spec_from_file_location(
    "tiny_models", Path(__file__).parents[1] / "model" / "models.py"
)
tm = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(tm)


def patient(s=4, n=4, h=6, w=6, seed=0, scale=200.0):
    g = torch.Generator().manual_seed(seed)
    return torch.randn(1, s, n, h, w, generator=g) * scale
