"""Wrapping a max-pooled patient model: split it into ``encode`` and ``head`` at the segment max.

A patient model computes features per segment, takes their maximum over segments and grades the
patient from the pooled vector. :func:`wrap_model` splits any such model into

- ``encode(x (B, S, N, H, W)) -> (B, S, C)``: the segment features just before the max, and
- ``head(pooled (B, C)) -> output``: everything after the max,

either from the protocol methods ``encode_segments`` and ``head`` on the module, or, for a plain
module, by watching one forward pass for the reduction that takes the maximum over segments.

How the plain split works
-------------------------
Under a :class:`torch.overrides.TorchFunctionMode`, every call of ``torch.max``, ``torch.amax``,
``Tensor.max``/``amax`` (with a ``dim``), ``max_pool1d`` and ``adaptive_max_pool1d`` (which the
modules ``nn.MaxPool1d`` and ``nn.AdaptiveMaxPool1d`` call) is recorded with the size of the axis
it reduces. The forward pass runs twice, with S segments and with S + 1 (the first segment
repeated at the end): the segment max is the one reduction whose reduced axis has size S in the
first pass and S + 1 in the second, so a channel axis that happens to have S entries is not
mistaken for it. The second pass also checks that a segment's features do not depend on the
other segments (a model that mixes segments before the max cannot be traced this way).

Then ``encode`` runs the forward in an "encode" mode that stops at that reduction by raising a
private exception carrying its input, still attached to the autograd graph, reordered to
``(B, S, C)``; ``head`` runs the forward on a small dummy input in a "head" mode that returns the
given pooled tensor in place of the reduction's output (the part before the max runs without
autograd and without the modules' forward hooks, and its result is thrown away). The reduction is recognised by its call order, so the
model's control flow must not depend on the data.

Ties
----
When several segments share the maximum of a channel, ``torch.max(dim=...)`` on CPU returns the
lowest segment index and routes the gradient there; the tracing step uses the same rule (lowest
index wins). ``torch.amax`` instead splits the gradient evenly between tied segments; the
protocol path and the wrapped ``forward`` use ``torch.max``.
"""

from __future__ import annotations

import hashlib
import math
from collections import OrderedDict

import torch
from torch.overrides import TorchFunctionMode

from ..errors import InputError, ModelError
from .spec import CrossSectionSpec

__all__ = ["WrappedModel", "wrap_model", "weights_hash"]

_PROTOCOL_HELP = (
    "Give the module two methods instead: encode_segments(x (B, S, N, H, W)) -> (B, S, C) "
    "features per segment, and head(pooled (B, C)) -> output; the model is then "
    "head(encode_segments(x).max(dim=1).values)."
)
_REDUCTIONS = {
    "max", "amax", "max_pool1d", "max_pool1d_with_indices",
    "adaptive_max_pool1d", "adaptive_max_pool1d_with_indices",
}
_POOLS = {"max_pool1d", "max_pool1d_with_indices", "adaptive_max_pool1d",
          "adaptive_max_pool1d_with_indices"}


def weights_hash(module):
    """Short sha256 (12 hex digits) of a module's state_dict: names, dtypes, shapes and bytes."""
    digest = hashlib.sha256()
    for name, value in sorted(module.state_dict().items()):
        digest.update(name.encode())
        if isinstance(value, torch.Tensor):
            t = value.detach().cpu().contiguous()
            digest.update(f"{t.dtype}{tuple(t.shape)}".encode())
            digest.update(t.reshape(-1).view(torch.uint8).numpy().tobytes() if t.numel() else b"")
    return digest.hexdigest()[:12]


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


class _Record(TorchFunctionMode):
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


class _Stop(Exception):
    def __init__(self, tensor, dim):
        super().__init__("segment max reached")
        self.tensor, self.dim = tensor, dim


class _Split(TorchFunctionMode):
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
                    raise _Stop(t, dim)
                torch.set_grad_enabled(self.grad)
                return _substitute(name, args, kwargs, t, dim, self.pooled)
        return func(*args, **kwargs)


def _layout(t, dim):
    batch = 0 if dim != 0 else 1
    perm = [batch, dim] + [a for a in range(t.ndim) if a not in (batch, dim)]
    return perm


def _features(t, dim):
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


