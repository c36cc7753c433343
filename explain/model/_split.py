"""Finding the segment max inside a forward pass, and stopping at or replacing it.

Under a :class:`torch.overrides.TorchFunctionMode`, :class:`Record` notes every call of the max
family with the size of the axis it reduces; :class:`Split` stops at (encode) or replaces (head)
the chosen call. See :mod:`explain.model.wrap` for how the two are used.
"""

from __future__ import annotations

import math

import torch
from torch.overrides import TorchFunctionMode

from ..errors import ModelError

_REDUCTIONS = {
    "max", "amax", "max_pool1d", "max_pool1d_with_indices",
    "adaptive_max_pool1d", "adaptive_max_pool1d_with_indices",
}
_POOLS = {"max_pool1d", "max_pool1d_with_indices", "adaptive_max_pool1d",
          "adaptive_max_pool1d_with_indices"}


def _reduced_dim(name, args, kwargs):
    """(input tensor, reduced axis) of a max-family call, or None if it reduces no single axis."""
    if not args or not isinstance(args[0], torch.Tensor):
        return None
    t = args[0]
    if name in _POOLS:
        if t.ndim < 2:
            return None
        length = t.shape[-1]
        if name.startswith("adaptive"):
            size = args[1] if len(args) > 1 else kwargs.get("output_size")
            size = size[0] if isinstance(size, (tuple, list)) else size
            return (t, t.ndim - 1) if size == 1 else None
        kernel = args[1] if len(args) > 1 else kwargs.get("kernel_size")
        kernel = kernel[0] if isinstance(kernel, (tuple, list)) else kernel
        return (t, t.ndim - 1) if kernel is not None and kernel >= length else None
    dim = args[1] if len(args) > 1 else kwargs.get("dim")
    if isinstance(dim, torch.Tensor) or dim is None:  # elementwise max(a, b) or a full reduction
        return None
    if isinstance(dim, (tuple, list)):
        if len(dim) != 1:
            return None
        dim = dim[0]
    return t, dim % t.ndim


class Record(TorchFunctionMode):
    def __init__(self):
        super().__init__()
        self.calls = []  # (name, size of the reduced axis or None)

    def __torch_function__(self, func, types, args=(), kwargs=None):
        kwargs = kwargs or {}
        name = getattr(func, "__name__", "")
        if name in _REDUCTIONS:
            found = _reduced_dim(name, args, kwargs)
            self.calls.append((name, None if found is None else found[0].shape[found[1]]))
        return func(*args, **kwargs)


class Stop(Exception):
    def __init__(self, tensor, dim):
        super().__init__("segment max reached")
        self.tensor, self.dim = tensor, dim


class Split(TorchFunctionMode):
    """Stop at (encode) or replace (head) the ``index``-th max-family call."""

    def __init__(self, index, pooled=None, grad=True):
        super().__init__()
        self.index, self.pooled, self.grad, self.count = index, pooled, grad, 0

    def __torch_function__(self, func, types, args=(), kwargs=None):
        kwargs = kwargs or {}
        name = getattr(func, "__name__", "")
        if name in _REDUCTIONS:
            here, self.count = self.count, self.count + 1
            if here == self.index:
                found = _reduced_dim(name, args, kwargs)
                if found is None:
                    raise ModelError("the segment max was not found again at the same call")
                t, dim = found
                if self.pooled is None:
                    raise Stop(t, dim)
                torch.set_grad_enabled(self.grad)
                return _substitute(name, args, kwargs, t, dim, self.pooled)
        return func(*args, **kwargs)


def _layout(t, dim):
    batch = 0 if dim != 0 else 1
    perm = [batch, dim] + [a for a in range(t.ndim) if a not in (batch, dim)]
    return perm


def features(t, dim):
    perm = _layout(t, dim)
    p = t.permute(perm)
    return p.reshape(p.shape[0], p.shape[1], -1)


def _substitute(name, args, kwargs, t, dim, pooled):
    perm = _layout(t, dim)
    rest = [t.shape[a] for a in perm[2:]]
    if pooled.shape[1] != math.prod(rest):
        raise ModelError(
            f"head: pooled tensor has {pooled.shape[1]} channels, the model's max has "
            f"{math.prod(rest)}"
        )
    values = pooled.reshape(pooled.shape[0], 1, *rest).permute(_inverse(perm))
    if name in _POOLS:
        keep = True
    else:
        keep = bool(args[2] if len(args) > 2 else kwargs.get("keepdim", False))
    if not keep:
        values = values.squeeze(dim)
    if name == "max" or name.endswith("with_indices") or kwargs.get("return_indices"):
        indices = torch.zeros(values.shape, dtype=torch.long, device=values.device)
        if name == "max":
            return torch.return_types.max((values, indices))
        return values, indices
    return values


def _inverse(perm):
    inv = [0] * len(perm)
    for i, p in enumerate(perm):
        inv[p] = i
    return inv


def find_split(module, probe, *, name, script_help, protocol_help):
    """Index of the one max-family call that reduces the segment axis, and the output at ``probe``.

    The forward runs on ``probe (B, S, ...)`` and on it with the first segment repeated at the
    end: the segment max is the call whose reduced axis has size S, then S + 1.
    """
    s = probe.shape[1]
    longer = torch.cat([probe, probe[:, :1]], dim=1)
    runs = []
    with torch.no_grad():
        for inp in (probe, longer):
            rec = Record()
            with rec:
                out = module(inp)
            runs.append((rec.calls, out))
    (calls_a, out_a), (calls_b, _) = runs
    found = [
        i for i, ((na, sa), (nb, sb)) in enumerate(zip(calls_a, calls_b))
        if na == nb and sa == s and sb == s + 1
    ]
    if len(calls_a) != len(calls_b):
        found = []
    if not found:
        if isinstance(module, torch.jit.ScriptModule):
            raise ModelError(f"{name}: a TorchScript model without the methods encode_segments "
                             f"and head. {script_help}")
        seen = ", ".join(sorted({n for n, _ in calls_a})) or "none"
        raise ModelError(
            f"{name}: no maximum over the segment axis (size {s}) was found in the forward pass "
            f"(max-family calls seen: {seen}). {protocol_help}")
    if len(found) > 1:
        raise ModelError(
            f"{name}: {len(found)} maxima over the segment axis were found (calls {found} of "
            f"the max family); culprit-lens needs exactly one. {protocol_help}")
    return found[0], out_a
