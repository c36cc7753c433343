"""Model-parameter randomisation: does a saliency map depend on what the model learned?

Cascading randomisation (Adebayo, Gilmer, Muelly, Goodfellow, Hardt, Kim 2018, "Sanity checks
for saliency maps"): on a copy of the model, reinitialise the parameterised layers one after
another from the output end down, recompute every method's map after each step, and compare it
with the map of the trained model. A map that still looks the same once the weights are random
shows the input, or the method, rather than the model.

Choices of ours, recorded in every result:

- Layers are the modules that own parameters. Their order is the order in which they finish in
  one forward pass (forward hooks); the cascade runs it backwards, so the output layer goes
  first. Layers no hook saw (a TorchScript model, parameters used outside ``forward``) come
  last, so that the last step always leaves no trained parameter.
- A layer is reinitialised with its own ``reset_parameters()`` (the PyTorch default
  initialisation) where it has one; otherwise each of its parameters is redrawn from a normal
  distribution with that parameter's own mean and standard deviation (1 where it has none).
  Before layer ``d`` (1, 2, ...) torch is seeded with ``seed + d``, so a run is repeatable.
- The target is fixed once, on the trained model, and kept through every step.
- Similarities are those of :mod:`explain.quality.similarity` on ``|map|``.

Pass rule (:data:`PASS_RULE`): after full randomisation the Spearman correlation of ``|map|``
with the original is below :data:`PASS_BELOW` (0.5); otherwise the method fails. When it is
undefined (a constant map), the method neither passes nor fails and the reason is given.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, field

import numpy as np
import torch

from ..attribution._common import fixed_target
from ..errors import InputError, ModelError
from ..model.wrap import WrappedModel, weights_hash, wrap_model
from .maps import saliency_maps
from .similarity import spearman, stack_ssim

__all__ = ["PASS_BELOW", "PASS_RULE", "RandomisedLayer", "SanityResult", "parameterised_layers",
           "check_has_parameters", "cascading_randomisation"]

PASS_BELOW = 0.5
PASS_RULE = (f"after every parameterised layer is randomised, the Spearman rank correlation of "
             f"|map| with the trained model's |map| is below {PASS_BELOW}: the method passes; "
             f"at or above it, the method fails (it does not depend on the learned weights); "
             f"undefined (a constant map): no verdict")


@dataclass(frozen=True)
class RandomisedLayer:
    """One step of the cascade: the layer reinitialised there and how."""

    name: str
    kind: str
    reinit: str
    n_parameters: int
    seen_in_forward: bool


@dataclass(frozen=True, eq=False)
class SanityResult:
    """Similarity of each method's map with the original, per randomisation depth.

    Attributes
    ----------
    methods : tuple of str
    layers : tuple of RandomisedLayer
        In cascade order, the output end first; depth ``d`` has the first ``d`` randomised.
    spearman : dict of str to (L + 1,) float64
        Spearman of ``|map|`` with the original over every pixel of every segment, per depth
        (depth 0: the trained model, 1.0).
    spearman_reasons : dict of str to tuple of (str or None)
        Why a value is NaN.
    ssim : dict of str to (L + 1, S) float64
        SSIM of each segment's ``|map|`` stack, per depth.
    weights_hashes : tuple of str
        Of the model at each depth (:func:`explain.model.wrap.weights_hash`).
    seed : int
    """

    methods: tuple
    layers: tuple
    spearman: dict = field(repr=False)
    spearman_reasons: dict = field(repr=False)
    ssim: dict = field(repr=False)
    weights_hashes: tuple = field(repr=False)
    seed: int = 0

    @property
    def final_spearman(self):
        """Spearman after full randomisation, per method."""
        return {m: float(self.spearman[m][-1]) for m in self.methods}

    @property
    def passed(self):
        """Per method: True, False, or None when the final Spearman is undefined."""
        return {m: None if np.isnan(v) else bool(v < PASS_BELOW)
                for m, v in self.final_spearman.items()}

    def __repr__(self):
        verdicts = ", ".join(f"{m} {'-' if p is None else ('pass' if p else 'fail')} "
                             f"({self.final_spearman[m]:.3f})" for m, p in self.passed.items())
        return f"SanityResult({len(self.layers)} layers, seed {self.seed}: {verdicts})"

    def to_dict(self):
        """Plain Python for sanity.json (NaN as None)."""
        def num(v):
            return None if not np.isfinite(v) else float(v)

        return {
            "seed": self.seed,
            "order": "output end first: reverse of the order layers finish in one forward pass",
            "seeding": "torch.manual_seed(seed + depth) before the layer of that depth",
            "layers": [{"depth": d, **vars(layer)} for d, layer in enumerate(self.layers, 1)],
            "weights_hashes": list(self.weights_hashes),
            "pass_rule": PASS_RULE, "pass_below": PASS_BELOW,
            "methods": {m: {
                "spearman": [num(v) for v in self.spearman[m]],
                "spearman_reasons": list(self.spearman_reasons[m]),
                "ssim_mean": [num(np.nanmean(row)) if np.isfinite(row).any() else None
                              for row in self.ssim[m]],
                "ssim_per_segment": [[num(v) for v in row] for row in self.ssim[m]],
                "final_spearman": num(self.final_spearman[m]),
                "passed": self.passed[m],
            } for m in self.methods},
        }


def _finish_order(module, run):
    """Names of submodules in the order their forward finished during ``run()`` (first call)."""
    order, handles = [], []

    def hook(name):
        def record(_module, _inputs, _output):
            if name not in order:
                order.append(name)
        return record

    try:
        for name, sub in module.named_modules():
            handles.append(sub.register_forward_hook(hook(name)))
    except (RuntimeError, AttributeError, NotImplementedError):
        order = []  # TorchScript modules take no hooks; registration order is used
    try:
        with torch.no_grad():
            run()
    finally:
        for h in handles:
            h.remove()
    return order


def parameterised_layers(module, run=None):
    """The modules owning parameters, in cascade order (output end first).

    Parameters
    ----------
    module : torch.nn.Module
    run : callable(), optional
        One forward pass of ``module``; without it, the reverse of registration order is used.

    Returns
    -------
    list of (name, module, seen_in_forward)
    """
    owners = [(name, sub) for name, sub in module.named_modules()
              if any(True for _ in sub.parameters(recurse=False))]
    finished = _finish_order(module, run) if run is not None else []
    rank = {name: i for i, name in enumerate(finished)}
    seen = sorted((o for o in owners if o[0] in rank), key=lambda o: rank[o[0]], reverse=True)
    unseen = [o for o in reversed(owners) if o[0] not in rank]
    return [(n, m, True) for n, m in seen] + [(n, m, False) for n, m in unseen]


def _reinitialise(layer, seed):
    """Reinitialise ``layer``'s own parameters under ``torch.manual_seed(seed)``; say how."""
    with torch.random.fork_rng(devices=[]):
        torch.manual_seed(seed)
        reset = getattr(layer, "reset_parameters", None)
        if callable(reset):
            reset()
            return "reset_parameters"
        with torch.no_grad():
            for p in layer.parameters(recurse=False):
                mean = float(p.mean()) if p.numel() else 0.0
                sd = float(p.std()) if p.numel() > 1 else 0.0
                p.normal_(mean, sd if np.isfinite(sd) and sd > 0 else 1.0)
        return "normal with the parameter's own mean and standard deviation"


