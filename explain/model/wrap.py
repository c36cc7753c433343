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
autograd and without the modules' forward hooks, and its result is thrown away). The reduction
is recognised by its call order, so the model's control flow must not depend on the data. The
machinery lives in :mod:`explain.model._split`.

Only the modules' own Python code is seen: a max inside TorchScript is not, so a scripted or
traced model must carry the protocol methods (exported with ``@torch.jit.export``); the error
says so with an example.

Checks, on both paths
---------------------
On the first call, the model is checked as :mod:`explain.model.checks` describes: repeatable
passes, and segments encoded independently (one extra encoder pass on S + 1 segments for a
protocol model; the second detection pass for a plain one).

What is assumed, and said in :attr:`WrappedModel.notes`
-------------------------------------------------------
- ``eval()`` is called (BatchNorm uses its running statistics, Dropout is off); a note says so
  when the model came in train mode.
- Cross-sections are float32 HU; a model whose parameters are of another float dtype (e.g.
  float64) gets its input cast to that dtype, with a note.
- Only two callables named ``encode_segments`` and ``head`` together make the protocol; a lone
  one (e.g. a patient MLP kept as a submodule ``head``) is not used, the model is wrapped
  automatically, and a note says so.
- When the part after the max cannot be replayed for several patients from one dummy stack
  (it uses the batch size, say), it is replayed with one dummy stack per patient, with a note.

