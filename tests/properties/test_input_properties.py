"""Random valid inputs load; random corruptions of them either load or raise InputError.

Never another exception type: a user who gets a KeyError or a TypeError out of a manifest has
no idea which field to fix. The inputs are our own small synthetic case (a 24^3 image and
straight centerlines), written once per test into a temporary folder.
"""

import copy
import json
import math
import re
import tempfile
from pathlib import Path

import numpy as np
import pytest
import SimpleITK as sitk
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from explain import InputError, load_case
from explain.case import read_centerline_csv
from explain.geometry.sampling import check_options

PROPS = settings(max_examples=60, deadline=None, derandomize=True, database=None,
                 suppress_health_check=[HealthCheck.too_slow])

JSON = st.recursive(
    st.none() | st.booleans() | st.integers(-10**30, 10**30) | st.floats(allow_nan=False)
    | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=6), inner,
                                                                max_size=3),
    max_leaves=6,
)


def _write_case(folder, segment_ids=(1, 2, 6)):
    folder = Path(folder)
    image = sitk.Image([24, 24, 24], sitk.sitkInt16) + 40
    image.SetSpacing([0.8, 0.8, 0.8])
    sitk.WriteImage(image, str(folder / "image.nii.gz"))
    segments = []
    for n, sid in enumerate(segment_ids):
        name = f"seg{sid}.csv"
        x = 4.0 + 5.0 * n
        rows = ["x,y,z,radius"] + [f"{x},{4.0 + 1.5 * k},{6.0 + 0.5 * k},1.2" for k in range(8)]
        (folder / name).write_text("\n".join(rows) + "\n")
        segments.append({"id": sid, "centerline": name})
    manifest = {
        "format": "culprit-lens-case/1", "case_id": "props-1", "image": "image.nii.gz",
        "segments": segments,
        "reference": {"grade": "3", "stenosis_percent": {"1": 55},
                      "lesions": [{"segment": 1, "start_mm": 1.0, "end_mm": 4.0}]},
    }
    return manifest


def _load(folder, manifest):
    path = Path(folder) / "case.json"
    path.write_text(json.dumps(manifest))
    return load_case(path)


def _paths(value, prefix=()):
    """Every (path, value) inside a JSON value, the root included."""
    yield prefix, value
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _paths(item, prefix + (key,))
    elif isinstance(value, list):
        for index, item in enumerate(value):
            yield from _paths(item, prefix + (index,))


def _set(root, path, value):
    target = root
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value


def _delete(root, path):
    target = root
    for key in path[:-1]:
        target = target[key]
    del target[path[-1]]


@PROPS
@given(st.lists(st.sampled_from(range(1, 19)), min_size=1, max_size=4, unique=True),
       st.text(min_size=1, max_size=20))
def test_random_valid_manifests_load(segment_ids, case_id):
    with tempfile.TemporaryDirectory() as folder:
        manifest = _write_case(folder, segment_ids)
        manifest["case_id"] = case_id
        if 1 not in segment_ids:
            manifest["reference"]["lesions"] = []
        case = _load(folder, manifest)
        assert [s.id for s in case.segments] == sorted(segment_ids)
        assert case.case_id == case_id


@PROPS
@given(st.data())
def test_corrupted_manifests_load_or_raise_input_error(data):
    with tempfile.TemporaryDirectory() as folder:
        manifest = _write_case(folder)
        corrupted = copy.deepcopy(manifest)
        places = [p for p, _ in _paths(corrupted)]
        path = data.draw(st.sampled_from(places), label="path")
        action = data.draw(st.sampled_from(["replace", "delete"]), label="action")
        if not path:
            corrupted = data.draw(JSON, label="root")
        elif action == "delete":
            _delete(corrupted, path)
        else:
            _set(corrupted, path, data.draw(JSON, label="value"))
        try:
            _load(folder, corrupted)
        except InputError as exc:
            assert str(exc).strip()


@PROPS
@given(st.lists(st.lists(st.one_of(
    st.floats(-50, 50), st.sampled_from(["", "nan", "inf", "x", "1e400", " 3 "])),
    min_size=0, max_size=5), max_size=6),
    st.sampled_from(["x,y,z", "x,y,z,radius", "z,y,x", "x,y", "radius,x,y,z", ""]))
def test_corrupted_centerline_csvs_load_or_raise_input_error(rows, header):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "line.csv"
        lines = [header] + [",".join(str(v) for v in row) for row in rows]
        path.write_text("\n".join(lines) + "\n")
        try:
            points, radius = read_centerline_csv(path)
        except InputError as exc:
            assert str(path) in str(exc)
        else:
            assert points.shape[1] == 3 and np.isfinite(points).all()
            assert radius is None or (radius.shape == (len(points),) and (radius >= 0).all())


OPTION = st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6), st.floats(),
                   st.text(max_size=4), st.lists(st.integers(), max_size=2))


@PROPS
@given(OPTION, OPTION, OPTION, OPTION, OPTION)
def test_sampling_options_are_accepted_or_refused_with_input_error(points, size, pixel_mm,
                                                                    rotation, fill):
    try:
        checked = check_options(points, size, pixel_mm, rotation, fill)
    except InputError:
        return
    p, s, mm, rot, _ = checked
    assert p >= 2 and s >= 1 and mm > 0 and math.isfinite(mm) and math.isfinite(rot)


@pytest.mark.parametrize("lesions,field", [
    (True, "reference.lesions"),
    ([{"segment": 1, "start_mm": 10**400, "end_mm": 2}], "lesions[0]"),
])
def test_found_by_the_corruption_search(lesions, field):
    """Two manifests the random search above once found crashing with TypeError/OverflowError."""
    with tempfile.TemporaryDirectory() as folder:
        manifest = _write_case(folder)
        manifest["reference"]["lesions"] = lesions
        with pytest.raises(InputError, match=re.escape(field)):
            _load(folder, manifest)
