"""A small synthetic case and a hand-made explanation of it, for the report's writers.

The case: three straight tubes (segments 1, 6, 7) of 350 HU lumen in -80 HU fat, in an image with
a non-identity direction and a non-zero origin. The "maps" are hand-placed Gaussian blobs, so
where the peak must be is known without any model.
"""

import math
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import SimpleITK as sitk
import torch

from explain.anatomy import segment_info
from explain.case import Case, Lesion, Reference, Segment
from explain.geometry import Centerline, sample_case
from explain.report.explanation import Explanation, _segment_results

LESION = (7, 6.0, 10.0)   # segment, start_mm, end_mm
BLOB_ARC_MM = 8.0          # where the hand-made maps peak along segment 7


def _image():
    size = (64, 60, 56)
    image = sitk.Image(size, sitk.sitkFloat32)
    image.SetSpacing((0.5, 0.5, 0.55))
    image.SetOrigin((-20.0, 12.0, 101.0))
    a = math.radians(20)
    direction = np.array([[math.cos(a), -math.sin(a), 0], [math.sin(a), math.cos(a), 0],
                          [0, 0, 1]])
    image.SetDirection(tuple(direction.ravel()))
    return image


def _tube_points(image, start_index, end_index):
    a = np.array(image.TransformContinuousIndexToPhysicalPoint(start_index))
    b = np.array(image.TransformContinuousIndexToPhysicalPoint(end_index))
    return a + np.linspace(0, 1, 12)[:, None] * (b - a)


def make_case(case_id="synthetic-1", *, path=Path("/nowhere/case.json"), lesion_hu=None):
    """The case; with ``lesion_hu`` the lumen of segment 7 over the LESION arc holds that HU."""
    image = _image()
    tubes = {1: ((10, 10, 8), (12, 48, 20)), 6: ((30, 8, 10), (34, 30, 40)),
             7: ((34, 30, 40), (50, 52, 50))}
    # Paint the lumens (radius 1.4 mm) into the volume.
    values = np.full(tuple(reversed(image.GetSize())), -80.0, dtype=np.float32)
    idx = np.stack(np.meshgrid(*[np.arange(n) for n in image.GetSize()], indexing="ij"), -1)
    direction = np.asarray(image.GetDirection()).reshape(3, 3)
    xyz = (idx * np.asarray(image.GetSpacing())) @ direction.T + np.asarray(image.GetOrigin())
    segments = []
    for sid, (i0, i1) in tubes.items():
        pts = _tube_points(image, i0, i1)
        a, b = pts[0], pts[-1]
        t = np.clip(((xyz - a) @ (b - a)) / ((b - a) @ (b - a)), 0, 1)
        d = np.linalg.norm(xyz - (a + t[..., None] * (b - a)), axis=-1)
        values[np.transpose(d <= 1.4, (2, 1, 0))] = 350.0
        if lesion_hu is not None and sid == LESION[0]:
            arc = t * np.linalg.norm(b - a)
            narrow = (d <= 1.4) & (arc >= LESION[1]) & (arc <= LESION[2])
            values[np.transpose(narrow, (2, 1, 0))] = lesion_hu
        info = segment_info(sid)
        segments.append(Segment(id=sid, abbr=info.abbr, name=info.name, territory=info.territory,
                                centerline=Centerline(pts), radius_mm=np.full(len(pts), 1.4),
                                source=Path(f"/nowhere/seg{sid}.csv")))
    ct = sitk.GetImageFromArray(values)
    ct.CopyInformation(image)
    reference = Reference(grade="3", stenosis_percent={7: 60.0, 1: 20.0},
                          lesions=(Lesion(*LESION),), lesion_mask=None)
    return Case(case_id=case_id, path=path, image=ct, segments=tuple(segments),
                reference=reference, notes=())


def make_explanation(case=None, *, methods=("integrated_gradients", "occlusion")):
    case = case or make_case()
    sections = sample_case(case, points=20, size=11, pixel_mm=0.5)
    s_count = len(sections.segment_ids)
    maps = {}
    for n, method in enumerate(methods):
        m = np.zeros((s_count, 20, 11, 11), dtype=np.float32)
        for s, cs in enumerate(sections.sections):
            rows, cols = np.meshgrid(np.arange(11), np.arange(11), indexing="ij")
            spot = np.exp(-((rows - 5) ** 2 + (cols - 6) ** 2) / 4.0)
            along = np.exp(-0.5 * ((cs.arc_mm - BLOB_ARC_MM) / 2.0) ** 2)
            scale = 1.0 if sections.segment_ids[s] == 7 else 0.2
            m[s] = scale * along[:, None, None] * spot[None]
            if n == 1:
                m[s] -= 0.05      # a signed map: some negative attribution everywhere
        maps[method] = m
    trace = SimpleNamespace(
        winners=np.array([2, 2, 0, 1, 2, 2]), gradient_x_feature=np.array([0.1, 0.2, 1.1]),
        leave_one_out=np.array([0.05, 0.1, 0.9]), shapley=np.array([0.1, 0.15, 1.2]),
        shapley_stderr=None, culprit=2, margin=1.05)
    segments = _segment_results(case, sections, trace, maps)
    return Explanation(
        case=case, sections=sections,
        model={"name": "hand-made", "weights_hash": "0" * 16, "grade_labels": ["0", "1", "2", "3"]},
        settings={"methods": list(methods), "target": "predicted", "points": 20, "size": 11,
                  "pixel_mm": 0.5, "rotation_deg": 0.0, "baseline_hu": 0.0, "seed": 0,
                  "profile_aggregate": "positive"},
        prediction={"grade": "3", "column": 3,
                    "scores": {"0": -1.0, "1": 0.0, "2": 0.5, "3": 2.0},
                    "probabilities": {"0": 0.03, "1": 0.09, "2": 0.15, "3": 0.73}},
        target={"requested": "predicted", "label": 3, "value": 2.0},
        segments=segments, culprit_index=int(trace.culprit), margin=float(trace.margin),
        maps=maps)


class DarkCentre(torch.nn.Module):
    """A tiny protocol model with a known answer: one feature per segment, how dark its lumen
    centre is on average along it (((350 - HU) / 350) squared at the centre pixel, mean over
    cross-sections); the head scales it by 10 into column 1. The culprit is the segment with the
    darkened lumen, and the gradient lies on the centre pixels of the darkened cross-sections."""

    def encode_segments(self, x):
        h, w = x.shape[-2:]
        centre = x[..., h // 2, w // 2]                      # (B, S, N)
        return (((350.0 - centre) / 350.0) ** 2).mean(dim=2, keepdim=True)

    def head(self, pooled):
        return torch.cat([torch.zeros_like(pooled), 10.0 * pooled], dim=1)

    def forward(self, x):
        return self.head(self.encode_segments(x).amax(dim=1))


@pytest.fixture(scope="session")
def synthetic_explanation():
    return make_explanation()


@pytest.fixture(scope="session")
def written_report(synthetic_explanation, tmp_path_factory):
    out = tmp_path_factory.mktemp("report") / "out"
    html = synthetic_explanation.write(out)
    return out, html


@pytest.fixture(scope="session")
def synth():
    """The builders and constants of this file (test modules cannot import conftest under
    --import-mode=importlib)."""
    return SimpleNamespace(make_case=make_case, make_explanation=make_explanation,
                           DarkCentre=DarkCentre,
                           LESION=LESION, BLOB_ARC_MM=BLOB_ARC_MM)