class WrappedModel:
    """A patient model split at its max over segments.

    Attributes
    ----------
    module : torch.nn.Module
        The model, in eval mode.
    spec : CrossSectionSpec or None
        The sampling the model expects.
    grade_labels : tuple of str or None
        Label of each output column (e.g. the CAD-RADS categories).
    name : str
    kind : {"protocol", "plain"}
        Whether the split comes from the module's own methods or from watching its forward.
    """

    def __init__(self, module, *, kind, spec=None, grade_labels=None, name=None):
        self.module = module
        self.kind = kind
        self.spec = spec
        self.grade_labels = grade_labels
        self.name = name or type(module).__name__
        self._hash = None
        self._split = None  # plain models: (call index, dummy (N, H, W), head batches by broadcast)

    def __repr__(self):
        return (
            f"WrappedModel(name={self.name!r}, kind={self.kind!r}, spec={self.spec!r}, "
            f"grade_labels={self.grade_labels!r}, weights_hash={self.weights_hash!r})"
        )

    @property
    def weights_hash(self):
        """Short sha256 of the module's state_dict."""
        if self._hash is None:
            self._hash = weights_hash(self.module)
        return self._hash

    def check_input(self, x, *, name="x"):
        """Raise InputError unless ``x`` is a float (B, S, N, H, W) tensor matching the spec."""
        if not isinstance(x, torch.Tensor) or x.ndim != 5 or not x.is_floating_point():
            got = tuple(x.shape) if isinstance(x, torch.Tensor) else type(x).__name__
            raise InputError(f"{name}: expected a float tensor (B, S, N, H, W) in HU, got {got}")
        if x.shape[0] < 1 or x.shape[1] < 1:
            raise InputError(f"{name}: needs at least one patient and one segment, got {tuple(x.shape)}")
        if self.spec is not None and tuple(x.shape[2:]) != self.spec.shape:
            raise InputError(
                f"{name}: cross-sections of shape {tuple(x.shape[2:])}, the model {self.name!r} "
                f"expects {self.spec.shape} ({self.spec}); resample the case with that spec"
            )

    def encode(self, x):
        """Segment features ``(B, S, C)`` of ``x (B, S, N, H, W)``."""
        self.check_input(x)
        if self.kind == "protocol":
            feats = self.module.encode_segments(x)
        else:
            self._detect(x)
            try:
                with _Split(self._split[0]):
                    self.module(x)
            except _Stop as stop:
                feats = _features(stop.tensor, stop.dim)
            else:
                raise ModelError("the segment max was not reached in this forward pass")
        if not isinstance(feats, torch.Tensor) or feats.shape[:2] != x.shape[:2] or feats.ndim != 3:
            got = tuple(feats.shape) if isinstance(feats, torch.Tensor) else type(feats).__name__
            raise ModelError(
                f"{self.name}: encode_segments returned {got}, expected "
                f"{(x.shape[0], x.shape[1], 'C')}"
            )
        return feats

    def head(self, pooled):
        """Model output for pooled features ``(B, C)``."""
        if self.kind == "protocol":
            return self.module.head(pooled)
        if self._split is None:
            raise ModelError("head: call encode (or forward) once first, so the segment max is found")
        index, dummy_shape, broadcast = self._split
        rows = 1 if broadcast else pooled.shape[0]
        dummy = torch.zeros((rows, 1) + dummy_shape, dtype=pooled.dtype, device=pooled.device)
        grad = torch.is_grad_enabled()
        torch.set_grad_enabled(False)
        mode = _Split(index, pooled=pooled, grad=grad)
        # the replay's encoder pass is not the patient's: hooks (captum's layer hooks) must not
        # see it, so the modules' own forward hooks are set aside while it runs
        saved = [(m, m._forward_hooks, m._forward_pre_hooks) for m in self.module.modules()]
        try:
            for m, _, _ in saved:
                m._forward_hooks, m._forward_pre_hooks = OrderedDict(), OrderedDict()
            with mode:
                out = self.module(dummy)
        finally:
            torch.set_grad_enabled(grad)
            for m, hooks, pre in saved:
                m._forward_hooks, m._forward_pre_hooks = hooks, pre
        if mode.count <= index:
            raise ModelError(f"{self.name}: the segment max was not reached when replaying the head")
        return out

    def forward(self, x):
        """The whole model on ``x (B, S, N, H, W)``."""
        self.check_input(x)
        if self.kind == "protocol":
            return self.module.head(self.module.encode_segments(x).max(dim=1).values)
        return self.module(x)

    __call__ = forward

    def _detect(self, x):
        if self._split is not None:
            return
        s = x.shape[1]
        probe = x.detach()
        longer = torch.cat([probe, probe[:, :1]], dim=1)
        runs = []
        with torch.no_grad():
            for inp in (probe, longer):
                rec = _Record()
                with rec:
                    out_ = self.module(inp)
                runs.append((rec.calls, out_))
        (calls_a, out_a), (calls_b, _) = runs
        found = [
            i for i, ((na, sa), (nb, sb)) in enumerate(zip(calls_a, calls_b))
            if na == nb and sa == s and sb == s + 1
        ]
        if len(calls_a) != len(calls_b):
            found = []
        seen = ", ".join(sorted({n for n, _ in calls_a})) or "none"
        if not found:
            raise ModelError(
                f"{self.name}: no maximum over the segment axis (size {s}) was found in the "
                f"forward pass (max-family calls seen: {seen}; TorchScript internals are not "
                f"visible). {_PROTOCOL_HELP}"
            )
        if len(found) > 1:
            raise ModelError(
                f"{self.name}: {len(found)} maxima over the segment axis were found (calls "
                f"{found} of the max family); culprit-lens needs exactly one. {_PROTOCOL_HELP}"
            )
        index = found[0]
        self._split = (index, tuple(x.shape[2:]), True)
        with torch.no_grad():
            feats_a = self.encode(probe)
            feats_b = self.encode(longer)
            if not torch.allclose(feats_a, feats_b[:, :s], rtol=1e-4, atol=1e-5):
                self._split = None
                raise ModelError(
                    f"{self.name}: the features of a segment change when another segment is "
                    f"added, so the model mixes segments before its max. {_PROTOCOL_HELP}"
                )
            pooled = feats_a.max(dim=1).values
            twice = torch.cat([pooled, pooled], dim=0)
            ref = out_a
            try:
                got = self.head(twice)
                ok = _same(got, ref, rows=2)
            except Exception:  # noqa: BLE001 - any failure means the dummy cannot broadcast
                ok = False
            if not ok:
                self._split = (index, tuple(x.shape[2:]), False)
                if not _same(self.head(pooled), ref, rows=1):
                    self._split = None
                    raise ModelError(
                        f"{self.name}: replaying the part after the segment max does not "
                        f"reproduce the model's output. {_PROTOCOL_HELP}"
                    )


