"""The demo's outputs through the bounded-memory path equal those of the whole-image path.

The whole-image path is the one this library had before: the CT cast to float32 on reading,
cross-sections sampled with the corners of the whole grid, overlays splatted by one bincount
over the whole image (``tests/geometry/whole_image.py``). Both paths run here, in this test,
on the demo's phantom case; report.json, segments.csv, attributions.npz and every overlay must
be the same, to the last bit. (The outputs were also compared with a run made before the change,
outside the test suite: equal.)
"""

import dataclasses
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import SimpleITK as sitk

from explain.case import load_case
from explain.geometry._grid import Grid, VoxelBlock
from explain.geometry.splat import SplatBox
from explain.model import load_model
from explain.report import explain_case
from explain.report import files as report_files

sys.path.insert(0, str(Path(__file__).parents[1] / "geometry"))
from whole_image import whole_image_splat  # noqa: E402


def _whole_grid_crop(self, ci, cj, ck):
    """Grid.crop as it was: every voxel of the image as float32, indices unshifted."""
    full = sitk.GetArrayFromImage(sitk.Cast(self._image, sitk.sitkFloat32))
    return VoxelBlock(full, (0, 0, 0)), ci, cj, ck


def _whole_image_box(maps, sections, image):
    """The whole image as one box: the old single bincount over every voxel."""
    mean, weight = whole_image_splat([np.asarray(m, dtype=np.float32) for m in maps], sections,
                                     image)
    return SplatBox((0, 0, 0), np.asarray(mean, dtype=np.float32), weight,
                    tuple(image.GetSize()))


def _whole_image_coverage_box(sections, *, like):
    """coverage.nii.gz as it was built: the splat weight over the whole image, as one box."""
    sections = list(sections)
    _, weight = whole_image_splat([np.ones(cs.shape, dtype=np.float32) for cs in sections],
                                  sections, like)
    return SplatBox((0, 0, 0), np.zeros(weight.shape, np.float32), weight,
                    tuple(like.GetSize()))


def _same_outputs(a, b):
    for name in ("report.json", "segments.csv"):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    na, nb = np.load(a / "attributions.npz"), np.load(b / "attributions.npz")
    assert sorted(na.files) == sorted(nb.files)
    for key in na.files:
        np.testing.assert_array_equal(na[key], nb[key], err_msg=key)
    names = sorted(p.name for p in (a / "overlays").iterdir())
    assert names == sorted(p.name for p in (b / "overlays").iterdir())
    for name in names:
        x, y = (sitk.ReadImage(str(d / "overlays" / name)) for d in (a, b))
        assert x.GetPixelID() == y.GetPixelID() and x.GetSize() == y.GetSize(), name
        assert (x.GetOrigin(), x.GetSpacing(), x.GetDirection()) == (
            y.GetOrigin(), y.GetSpacing(), y.GetDirection()), name
        np.testing.assert_array_equal(sitk.GetArrayViewFromImage(x),
                                      sitk.GetArrayViewFromImage(y), err_msg=name)


@pytest.mark.slow
def test_demo_outputs_equal_the_whole_image_path(demo_case, tmp_path, monkeypatch):
    case = load_case(demo_case)
    assert case.image.GetPixelID() == sitk.sitkInt16  # kept as stored
    model = load_model("builtin:reference")
    explain_case(model, case, seed=0).write(tmp_path / "bounded")

    old_case = dataclasses.replace(case, image=sitk.Cast(case.image, sitk.sitkFloat32))
    monkeypatch.setattr(Grid, "crop", _whole_grid_crop)
    monkeypatch.setattr(report_files, "map_box", _whole_image_box)
    monkeypatch.setattr(report_files, "coverage_box", _whole_image_coverage_box)
    explain_case(model, old_case, seed=0).write(tmp_path / "whole")
    _same_outputs(tmp_path / "bounded", tmp_path / "whole")
    settings = json.loads((tmp_path / "bounded" / "report.json").read_text())["settings"]
    assert settings["memory_budget_gb"] == 0.5
    # by hand: one segment saves about 1.4 MB (recorded in the PassBatches); an IG step of 16
    # segments at four times that is about 90 MB, so 0.5 GB holds 5 steps (of at most 8), while
    # occlusion windows and head rows reach their caps
    assert settings["batch_sizes"] == {"integrated_gradients": 5, "occlusion": 16, "head": 16384}


@pytest.mark.parametrize("value", ["0", "-2", "nan"])
def test_cli_refuses_a_bad_budget_in_one_line(demo_case, tmp_path, value, child_env):
    out = tmp_path / "out"
    done = subprocess.run(
        [sys.executable, "-m", "explain.cli", "explain", "--case", str(demo_case), "--model",
         "builtin:reference", "--out", str(out), f"--memory-budget-gb={value}"],
        capture_output=True, text=True, env=child_env(0), timeout=120)
    assert done.returncode == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "--memory-budget-gb" in lines[0] and "GB > 0" in lines[0]
    assert not out.exists()