Ties
----
When several segments share the maximum of a channel, ``torch.max(dim=...)`` on CPU returns the
lowest segment index and routes the gradient there; the tracing step uses the same rule (lowest
index wins). ``torch.amax`` instead splits the gradient evenly between tied segments; the
protocol path and the wrapped ``forward`` use ``torch.max``.
"""

from __future__ import annotations

import hashlib
from collections import OrderedDict

import torch

from ..errors import InputError, ModelError
from ._split import Split, Stop, features, find_split
from .checks import PROTOCOL_HELP, close, extra_segment, refuse_unrepeatable, same_output
from .spec import CrossSectionSpec

__all__ = ["WrappedModel", "wrap_model", "weights_hash"]

_SCRIPT_HELP = (
    "The max inside a TorchScript model cannot be seen from Python: give the module the two "
    "methods and export them with @torch.jit.export before scripting, as in "
    "(1) `@torch.jit.export def encode_segments(self, x): return self.features(x)  # (B, S, C)` "
    "(2) `@torch.jit.export def head(self, pooled): return self.classifier(pooled)` "
    "(3) `def forward(self, x): return self.head(self.encode_segments(x).max(dim=1).values)`; "
    "to trace, trace all three with torch.jit.trace_module; see docs/your-model.md"
)


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


def _first_line(exc):
    text = str(exc).strip().splitlines()
    return f"{type(exc).__name__}: {text[0] if text else ''}".rstrip(": ")




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
    dtype : torch.dtype or None
        The float dtype of the model's parameters; inputs are cast to it.
    notes : tuple of str
        What wrapping assumed or did (eval mode, an input cast, a lone ``head`` not used...).
    """

    def __init__(self, module, *, kind, spec=None, grade_labels=None, name=None, notes=(),
                 dtype=None):
        self.module = module
        self.kind = kind
        self.spec = spec
        self.grade_labels = grade_labels
        self.name = name or type(module).__name__
        self.dtype = dtype
        self._notes = list(notes)
        self._hash = None
        self._checked = False  # the checks of explain.model.checks have passed
        self._split = None  # plain models: (call index, dummy (N, H, W), head batches by broadcast)

    def __repr__(self):
        return (
            f"WrappedModel(name={self.name!r}, kind={self.kind!r}, spec={self.spec!r}, "
            f"grade_labels={self.grade_labels!r}, weights_hash={self.weights_hash!r})"
        )

    @property
    def notes(self):
        """What wrapping assumed or did, in words, for the report's notes."""
        return tuple(self._notes)

    def _note(self, text):
        if text not in self._notes:
            self._notes.append(text)

    @property
    def weights_hash(self):
        """Short sha256 of the module's state_dict."""
        if self._hash is None:
            self._hash = weights_hash(self.module)
        return self._hash

    def with_spec(self, spec):
        """The same model (same module, notes) expecting another cross-section spec."""
        other = WrappedModel(self.module, kind=self.kind, spec=spec,
                             grade_labels=self.grade_labels, name=self.name, notes=self._notes,
                             dtype=self.dtype)
        other._hash, other._checked = self._hash, self._checked
        return other

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
                f"expects {self.spec.shape} ({self.spec}); sample the case with that spec"
            )

    def prepare(self, x):
        """Find the split (plain models) and run the checks on ``x (B, S, N, H, W)``, once."""
        if self._checked:
            return
        with torch.no_grad():
            self.encode(x.detach())

    def _cast(self, x):
        return x if self.dtype is None or x.dtype == self.dtype else x.to(self.dtype)

    def encode(self, x):
        """Segment features ``(B, S, C)`` of ``x (B, S, N, H, W)``."""
        self.check_input(x)
        x = self._cast(x)
        if self.kind == "protocol":
            feats = self.module.encode_segments(x)
            self._check_shape(feats, x)
            if not self._checked:
                self._check_protocol(x, feats)
            return feats
        self._detect(x)
        return self._plain_encode(x)

    def _plain_encode(self, x):
        try:
            with Split(self._split[0]):
                self.module(x)
        except Stop as stop:
            return features(stop.tensor, stop.dim)
        raise ModelError(f"{self.name}: the segment max was not reached in this forward pass")

    def _check_shape(self, feats, x):
        if not isinstance(feats, torch.Tensor) or feats.ndim != 3 or feats.shape[:2] != x.shape[:2]:
            got = tuple(feats.shape) if isinstance(feats, torch.Tensor) else type(feats).__name__
            raise ModelError(
                f"{self.name}: encode_segments returned {got}, expected "
                f"{(x.shape[0], x.shape[1], 'C')}"
            )

    def head(self, pooled):
        """Model output for pooled features ``(B, C)``."""
        if self.kind == "protocol":
            return self.module.head(pooled)
        if self._split is None:
            raise ModelError("head: call encode (or forward) once first, so the segment max is found")
        return _replay_head(self.module, self._split, pooled, name=self.name)

    def forward(self, x):
        """The whole model on ``x (B, S, N, H, W)``."""
        self.check_input(x)
        if self.kind == "protocol":
            return self.module.head(self.encode(x).max(dim=1).values)
        x = self._cast(x)
        self._detect(x)
        return self.module(x)

    __call__ = forward

    def _check_protocol(self, x, feats):
        """Repeatable passes and independent segments, at the cost of one encoder pass on S + 1."""
        enc = self.module.encode_segments
        with torch.no_grad():
            feats = feats.detach()
            more = extra_segment(x.detach())
            longer = enc(more)
            self._check_shape(longer, more)
            if not close(longer[:, : x.shape[1]], feats):
                if _differs(lambda: enc(x.detach()), feats, close):
                    refuse_unrepeatable(self.name, "encode_segments")
                raise ModelError(
                    f"{self.name}: the features of a segment change when another segment is "
                    "added, so encode_segments mixes segments before the max; culprit-lens needs "
                    "each segment encoded on its own")
            pooled = feats.max(dim=1).values
            if not same_output(self.module.head(pooled), self.module.head(pooled)):
                refuse_unrepeatable(self.name, "head")
        self._checked = True

    def _detect(self, x):
        if self._split is not None:
            return
        probe = x.detach()
        index, out_a = find_split(self.module, probe, name=self.name, script_help=_SCRIPT_HELP,
                                  protocol_help=PROTOCOL_HELP)
        self._split = (index, tuple(x.shape[2:]), True)
        try:
            self._verify_split(probe, out_a)
        except BaseException:
            self._split = None
            raise
        self._checked = True

    def _verify_split(self, probe, out_a):
        """Independent segments, and a head replay that reproduces the model's output."""
        s = probe.shape[1]
        with torch.no_grad():
            feats_a = self._plain_encode(probe)
            feats_b = self._plain_encode(torch.cat([probe, probe[:, :1]], dim=1))
            if not close(feats_a, feats_b[:, :s]):
                if _differs(lambda: self._plain_encode(probe), feats_a, close):
                    refuse_unrepeatable(self.name, "encoder")
                raise ModelError(
                    f"{self.name}: the features of a segment change when another segment is "
                    f"added, so the model mixes segments before its max. {PROTOCOL_HELP}")
            pooled = feats_a.max(dim=1).values
            try:
                ok = same_output(self.head(torch.cat([pooled, pooled])), out_a, rows=2)
                why = "its output differs"
            except (RuntimeError, ValueError, TypeError, IndexError, ModelError) as exc:
                ok, why = False, _first_line(exc)
            if ok:
                return
            self._split = self._split[:2] + (False,)
            if same_output(self.head(pooled), out_a, rows=1):
                self._note(f"head replay: one dummy stack could not stand for 2 patients ({why});"
                           " the part before the max is replayed with one dummy stack per "
                           "patient (slower, same values)")
                return
            if _differs(lambda: self.module(probe), out_a, same_output):
                refuse_unrepeatable(self.name, "forward")
            raise ModelError(
                f"{self.name}: replaying the part after the segment max does not reproduce the "
                f"model's output. {PROTOCOL_HELP}")


#: Reruns before a failed check is put down to the model mixing segments or its head, rather
#: than to it not being repeatable: a random model can repeat itself by chance (dropout over few
#: features), so one rerun is not enough (common practice, no source).
RERUNS = 3


def _differs(run, ref, agree):
    """Whether any of :data:`RERUNS` reruns of ``run()`` disagrees with ``ref``."""
    return any(not agree(run(), ref) for _ in range(RERUNS))