def _same(got, ref, *, rows):
    if isinstance(ref, dict):
        return isinstance(got, dict) and set(got) == set(ref) and all(
            _same(got[k], ref[k], rows=rows) for k in ref
        )
    if not isinstance(got, torch.Tensor) or got.shape[0] != rows * ref.shape[0]:
        return False
    return torch.allclose(got, ref.repeat((rows,) + (1,) * (ref.ndim - 1)), rtol=1e-4, atol=1e-5)


def wrap_model(module, *, spec=None, grade_labels=None, name=None):
    """Wrap a max-pooled patient model so it can be traced and explained.

    Parameters
    ----------
    module : torch.nn.Module
        Either with methods ``encode_segments(x) -> (B, S, C)`` and ``head(pooled) -> output``,
        or any module whose forward takes one maximum over the segment axis (found automatically
        on the first call; see the module docstring).
    spec : CrossSectionSpec or dict, optional
        Sampling the model expects; defaults to ``module.cross_section_spec`` if present.
    grade_labels : sequence of str, optional
        Label of each output column; defaults to ``module.grade_labels`` if present.
    name : str, optional
        Defaults to the module's class name.

    Returns
    -------
    WrappedModel

    Examples
    --------
    >>> import torch
    >>> class Tiny(torch.nn.Module):
    ...     def forward(self, x):                          # x (B, S, N, H, W)
    ...         feats = x.amin(dim=(2, 3, 4))[..., None]   # (B, S, 1): darkest value
    ...         return -feats.amax(dim=1)                  # max over segments, then a head
    >>> w = wrap_model(Tiny())
    >>> x = torch.zeros(1, 3, 2, 4, 4); x[0, 1, 0, 2, 2] = -5.0
    >>> w.encode(x).shape, w.kind
    (torch.Size([1, 3, 1]), 'plain')
    >>> w.head(torch.tensor([[2.0]]))
    tensor([[-2.]])
    """
    if not isinstance(module, torch.nn.Module):
        raise ModelError(f"wrap_model: expected a torch.nn.Module, got {type(module).__name__}")
    if spec is None:
        spec = getattr(module, "cross_section_spec", None)
        if isinstance(spec, dict):
            spec = CrossSectionSpec.coerce(spec, where="module.cross_section_spec")
        elif spec is not None and not isinstance(spec, CrossSectionSpec):
            spec = None
    else:
        spec = CrossSectionSpec.coerce(spec, where="spec")
    if grade_labels is None:
        grade_labels = getattr(module, "grade_labels", None)
    if grade_labels is not None:
        grade_labels = tuple(str(v) for v in grade_labels)
    has = [hasattr(module, m) and callable(getattr(module, m)) for m in ("encode_segments", "head")]
    if any(has) and not all(has):
        raise ModelError(
            f"{name or type(module).__name__}: has only one of encode_segments and head. "
            + _PROTOCOL_HELP
        )
    module.eval()
    return WrappedModel(
        module, kind="protocol" if all(has) else "plain", spec=spec,
        grade_labels=grade_labels, name=name,
    )
