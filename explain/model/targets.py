"""Which number of a model's output an explanation explains.

A model returns a ``(B, K)`` tensor, or a dict, tuple or list of such tensors (multitask heads).
A target names one scalar per patient in it:

- an ``int`` column index;
- ``"predicted"``: the arg-max column, fixed at the patient being explained (so a perturbation
  that changes the winner does not change what is measured);
- ``"expected"``: the expected CAD-RADS category, sum over the grade columns of softmax
  probability times category rank (0 for "0" ... 6 for "5");
- ``"auto"`` (the default of :func:`explain.explain_case` and the command line): ``"expected"``
  when the model's grade labels name at least two CAD-RADS categories, else ``"predicted"``
  (so a model without grade labels, e.g. a scripted one, is explained at its top column).
  CAD-RADS is an ordered scale; a segment that pushes a patient from 2 towards 4A raises the
  expected category, but it can lower the logit of the predicted column 2, so for a model that
  under-grades, the predicted column names the wrong segment. The expected category also has a
  unit (CAD-RADS categories), which segment contributions then share;
- for dict outputs ``"key"`` (a one-column entry), ``"key:3"``, ``"key:predicted"``,
  ``"key:expected"`` or ``"key:auto"``; for tuple and list outputs the same with the entry's
  index, ``"0:3"``, ``"1:expected"``... A dict, tuple or list with one entry needs no key (a
  note says which entry was used, see :func:`target_note`); with several, naming none is an
  error whose example names a real entry of the model's output.
"""

from __future__ import annotations

from dataclasses import dataclass

import torch

from ..errors import InputError, ModelError
from ..grading import CATEGORIES

__all__ = ["Target", "output_entry", "resolve_target", "target_note"]


@dataclass(frozen=True)
class Target:
    """A resolved target: the output key, and a column or the expected category.

    Calling it on a model output gives a ``(B,)`` tensor.
    """

    key: str | int | None  # dict key, or entry index of a tuple/list output
    index: int | None
    ranks: tuple[tuple[int, int], ...] | None = None  # (column, rank) pairs for "expected"

    @property
    def label(self):
        """Readable name: ``3``, ``"expected"``, ``"grade:2"``, ``"grade:expected"``."""
        what = "expected" if self.index is None else self.index
        return what if self.key is None else f"{self.key}:{what}"

    def __call__(self, output):
        out = output_entry(output, self.key)
        if out.ndim == 1:
            out = out[:, None]
        if self.index is not None:
            return out[:, self.index]
        cols = [c for c, _ in self.ranks]
        ranks = torch.tensor([r for _, r in self.ranks], dtype=out.dtype, device=out.device)
        return (torch.softmax(out[:, cols], dim=1) * ranks).sum(dim=1)


def _keys(output):
    """The entries of a dict, tuple or list output, in the model's own order."""
    return list(output) if isinstance(output, dict) else list(range(len(output)))


def _example(output):
    first = _keys(output)[0]
    return f"'{first}:0' or '{first}:expected'"


def output_entry(output, key):
    """The tensor of entry ``key`` of a model output (the output itself when ``key`` is None)."""
    if isinstance(output, (dict, tuple, list)):
        if not len(output):
            raise ModelError("model output: an empty dict, tuple or list; nothing to explain")
        if key is None:
            raise ModelError(f"the model returns a {type(output).__name__} with entries "
                             f"{_keys(output)}: name one in the target, e.g. {_example(output)}")
        output = output[key]
    if not isinstance(output, torch.Tensor):
        raise ModelError(
            f"model output{'' if key is None else f' entry {key!r}'}: expected a (B, K) tensor "
            f"or a dict, tuple or list of them, got {type(output).__name__}")
    return output


def _cadrads_columns(grade_labels):
    """(column, rank) pairs of the grade labels that are CAD-RADS categories (may be empty)."""
    return tuple(
        (c, CATEGORIES.index(str(lab).upper()))
        for c, lab in enumerate(grade_labels)
        if str(lab).upper() in CATEGORIES
    )


