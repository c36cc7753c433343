"""Phantom cases on disk: the case format, loading with explain.case.load_case, determinism,
atomic writes, and the cohort folder with its CSV.

Outside references: SimpleITK reads the written images back (geometry, values); the case format
of issue 2 section 2 (docs/case-format.md) as enforced by ``load_case``; CAD-RADS 2.0 categories
(Cury et al. 2022) for the grades listed in the cohort CSV.
"""

import csv
import importlib.util
import json
from pathlib import Path

import numpy as np
import pytest
import SimpleITK as sitk

from explain.case import load_case
from explain.errors import InputError
from explain.grading import CATEGORIES
from explain.phantom import make_phantom, write_cohort, write_phantom_case
from explain.phantom import writer as writer_module

_spec = importlib.util.spec_from_file_location("cadrads_table",
                                               Path(__file__).with_name("cadrads_table.py"))
_table = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(_table)
cury_2022_category = _table.cury_2022_category  # hand-written Cury 2022 table

QUICK = dict(spacing_mm=0.9)  # coarse voxels: these tests are about files, not about HU


def _array(path):
    return sitk.GetArrayFromImage(sitk.ReadImage(str(path)))


def test_written_case_loads_and_matches_the_case_in_memory(tmp_path):
    lesions = ["6:70:soft", "13:100:calcified", "2:30"]
    manifest = write_phantom_case(tmp_path / "c", seed=3, lesions=lesions, case_id="demo-3", **QUICK)
    memory = make_phantom(seed=3, lesions=lesions, case_id="demo-3", **QUICK)
    case = load_case(manifest)
    assert manifest.name == "case.json" and case.case_id == "demo-3"
    assert case.segment_ids == memory.segment_ids
    assert not case.notes  # no duplicates dropped, no point outside the image
    for segment in case.segments:
        assert np.allclose(segment.centerline.points_mm, memory.centerlines[segment.id], atol=1e-4)
        assert np.allclose(segment.radius_mm, memory.radius_mm[segment.id], atol=1e-4)
    # image: same values and geometry as in memory; stored as whole HU
    assert np.array_equal(sitk.GetArrayFromImage(case.image), sitk.GetArrayFromImage(memory.image))
    assert np.allclose(case.image.GetOrigin(), memory.image.GetOrigin())
    assert np.allclose(case.image.GetSpacing(), memory.image.GetSpacing())
    ref = case.reference
    assert ref.grade == memory.reference["grade"] == "5"
    assert ref.grade == cury_2022_category(ref.stenosis_percent, plaque=True)
    assert ref.stenosis_percent == memory.reference["stenosis_percent"]
    assert [(l.segment, l.start_mm, l.end_mm) for l in ref.lesions] == [
        (p.segment, p.start_mm, p.end_mm) for p in memory.lesions]
    assert ref.lesion_mask is not None
    labels = sitk.GetArrayFromImage(ref.lesion_mask)
    assert sorted(np.unique(labels)) == [0, 1, 2, 3]


def test_manifest_and_files_follow_the_case_format(tmp_path):
    manifest = write_phantom_case(tmp_path / "c", seed=1, lesions=["7:55"], **QUICK)
    data = json.loads(manifest.read_text())
    assert data["format"] == "culprit-lens-case/1"
    assert data["image"] == "image.nii.gz"
    assert data["reference"]["lesion_mask"] == "lesion_mask.nii.gz"
    assert all(s["centerline"] == f"centerlines/seg{s['id']}.csv" for s in data["segments"])
    assert [s["id"] for s in data["segments"]] == sorted(s["id"] for s in data["segments"])
    header = (manifest.parent / "centerlines" / "seg7.csv").read_text().splitlines()[0]
    assert header == "x,y,z,radius"
    provenance = json.loads((manifest.parent / "phantom.json").read_text())
    assert provenance["seed"] == 1 and provenance["lesions"][0]["segment"] == 7
    assert sitk.ReadImage(str(manifest.parent / "image.nii.gz")).GetPixelID() == sitk.sitkInt16


def test_mask_marks_the_lesions_where_the_reference_says(tmp_path):
    case = load_case(write_phantom_case(tmp_path / "c", seed=2, lesions=["1:60", "11:40"]))
    mask = case.reference.lesion_mask
    labels = sitk.GetArrayFromImage(mask)
    for n, lesion in enumerate(case.reference.lesions, start=1):
        k, j, i = np.nonzero(labels == n)
        assert k.size > 50
        # voxel centres by SimpleITK's own index -> physical map
        points = np.array([mask.TransformIndexToPhysicalPoint((int(a), int(b), int(c)))
                           for a, b, c in zip(i, j, k)])
        line = case.segment(lesion.segment).centerline
        dist = np.linalg.norm(points[:, None] - line.points_mm[None], axis=2)
        nearest = line.arc_mm[np.argmin(dist, axis=1)]
        assert nearest.min() >= lesion.start_mm - 0.6 and nearest.max() <= lesion.end_mm + 0.6
        assert dist.min(axis=1).max() < 4.0  # inside the outer wall of a proximal vessel


