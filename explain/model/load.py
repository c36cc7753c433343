"""Loading a model: the bundled reference network, a TorchScript file, or a Python factory."""

from __future__ import annotations

import importlib.util
import re
import sys
from pathlib import Path

import torch

from ..errors import InputError, ModelError
from .spec import CrossSectionSpec, read_spec_file
from .wrap import wrap_model

__all__ = ["load_model", "load_weights"]


def load_weights(module, weights):
    """Load a state_dict file into ``module`` with ``torch.load(..., weights_only=True)``."""
    path = Path(weights)
    if not path.is_file():
        raise InputError(f"weights: file {path} not found; give the path of a saved state_dict")
    try:
        state = torch.load(path, map_location="cpu", weights_only=True)
    except Exception as exc:  # noqa: BLE001 - any unpickling failure is the user's file
        raise ModelError(
            f"weights {path}: cannot be read as a plain state_dict ({_cause(exc)}); save it with "
            "torch.save(model.state_dict(), path)"
        ) from None
    if isinstance(state, dict) and "state_dict" in state and isinstance(state["state_dict"], dict):
        state = state["state_dict"]
    try:
        module.load_state_dict(state)
    except (RuntimeError, TypeError, AttributeError) as exc:
        raise ModelError(f"weights {path}: do not fit the model ({_cause(exc)})") from None
    return module


def _cause(exc, limit=300):
    """``"Class: message"`` on one line (its lines joined, cut at ``limit`` characters): the
    cause a one-line error can carry. For torch's refusals of unsafe pickles, the unpickler's own
    reason, without the advice on ``weights_only`` that does not apply here."""
    text = str(exc)
    found = re.search(r"WeightsUnpickler error:\s*(.+?)(?:\n\n|$)", text, re.S)
    if found:
        text = found.group(1).split(" Please use ")[0]
    text = re.sub(r"\x1b\[[0-9;]*m", "", text)
    text = " ".join(line.strip() for line in text.splitlines() if line.strip())
    if len(text) > limit:
        text = text[: limit - 3].rstrip() + "..."
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def _from_factory(text):
    file_part, _, factory = text.rpartition(":")
    path = Path(file_part)
    if not path.is_file():
        raise InputError(f"model {text!r}: file {path} not found (expected FILE.py:FACTORY)")
    mod_name = f"_culprit_lens_model_{abs(hash(str(path.resolve())))}"
    spec = importlib.util.spec_from_file_location(mod_name, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[mod_name] = module
    try:
        spec.loader.exec_module(module)
    except Exception as exc:  # noqa: BLE001 - the user's file failed to import
        raise ModelError(f"model {text!r}: importing {path} failed: {_cause(exc)}") from None
    fn = getattr(module, factory, None)
    if fn is None or not callable(fn):
        raise InputError(f"model {text!r}: {path} has no callable {factory!r}")
    try:
        net = fn()
    except Exception as exc:  # noqa: BLE001
        raise ModelError(f"model {text!r}: calling {factory}() failed: {_cause(exc)}") from None
    if not isinstance(net, torch.nn.Module):
        raise ModelError(f"model {text!r}: {factory}() returned {type(net).__name__}, not a torch.nn.Module")
    return net, path


def load_model(model, *, weights=None, spec=None, grade_labels=None, name=None):
    """Load and wrap a patient model.

    Parameters
    ----------
    model : str or Path
        ``"builtin:reference"`` (the bundled network with its weights), a TorchScript file
        (``.ts``, ``.pt``, ``.pth``), or ``"FILE.py:FACTORY"`` (the file is imported and
        ``FACTORY()`` must return a ``torch.nn.Module``).
    weights : str or Path, optional
        A state_dict file loaded with ``torch.load(..., weights_only=True)`` into the model.
    spec : CrossSectionSpec or dict, optional
        Sampling the model expects. Explicit options win over the sidecar file
        ``<model without suffix>.spec.json`` (fields ``points``, ``size``, ``pixel_mm``,
        ``grade_labels``), which wins over a ``cross_section_spec`` attribute of the module.
    grade_labels : sequence of str, optional
        Label of each output column; same precedence as ``spec``.
    name : str, optional

    Returns
    -------
    WrappedModel

    Examples
    --------
    >>> load_model("builtin:nothing")
    Traceback (most recent call last):
    ...
    explain.errors.InputError: model 'builtin:nothing': unknown builtin; have builtin:reference
    """
    text = str(model)
    sidecar = None
    if text.startswith("builtin:"):
        if text != "builtin:reference":
            raise InputError(f"model {text!r}: unknown builtin; have builtin:reference")
        from .reference import load_reference

        net = load_reference(weights=weights)
        name = name or "reference"
        weights = None
    elif text.endswith(".py") or ".py:" in text:
        if ".py:" not in text:
            raise InputError(f"model {text!r}: name the factory too, as FILE.py:FACTORY")
        net, path = _from_factory(text)
        sidecar = path.with_suffix(".spec.json")
        name = name or f"{path.stem}:{text.rpartition(':')[2]}"
    else:
        path = Path(text)
        if not path.is_file():
            raise InputError(
                f"model {text!r}: no such file; expected builtin:reference, a TorchScript file "
                "or FILE.py:FACTORY"
            )
        try:
            net = torch.jit.load(str(path), map_location="cpu")
        except Exception as exc:  # noqa: BLE001 - any failure means the file is not usable
            raise ModelError(
                f"model {path}: not a TorchScript file ({_cause(exc)}); save one with "
                "torch.jit.save(torch.jit.script(model), path), or use FILE.py:FACTORY with "
                "--weights for a state_dict"
            ) from None
        sidecar = path.with_suffix(".spec.json")
        name = name or path.stem
    if weights is not None:
        load_weights(net, weights)
    side_spec = side_labels = None
    if sidecar is not None and sidecar.is_file():
        side_spec, side_labels = read_spec_file(sidecar)
    spec = CrossSectionSpec.coerce(spec, where="spec") if spec is not None else side_spec
    labels = grade_labels if grade_labels is not None else side_labels
    return wrap_model(net, spec=spec, grade_labels=labels, name=name)