def _compare(original, maps):
    """Per method: (Spearman, reason, SSIM per segment) of |maps| against |original|."""
    out = {}
    for method, ref in original.items():
        a, b = np.abs(ref), np.abs(maps[method])
        rho, why = spearman(a, b)
        out[method] = (rho, why, np.array([stack_ssim(a[s], b[s]) for s in range(a.shape[0])]))
    return out


def _copy_of(model):
    try:
        module = copy.deepcopy(model.module)
    except Exception as exc:  # noqa: BLE001 - any failure means this model cannot be copied
        raise ModelError(f"model {model.name!r}: cannot be copied for randomisation "
                         f"({exc.__class__.__name__}: {exc})") from None
    return wrap_model(module, spec=model.spec, grade_labels=model.grade_labels, name=model.name)


def check_has_parameters(model):
    """Raise :class:`ModelError` unless the wrapped model has parameters to randomise."""
    module = getattr(model, "module", None)
    if not isinstance(module, torch.nn.Module) or not any(True for _ in module.parameters()):
        raise ModelError(
            f"model {getattr(model, 'name', '?')!r} has no parameters, so there is nothing to "
            "randomise: the sanity check compares maps before and after the model's weights are "
            "reinitialised; give a model with trained parameters")


def _layers_of(model, randomised, x):
    check_has_parameters(model)
    return parameterised_layers(randomised.module, run=lambda: randomised.forward(x))


def cascading_randomisation(model, x, *, methods, target, method_options=None, baseline_hu=0.0,
                            seed=0, original_maps=None, progress=None):
    """Randomise the model layer by layer from the output end; compare the maps at every step.

    Parameters
    ----------
    model : WrappedModel
        Left unchanged; a deep copy is randomised.
    x : (1, S, N, H, W) float32 tensor, HU
    methods : sequence of str
    target : Target or int or str
        Resolved once on the trained model (:func:`explain.model.targets.resolve_target`), so
        every step answers the same question.
    method_options : dict of str to dict, optional
    baseline_hu : float
    seed : int
    original_maps : dict of str to (S, N, H, W), optional
        The trained model's maps, if already computed with the same options.
    progress : callable(str), optional

    Returns
    -------
    SanityResult

    Raises
    ------
    ModelError
        The model has no parameters, or cannot be copied.
    """
    if not isinstance(model, WrappedModel):
        raise InputError(f"model: expected a WrappedModel (explain.load_model or "
                         f"explain.wrap_model), got {type(model).__name__}")
    methods = tuple(methods)
    check_has_parameters(model)
    target = fixed_target(model, x, target)
    randomised = _copy_of(model)
    layers = _layers_of(model, randomised, x)
    common = dict(methods=methods, target=target, method_options=method_options,
                  baseline_hu=baseline_hu, seed=seed)
    original = original_maps or saliency_maps(model, x, **common)
    steps = [_compare(original, original)]
    done, hashes = [], [weights_hash(randomised.module)]
    for depth, (name, layer, seen) in enumerate(layers, 1):
        if progress is not None:
            progress(f"randomisation {depth}/{len(layers)}: {name or '(the model itself)'}")
        how = _reinitialise(layer, seed + depth)
        done.append(RandomisedLayer(
            name=name or "(the model itself)", kind=type(layer).__name__, reinit=how,
            n_parameters=int(sum(p.numel() for p in layer.parameters(recurse=False))),
            seen_in_forward=seen))
        hashes.append(weights_hash(randomised.module))
        steps.append(_compare(original, saliency_maps(randomised, x, **common)))
    return SanityResult(
        methods=methods, layers=tuple(done),
        spearman={m: np.array([s[m][0] for s in steps]) for m in methods},
        spearman_reasons={m: tuple(s[m][1] for s in steps) for m in methods},
        ssim={m: np.stack([s[m][2] for s in steps]) for m in methods},
        weights_hashes=tuple(hashes), seed=int(seed))