def test_same_seed_same_files_other_seed_other_files(tmp_path):
    a = write_phantom_case(tmp_path / "a", seed=9, lesions=["6:70"], **QUICK).parent
    b = write_phantom_case(tmp_path / "b", seed=9, lesions=["6:70"], **QUICK).parent
    c = write_phantom_case(tmp_path / "c", seed=10, lesions=["6:70"], **QUICK).parent
    for name in ("image.nii.gz", "lesion_mask.nii.gz"):
        assert np.array_equal(_array(a / name), _array(b / name))
    for name in ("case.json", "phantom.json", "centerlines/seg6.csv"):
        assert (a / name).read_text() == (b / name).read_text()
    assert (a / "centerlines/seg6.csv").read_text() != (c / "centerlines/seg6.csv").read_text()


def test_a_lesion_does_not_move_the_anatomy():
    plain = make_phantom(seed=6, **QUICK)
    with_lesion = make_phantom(seed=6, lesions=["2:60"], **QUICK)
    assert plain.segment_ids == with_lesion.segment_ids
    for segment in plain.segment_ids:
        assert np.array_equal(plain.centerlines[segment], with_lesion.centerlines[segment])


def test_refuses_a_non_empty_folder_and_leaves_it_alone(tmp_path):
    out = tmp_path / "c"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(InputError, match="not empty"):
        write_phantom_case(out, seed=0, **QUICK)
    assert [p.name for p in out.iterdir()] == ["keep.txt"]
    write_phantom_case(out, seed=0, force=True, **QUICK)
    assert not (out / "keep.txt").exists() and (out / "case.json").exists()


def test_an_error_while_writing_leaves_nothing_behind(tmp_path, monkeypatch):
    def broken(case, folder, **options):
        (folder / "image.nii.gz").write_bytes(b"half")
        raise OSError("disk full")

    monkeypatch.setattr(writer_module, "write_case_files", broken)
    with pytest.raises(OSError):
        writer_module.write_phantom_case(tmp_path / "c", seed=0, **QUICK)
    assert list(tmp_path.iterdir()) == []


def test_cohort_folder_and_csv(tmp_path):
    path = write_cohort(tmp_path / "cohort", count=8, seed=4, spacing_mm=1.2)
    with path.open(newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == 8
    assert {"case", "grade", "seed", "lesions"} <= set(rows[0])
    assert sorted({r["grade"] for r in rows}) == sorted(CATEGORIES)  # Cury 2022 categories
    for row in rows:
        case = load_case(path.parent / row["case"])  # `case` is relative to the CSV's folder
        assert case.reference.grade == row["grade"]
        assert case.reference.grade == cury_2022_category(case.reference.stenosis_percent,
                                                        plaque=bool(row["lesions"]))
        # the recorded seed and lesions rebuild the case exactly
        again = make_phantom(seed=int(row["seed"]), spacing_mm=1.2,
                             lesions=row["lesions"].split(";") if row["lesions"] else None)
        assert np.array_equal(sitk.GetArrayFromImage(again.image),
                              sitk.GetArrayFromImage(case.image))


def test_to_case_equals_the_loaded_case(tmp_path):
    memory = make_phantom(seed=8, lesions=["11:45:soft"], **QUICK)
    loaded = load_case(write_phantom_case(tmp_path / "c", seed=8, lesions=["11:45:soft"], **QUICK))
    direct = memory.to_case()
    assert direct.segment_ids == loaded.segment_ids
    assert [(s.abbr, s.territory) for s in direct.segments] == [
        (s.abbr, s.territory) for s in loaded.segments]
    for a, b in zip(direct.segments, loaded.segments):
        assert np.allclose(a.centerline.arc_mm, b.centerline.arc_mm, atol=1e-3)
    assert direct.reference.grade == loaded.reference.grade == "2"
    assert direct.reference.lesions == loaded.reference.lesions
    # the loader keeps the box of the labelled voxels; SimpleITK places it back on the grid
    placed = sitk.Resample(loaded.reference.lesion_mask, direct.reference.lesion_mask,
                           sitk.Transform(), sitk.sitkNearestNeighbor, 0)
    assert np.array_equal(sitk.GetArrayFromImage(direct.reference.lesion_mask),
                          sitk.GetArrayFromImage(placed))
