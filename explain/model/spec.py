"""The cross-section sampling a model expects: how many points, how many pixels, how big a pixel."""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass
from pathlib import Path

from ..errors import InputError, ModelError

__all__ = ["CrossSectionSpec", "read_spec_file"]


@dataclass(frozen=True)
class CrossSectionSpec:
    """Sampling of the cross-sections a model was built for.

    Parameters
    ----------
    points : int
        Cross-sections per segment, N (the centerline is resampled to N points).
    size : int
        Pixels per side of a cross-section, H = W.
    pixel_mm : float
        Pixel spacing in the cross-section plane, mm.

    Examples
    --------
    >>> CrossSectionSpec(points=32, size=24, pixel_mm=0.5)
    CrossSectionSpec(points=32, size=24, pixel_mm=0.5 mm)
    """

    points: int
    size: int
    pixel_mm: float

    def __post_init__(self):
        for field in ("points", "size"):
            value = getattr(self, field)
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise InputError(
                    f"CrossSectionSpec.{field}: expected a positive integer, got {value!r}"
                )
        pixel = self.pixel_mm
        if isinstance(pixel, bool) or not isinstance(pixel, (int, float)) or not pixel > 0:
            raise InputError(
                f"CrossSectionSpec.pixel_mm: expected a positive number of mm, got {pixel!r}"
            )
        object.__setattr__(self, "pixel_mm", float(pixel))

    def __repr__(self):
        return (
            f"CrossSectionSpec(points={self.points}, size={self.size}, "
            f"pixel_mm={self.pixel_mm:g} mm)"
        )

    @property
    def shape(self):
        """(N, H, W) of one segment's stack."""
        return (self.points, self.size, self.size)

    def to_dict(self):
        """Plain dict, as written in a sidecar ``.spec.json`` file."""
        return asdict(self)

    @classmethod
    def coerce(cls, value, *, where="spec"):
        """A spec from a CrossSectionSpec, a mapping with the three fields, or None."""
        if value is None or isinstance(value, cls):
            return value
        if isinstance(value, dict):
            missing = {"points", "size", "pixel_mm"} - set(value)
            if missing:
                raise InputError(
                    f"{where}: missing field(s) {', '.join(sorted(missing))}; expected "
                    "points, size and pixel_mm"
                )
            return cls(points=value["points"], size=value["size"], pixel_mm=value["pixel_mm"])
        raise InputError(
            f"{where}: expected a CrossSectionSpec or a dict with points, size, pixel_mm, "
            f"got {type(value).__name__}"
        )


def read_spec_file(path):
    """Read a sidecar JSON file: ``{"points": .., "size": .., "pixel_mm": .., "grade_labels": [..]}``.

    Returns
    -------
    (CrossSectionSpec or None, tuple of str or None)
        The spec (None when the file gives none of its fields) and the grade labels, if any.
    """
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise ModelError(f"{path}: cannot read the model's spec file ({exc})") from None
    if not isinstance(data, dict):
        raise ModelError(f"{path}: expected a JSON object, got {type(data).__name__}")
    labels = data.get("grade_labels")
    if labels is not None:
        if not isinstance(labels, list) or not all(isinstance(v, str) for v in labels):
            raise ModelError(f"{path}: grade_labels must be a list of strings, got {labels!r}")
        labels = tuple(labels)
    fields = {k: data[k] for k in ("points", "size", "pixel_mm") if k in data}
    spec = CrossSectionSpec.coerce(fields, where=str(path)) if fields else None
    return spec, labels
