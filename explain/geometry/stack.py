"""Cross-sections of every segment of a case, stacked in ascending SCCT segment number."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ._grid import Grid
from .centerline import Centerline
from .sampling import check_options, sample_on_grid

__all__ = ["CaseSections", "sample_case"]


@dataclass(frozen=True, eq=False)
class CaseSections:
    """Cross-sections of all segments of one case.

    Attributes
    ----------
    segment_ids : tuple of int
        SCCT segment numbers, ascending.
    sections : tuple of CrossSections
        One stack per segment, same order, all of the same shape (N, H, W).
    """

    segment_ids: tuple
    sections: tuple

    def __post_init__(self):
        if len(self.segment_ids) != len(self.sections):
            raise InputError(
                f"CaseSections: {len(self.segment_ids)} segment ids for "
                f"{len(self.sections)} cross-section stacks; they must pair up"
            )
        shapes = {cs.shape for cs in self.sections}
        if len(shapes) > 1:
            raise InputError(f"CaseSections: stacks differ in shape {sorted(shapes)}")

    @property
    def values(self):
        """``(S, N, H, W)`` float32, HU."""
        return np.stack([cs.values for cs in self.sections]).astype(np.float32, copy=False)

    def tensor(self):
        """The patient tensor ``(1, S, N, H, W)`` float32 HU as a torch tensor."""
        import torch  # geometry stays importable without torch

        return torch.from_numpy(np.ascontiguousarray(self.values)).unsqueeze(0)

    def __repr__(self):
        shape = self.sections[0].shape if self.sections else (0, 0, 0)
        pixel = f" at {self.sections[0].pixel_mm:g} mm" if self.sections else ""
        outside = sum(cs.n_outside for cs in self.sections)
        return (
            f"CaseSections({len(self.segment_ids)} segments {list(self.segment_ids)}, "
            f"each {shape[0]} x {shape[1]}x{shape[2]} px{pixel}, float32 HU, "
            f"{outside} px outside)"
        )


def sample_case(case, *, points, size, pixel_mm, rotation_deg=0.0, fill_value=-1000.0):
    """Sample every segment of ``case`` with the same options.

    Parameters
    ----------
    case : object with ``image`` (SimpleITK.Image) and ``segments``
        Each segment has ``id`` (int, SCCT number) and ``centerline`` (Centerline), e.g. an
        :class:`explain.case.Case`.
    points, size, pixel_mm, rotation_deg, fill_value
        As for :func:`~explain.geometry.sample_cross_sections`.

    Returns
    -------
    CaseSections
        Segments in ascending id.
    """
    points, size, pixel_mm, rotation_deg, fill_value = check_options(
        points, size, pixel_mm, rotation_deg, fill_value
    )
    try:
        image, segments = case.image, tuple(case.segments)
    except (AttributeError, TypeError):
        raise InputError(
            f"case: expected an object with .image and .segments (explain.case.Case), got "
            f"{type(case).__name__}"
        ) from None
    if not segments:
        raise InputError("case: it has no segments; give at least one segment with a centerline")
    ids = []
    for index, segment in enumerate(segments):
        segment_id = getattr(segment, "id", None)
        if isinstance(segment_id, bool) or not isinstance(segment_id, (int, np.integer)):
            raise InputError(f"case.segments[{index}].id: expected an integer, got {segment_id!r}")
        if not isinstance(getattr(segment, "centerline", None), Centerline):
            raise InputError(
                f"case.segments[{index}] (id {segment_id}): .centerline must be a Centerline"
            )
        ids.append(int(segment_id))
    if len(set(ids)) != len(ids):
        raise InputError(f"case.segments: segment ids repeat ({ids}); each id may appear once")
    order = np.argsort(ids, kind="stable")
    grid = Grid(image, name="case.image")
    sections = tuple(
        sample_on_grid(
            grid,
            segments[i].centerline,
            points=points,
            size=size,
            pixel_mm=pixel_mm,
            rotation_deg=rotation_deg,
            fill_value=fill_value,
        )
        for i in order
    )
    return CaseSections(segment_ids=tuple(ids[i] for i in order), sections=sections)