def _grade_ranks(n_columns, grade_labels):
    if grade_labels is None:
        return tuple((c, c) for c in range(n_columns))
    if len(grade_labels) != n_columns:
        raise ModelError(
            f"grade_labels: {len(grade_labels)} labels for {n_columns} output columns; "
            "give one label per column"
        )
    pairs = _cadrads_columns(grade_labels)
    if not pairs:
        raise InputError(
            f"target 'expected': none of the grade labels {list(grade_labels)} is a CAD-RADS "
            f"category ({', '.join(CATEGORIES)})"
        )
    return pairs


def _one(output, key, what, grade_labels, label):
    out = output_entry(output, key)
    if out.ndim not in (1, 2):
        raise ModelError(f"model output {label}: expected shape (B, K), got {tuple(out.shape)}")
    k = 1 if out.ndim == 1 else out.shape[1]
    if what is None:
        if k != 1:
            raise InputError(
                f"target {label!r}: entry has {k} columns; add a column, 'predicted' or "
                f"'expected', e.g. '{key}:0'"
            )
        return Target(key, 0)
    if isinstance(what, bool):
        raise InputError(f"target: expected an int, 'predicted', 'expected' or 'auto', got {what!r}")
    if isinstance(what, int):
        if not -k <= what < k:
            raise InputError(f"target {label!r}: column {what} outside 0..{k - 1}")
        return Target(key, what % k)
    if what == "auto":
        graded = (grade_labels is not None and len(grade_labels) == k
                  and len(_cadrads_columns(grade_labels)) >= 2)
        what = "expected" if graded else "predicted"
    if what == "predicted":
        if out.shape[0] != 1:
            raise InputError("target 'predicted': resolve it for one patient at a time (B = 1)")
        col = 0 if out.ndim == 1 else int(torch.argmax(out[0]).item())
        return Target(key, col)
    if what == "expected":
        return Target(key, None, _grade_ranks(k, grade_labels))
    try:
        column = int(what)
    except (TypeError, ValueError):
        raise InputError(
            f"target {label!r}: expected a column index, 'predicted', 'expected' or 'auto'"
        ) from None
    return _one(output, key, column, grade_labels, label)


def resolve_target(output, target, *, grade_labels=None):
    """Turn a user's target into a :class:`Target`, fixed at this output.

    Parameters
    ----------
    output : (B, K) tensor or dict of str to tensor
        The model's output for the patient(s) being explained.
    target : int, str or Target
        See the module docstring.
    grade_labels : sequence of str, optional
        Label of each output column (CAD-RADS categories for ``"expected"``).

    Examples
    --------
    >>> out = torch.tensor([[0.1, 2.0, -1.0]])
    >>> resolve_target(out, "predicted").label
    1
    >>> round(float(resolve_target(out, "expected")(out)), 4)
    0.9168
    """
    if isinstance(target, Target):
        return target
    if isinstance(output, (dict, tuple, list)):
        key, what = _split_key(output, target)
        return _one(output, key, what, grade_labels, str(target))
    return _one(output, None, target, grade_labels, str(target))


def _split_key(output, target):
    """(entry key, what remains of the target) for a dict, tuple or list output."""
    keys = _keys(output)
    if not keys:
        raise ModelError("model output: an empty dict, tuple or list; nothing to explain")
    name = type(output).__name__
    if isinstance(target, str) and ":" in target:
        key, what = target.split(":", 1)
        if not isinstance(output, dict):
            try:
                key = int(key)
            except ValueError:
                raise InputError(f"target {target!r}: the model returns a {name} of "
                                 f"{len(keys)} entries; name one by its index, e.g. "
                                 f"{_example(output)}") from None
    elif isinstance(output, dict) and isinstance(target, str) and target in output:
        key, what = target, None
    elif len(keys) == 1:
        key, what = keys[0], target
    else:
        raise InputError(
            f"target {target!r}: the model returns a {name} with entries {keys}; name one, "
            f"e.g. --target {_example(output)}")
    if key not in keys:
        raise InputError(f"target {target!r}: no output entry {key!r}; have {keys}")
    return key, what


def target_note(output, target, resolved):
    """A note saying which entry was explained when the target named none, else None."""
    if not isinstance(output, (dict, tuple, list)) or resolved.key is None:
        return None
    named = isinstance(target, str) and (":" in target or target == resolved.key)
    if named or isinstance(target, Target):
        return None
    return (f"target: the model returns a {type(output).__name__} with the one entry "
            f"{resolved.key!r}; it was explained as target {target!r}")