def _replay_head(module, split, pooled, *, name):
    """Run ``module`` on a dummy input with ``pooled`` in place of its segment max."""
    index, dummy_shape, broadcast = split
    rows = 1 if broadcast else pooled.shape[0]
    dummy = torch.zeros((rows, 1) + dummy_shape, dtype=pooled.dtype, device=pooled.device)
    grad = torch.is_grad_enabled()
    torch.set_grad_enabled(False)
    mode = Split(index, pooled=pooled, grad=grad)
    # the replay's encoder pass is not the patient's: hooks (captum's layer hooks) must not
    # see it, so the modules' own forward hooks are set aside while it runs
    saved = [(m, m._forward_hooks, m._forward_pre_hooks) for m in module.modules()]
    try:
        for m, _, _ in saved:
            m._forward_hooks, m._forward_pre_hooks = OrderedDict(), OrderedDict()
        with mode:
            out = module(dummy)
    finally:
        torch.set_grad_enabled(grad)
        for m, hooks, pre in saved:
            m._forward_hooks, m._forward_pre_hooks = hooks, pre
    if mode.count <= index:
        raise ModelError(f"{name}: the segment max was not reached when replaying the head")
    return out


def _is_method(module, attr):
    """A callable attribute (a method, a TorchScript method or a submodule), or None."""
    value = getattr(module, attr, None)
    return value is not None and callable(value)


def _kind(module, name, notes):
    """``"protocol"`` when both encode_segments and head are callables, else ``"plain"``."""
    has = {m: _is_method(module, m) for m in ("encode_segments", "head")}
    if all(has.values()):
        return "protocol"
    for attr, present in has.items():
        if present:
            what = ("a submodule" if isinstance(getattr(module, attr), torch.nn.Module)
                    else "a method")
            other = "head" if attr == "encode_segments" else "encode_segments"
            notes.append(f"{name}: {attr} is {what} but there is no {other}, so it is not the "
                         "protocol; the segment max was looked for in forward (automatic "
                         "wrapping)")
    return "plain"


def _module_spec(module, name):
    spec = getattr(module, "cross_section_spec", None)
    if spec is None or isinstance(spec, CrossSectionSpec):
        return spec
    if isinstance(spec, dict):
        return CrossSectionSpec.coerce(spec, where=f"{name}.cross_section_spec")
    raise ModelError(
        f"{name}.cross_section_spec: expected a CrossSectionSpec or a dict with points, size and "
        f"pixel_mm, got {type(spec).__name__} {spec!r}; fix the attribute, or give the sampling "
        "explicitly (the sidecar <model>.spec.json, or --points, --size and --pixel-mm)")


def _module_labels(module, name):
    labels = getattr(module, "grade_labels", None)
    if labels is not None and (isinstance(labels, (str, bytes)) or not hasattr(labels, "__iter__")):
        raise ModelError(f"{name}.grade_labels: expected a sequence of labels, one per output "
                         f"column, got {type(labels).__name__} {labels!r}")
    return labels


def _dtype(module, name, notes):
    """The float dtype of the parameters and buffers (None when there are none)."""
    found = {t.dtype for t in list(module.parameters()) + list(module.buffers())
             if t.is_floating_point()}
    if len(found) > 1:
        raise ModelError(
            f"{name}: parameters in several float dtypes ({', '.join(sorted(map(str, found)))}); "
            "cross-sections cannot be cast to all of them faithfully; convert the model to one "
            "dtype first, e.g. model.float()")
    dtype = found.pop() if found else None
    if dtype is not None and dtype != torch.float32:
        notes.append(f"{name}: the model's parameters are {str(dtype).replace('torch.', '')}; the "
                     f"cross-sections (float32 HU) are cast to it before the model, and maps "
                     "are stored as float32")
    return dtype


def wrap_model(module, *, spec=None, grade_labels=None, name=None):
    """Wrap a max-pooled patient model so it can be traced and explained.

    Parameters
    ----------
    module : torch.nn.Module
        Either with callables ``encode_segments(x) -> (B, S, C)`` and ``head(pooled) -> output``,
        or any module whose forward takes one maximum over the segment axis (found automatically
        on the first call; see the module docstring).
    spec : CrossSectionSpec or dict, optional
        Sampling the model expects; defaults to ``module.cross_section_spec`` if present (a
        malformed one is an error).
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
    label = name or type(module).__name__
    if spec is None:
        spec = _module_spec(module, label)
    else:
        spec = CrossSectionSpec.coerce(spec, where="spec")
    if grade_labels is None:
        grade_labels = _module_labels(module, label)
    if grade_labels is not None:
        grade_labels = tuple(str(v) for v in grade_labels)
    notes = []
    kind = _kind(module, label, notes)
    if any(m.training for m in module.modules()):
        notes.append(f"{label}: the model came in train mode; culprit-lens called eval(), so "
                     "BatchNorm uses its running statistics and Dropout is off, as at inference")
    module.eval()
    dtype = _dtype(module, label, notes)
    return WrappedModel(module, kind=kind, spec=spec, grade_labels=grade_labels, name=name,
                        notes=notes, dtype=dtype)
