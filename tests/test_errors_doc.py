"""Every message docs/errors.md lists can be produced on the command line, as one line, exit 2.

The doc's first column names a recipe below; each recipe builds the bad input from a small valid
case of our own and returns the command line. The test reads the doc itself, so a message
changed in the code but not in the doc (or listed without a recipe) fails here.
"""

import json
import re
import textwrap
from pathlib import Path

import pytest
import SimpleITK as sitk

from explain.cli import main

DOC = Path(__file__).resolve().parents[1] / "docs" / "errors.md"
ROW = re.compile(r"^\| `([a-z0-9-]+)` \| `(.+?)` \|", re.M)
MODEL_SOURCE = textwrap.dedent('''
    import torch

    class Tiny(torch.nn.Module):
        """Mean HU of each segment's patch, max over segments, three output columns."""
        cross_section_spec = {"points": 3, "size": 5, "pixel_mm": 1.0}

        def __init__(self, fail=False):
            super().__init__()
            self.fail = fail
            self.fc = torch.nn.Linear(1, 3)

        def forward(self, x):
            if self.fail:
                raise RuntimeError("this model always fails")
            feats = x.mean(dim=(2, 3, 4))[..., None]
            return self.fc(torch.max(feats, dim=1).values / 100.0)

    def tiny():
        return Tiny()

    def no_spec():
        model = Tiny()
        model.cross_section_spec = None
        return model

    def failing():
        return Tiny(fail=True)

    def not_a_module():
        return 42

    def raising():
        raise ValueError("no weights here")

    class NoWeights(torch.nn.Module):
        """Darkest HU of each segment, max over segments: no parameters at all."""
        cross_section_spec = {"points": 3, "size": 5, "pixel_mm": 1.0}

        def forward(self, x):
            return torch.max(-x.amin(dim=(2, 3, 4))[..., None], dim=1).values

    def no_weights():
        return NoWeights()
''')


def _doc_rows():
    return ROW.findall(DOC.read_text(encoding="utf-8"))


class Kit:
    """A small valid case and model files in one folder; recipes change copies of them."""

    def __init__(self, root):
        self.root = root
        self.out = str(root / "out")
        image = sitk.Image([24, 24, 24], sitk.sitkInt16) + 40
        image.SetSpacing([0.8, 0.8, 0.8])
        sitk.WriteImage(image, str(root / "image.nii.gz"))
        for sid, x in ((1, 5.0), (6, 12.0)):
            rows = ["x,y,z,radius"] + [f"{x},{4 + 1.5 * k},{6 + 0.5 * k},1.2" for k in range(8)]
            (root / f"seg{sid}.csv").write_text("\n".join(rows) + "\n")
        self.manifest = {
            "format": "culprit-lens-case/1", "case_id": "errors-doc", "image": "image.nii.gz",
            "segments": [{"id": 1, "centerline": "seg1.csv"}, {"id": 6, "centerline": "seg6.csv"}],
        }
        (root / "models.py").write_text(MODEL_SOURCE)

    def case(self, change=None, **fields):
        manifest = json.loads(json.dumps(self.manifest))
        manifest.update(fields)
        if change:
            change(manifest)
        path = self.root / "case.json"
        path.write_text(json.dumps(manifest))
        return str(path)

    def explain(self, case=None, model=None, *extra):
        model = model or f"{self.root / 'models.py'}:tiny"
        return ["explain", "--case", case or self.case(), "--model", model,
                "--out", self.out, "--quiet", "--methods", "gradient", *extra]

    def write(self, name, text):
        path = self.root / name
        path.write_text(text)
        return str(path)

    def centerline(self, text):
        self.write("seg6.csv", text)
        return self.explain()

    def reference(self, reference):
        return self.explain(self.case(reference=reference))

    def cohort(self, text):
        return ["audit", "--cohort", self.write("cohort.csv", text), "--model",
                "builtin:reference", "--out", self.out, "--workers", "0", "--quiet"]


def _segments(change):
    def apply(manifest):
        change(manifest["segments"])
    return apply


def _mha_with(kit, array_image):
    path = kit.root / "image.mha"
    sitk.WriteImage(array_image, str(path))
    return kit.explain(kit.case(image="image.mha"))


def _nan_image(kit):
    image = sitk.Image([24, 24, 24], sitk.sitkFloat32)
    image[3, 3, 3] = float("nan")
    return _mha_with(kit, image)


def _audit_twice(kit):
    cohort = kit.write("cohort.csv", "case\ncase.json\n")
    kit.case()
    (kit.root / "out").mkdir()
    (kit.root / "out" / "audit.json").write_text(json.dumps({
        "format": "culprit-lens-audit/1", "settings": {"methods": ["other"]},
        "weights_hash": "x", "cohort": str(Path(cohort).resolve())}))
    return ["audit", "--cohort", cohort, "--model", "builtin:reference", "--out", kit.out,
            "--workers", "0", "--quiet", "--methods", "gradient"]


def _dicom(kit, change=None, *, manifest=None):
    """The kit's CT written as a DICOM series in ct/, changed by ``change(files)``."""
    import pydicom

    from explain.phantom.dicom_writer import write_ct_series

    image = sitk.ReadImage(str(kit.root / "image.nii.gz"))
    write_ct_series(image, kit.root / "ct", case_id="errors-doc", seed=1)
    files = sorted((kit.root / "ct").glob("*.dcm"))
    if change:
        change(files, pydicom)
    return kit.explain(kit.case(image="ct", **(manifest or {})))


def _second_series(kit):
    def change(files, pydicom):
        from explain.phantom.dicom_writer import write_ct_series

        image = sitk.ReadImage(str(kit.root / "image.nii.gz"))
        write_ct_series(image, kit.root / "other", case_id="errors-doc", seed=2)
        for path in (kit.root / "other").glob("*.dcm"):
            path.rename(kit.root / "ct" / f"b-{path.name}")
    return _dicom(kit, change)


def _move_slice(index, by_mm=None, *, onto=None):
    def change(files, pydicom):
        ds = pydicom.dcmread(files[index])
        position = [float(v) for v in ds.ImagePositionPatient]
        if onto is not None:
            position = [float(v) for v in pydicom.dcmread(files[onto]).ImagePositionPatient]
        else:
            position[2] += by_mm
        ds.ImagePositionPatient = position
        ds.save_as(files[index])
    return change


def _tilt(files, pydicom):
    for path in files:
        ds = pydicom.dcmread(path)
        ds.GantryDetectorTilt = 12.0
        ds.save_as(path)


def _not_empty(kit):
    (kit.root / "out").mkdir()
    (kit.root / "out" / "old.txt").write_text("x")
    return kit.explain()


def _duplicate_ids(kit):
    kit.case()
    folder = kit.root / "twin"
    folder.mkdir()
    for name in ("image.nii.gz", "seg1.csv", "seg6.csv"):
        (folder / name).write_bytes((kit.root / name).read_bytes())
    (folder / "case.json").write_text((kit.root / "case.json").read_text())
    return kit.cohort("case\ncase.json\ntwin/case.json\n")


RECIPES = {
    # case
    "case-missing": lambda k: k.explain(str(k.root / "nope.json")),
    "case-not-json": lambda k: k.explain(k.write("case.json", "{not json")),
    "case-not-object": lambda k: k.explain(k.write("case.json", "[1, 2]")),
    "case-format": lambda k: k.explain(k.case(format="other/9")),
    "case-missing-field": lambda k: k.explain(k.case(lambda m: m.pop("image"))),
    "case-field-type": lambda k: k.explain(k.case(segments={"id": 1})),
    "case-no-segments": lambda k: k.explain(k.case(segments=[])),
    "segment-entry": lambda k: k.explain(k.case(_segments(lambda s: s.append(7)))),
    "segment-number": lambda k: k.explain(k.case(_segments(lambda s: s[0].update(id=19)))),
    "segment-not-number": lambda k: k.explain(k.case(_segments(lambda s: s[0].update(id="LM")))),
    "segment-twice": lambda k: k.explain(k.case(_segments(lambda s: s[1].update(id=1)))),
    # image
    "image-missing": lambda k: k.explain(k.case(image="missing.nii.gz")),
    "image-suffix": lambda k: k.explain(k.case(image=Path(k.write("image.png", "x")).name)),
    "image-unreadable": lambda k: k.explain(k.case(image=Path(k.write("bad.nii.gz", "x")).name)),
    "image-not-3d": lambda k: _mha_with(k, sitk.Image([8, 8], sitk.sitkInt16)),
    "image-not-scalar": lambda k: _mha_with(k, sitk.Image([8, 8, 8], sitk.sitkVectorFloat32, 3)),
    "image-nan": _nan_image,
    "dicom-several-series": _second_series,
    "dicom-series-absent": lambda k: _dicom(k, manifest={"series_instance_uid": "1.2.3.4"}),
    "dicom-missing-slices": lambda k: _dicom(k, lambda files, _: files[10].unlink()),
    "dicom-uneven": lambda k: _dicom(k, _move_slice(10, 0.2)),
    "dicom-same-position": lambda k: _dicom(k, _move_slice(10, onto=9)),
    "dicom-tilt": lambda k: _dicom(k, _tilt),
    "dicom-empty": lambda k: (k.root.joinpath("dicom").mkdir(), k.explain(k.case(image="dicom")))[1],
    # centerlines
    "centerline-missing": lambda k: k.explain(k.case(_segments(lambda s: s[1].update(centerline="no.csv")))),
    "centerline-empty": lambda k: k.centerline(""),
    "centerline-header": lambda k: k.centerline("x,y\n1,2\n"),
    "centerline-cell": lambda k: k.centerline("x,y,z\n1,2,3\n4,five,6\n"),
    "centerline-nan": lambda k: k.centerline("x,y,z\n1,2,3\n4,nan,6\n"),
    "centerline-radius": lambda k: k.centerline("x,y,z,radius\n5,5,5,1\n6,6,6,-1\n"),
    "centerline-short": lambda k: k.centerline("x,y,z\n5,5,5\n5,5,5\n"),
    "centerline-outside": lambda k: k.centerline("x,y,z\n5,5,5\n500,5,5\n"),
    # reference
    "reference-not-object": lambda k: k.reference([1]),
    "reference-grade": lambda k: k.reference({"grade": "6"}),
    "reference-stenosis": lambda k: k.reference({"stenosis_percent": {"1": 120}}),
    "reference-lesions": lambda k: k.reference({"lesions": True}),
    "reference-lesion-entry": lambda k: k.reference({"lesions": [{"segment": 1}]}),
    "reference-lesion-segment": lambda k: k.reference(
        {"lesions": [{"segment": 2, "start_mm": 0, "end_mm": 1}]}),
    "reference-lesion-extent": lambda k: k.reference(
        {"lesions": [{"segment": 1, "start_mm": 0, "end_mm": 500}]}),
    "reference-mask-geometry": lambda k: (
        sitk.WriteImage(sitk.Image([5, 5, 5], sitk.sitkUInt8), str(k.root / "mask.nii.gz")),
        k.reference({"lesion_mask": "mask.nii.gz"}))[1],
    # model
    "model-builtin": lambda k: k.explain(None, "builtin:nothing"),
    "model-no-file": lambda k: k.explain(None, str(k.root / "absent.pt")),
    "model-factory-file": lambda k: k.explain(None, f"{k.root / 'absent.py'}:make"),
    "model-no-factory": lambda k: k.explain(None, f"{k.root / 'models.py'}:nothing"),
    "model-import": lambda k: k.explain(None, f"{k.write('broken.py', 'raise ImportError(1)')}:f"),
    "model-factory-fails": lambda k: k.explain(None, f"{k.root / 'models.py'}:raising"),
    "model-not-module": lambda k: k.explain(None, f"{k.root / 'models.py'}:not_a_module"),
    "model-not-torchscript": lambda k: k.explain(None, k.write("model.pt", "not a model")),
    "weights-missing": lambda k: k.explain(None, None, "--weights", str(k.root / "absent.pt")),
    "weights-unreadable": lambda k: k.explain(None, None, "--weights", k.write("w.pt", "x")),
    "weights-misfit": lambda k: (
        __import__("torch").save({"other": __import__("torch").zeros(1)}, k.root / "w.pt"),
        k.explain(None, None, "--weights", str(k.root / "w.pt")))[1],
    "model-fails": lambda k: k.explain(None, f"{k.root / 'models.py'}:failing"),
    "grade-label-count": lambda k: k.explain(None, None, "--grade-labels", "0,1"),
    # options
    "grade-labels-empty": lambda k: k.explain(None, None, "--grade-labels", "0,,2"),
    "methods-unknown": lambda k: k.explain(None, None, "--methods", "magic"),
    "methods-twice": lambda k: k.explain(None, None, "--methods", "gradient,gradient"),
    "target-column": lambda k: k.explain(None, None, "--target", "7"),
    "target-unknown": lambda k: k.explain(None, None, "--target", "best"),
    "target-expected": lambda k: k.explain(None, None, "--grade-labels", "a,b,c",
                                           "--target", "expected"),
    "sampling-missing": lambda k: k.explain(None, f"{k.root / 'models.py'}:no_spec"),
    "memory-budget": lambda k: k.explain(None, None, "--memory-budget-gb", "0"),
    "quality-negative": lambda k: k.explain(None, None, "--tolerance-mm", "-1"),
    "flag-unknown": lambda k: k.explain(None, None, "--flag-threshold", "shiny=0.3"),
    "flag-syntax": lambda k: k.explain(None, None, "--flag-threshold", "on_border"),
    # sanity
    "sanity-no-parameters": lambda k: ["sanity", "--case", k.case(), "--model",
                                       f"{k.root / 'models.py'}:no_weights", "--out", k.out,
                                       "--quiet", "--methods", "gradient"],
    "sanity-budget": lambda k: ["sanity", "--case", k.case(), "--model",
                                f"{k.root / 'models.py'}:tiny", "--out", k.out, "--quiet",
                                "--memory-budget-gb", "0.5"],
    "sanity-rotations": lambda k: ["sanity", "--case", k.case(), "--model",
                                   f"{k.root / 'models.py'}:tiny", "--out", k.out, "--quiet",
                                   "--rotations", "0,ninety"],
    # output
    "out-not-empty": _not_empty,
    "out-not-folder": lambda k: (k.write("out", "x"), k.explain())[1],
    # phantoms
    "lesion-fields": lambda k: ["phantom", "--out", k.out, "--lesion", "6"],
    "lesion-percent": lambda k: ["phantom", "--out", k.out, "--lesion", "6:many"],
    "lesion-kind": lambda k: ["phantom", "--out", k.out, "--lesion", "6:50:hard"],
    "count-and-lesion": lambda k: ["phantom", "--out", k.out, "--lesion", "6:50", "--count", "2"],
    "count-small": lambda k: ["phantom", "--out", k.out, "--count", "0"],
    # audit
    "cohort-missing": lambda k: ["audit", "--cohort", str(k.root / "none.csv"), "--model",
                                 "builtin:reference", "--out", k.out, "--workers", "0"],
    "cohort-no-case-column": lambda k: k.cohort("path\ncase.json\n"),
    "cohort-no-rows": lambda k: k.cohort("case\n"),
    "cohort-empty-cell": lambda k: (k.case(), k.cohort("case,note\n,x\n"))[1],
    "cohort-duplicate": _duplicate_ids,
    "audit-other-settings": _audit_twice,
    "audit-not-audit": lambda k: (_not_empty(k), k.cohort("case\ncase.json\n"))[1],
    "workers-negative": lambda k: (k.case(), k.cohort("case\ncase.json\n")[:-3]
                                   + ["--workers", "-1"])[1],
}


def _pieces(message):
    """The literal parts of a documented message, between its ``<...>`` placeholders."""
    return [p for p in re.split(r"<[^<>]*>", message) if p.strip()]


def test_every_documented_message_has_a_recipe_and_every_recipe_a_message():
    names = [name for name, _ in _doc_rows()]
    assert len(names) == len(set(names)), "a name appears twice in docs/errors.md"
    assert set(names) == set(RECIPES)


@pytest.mark.parametrize("name,message", _doc_rows(), ids=[n for n, _ in _doc_rows()])
def test_documented_message_is_produced(name, message, tmp_path, capsys):
    kit = Kit(tmp_path)
    argv = RECIPES[name](kit)
    before = {p for p in tmp_path.rglob("*")}
    code = main(argv)
    err = capsys.readouterr().err
    assert code == 2, err
    assert err.startswith("culprit-lens: error: ") and err.count("\n") == 1, err
    assert "Traceback" not in err
    position = 0
    for piece in _pieces(message):
        found = err.find(piece, position)
        assert found >= 0, f"{piece!r} not in {err!r} (after position {position})"
        position = found + len(piece)
    # nothing half-written: no new output folder (an existing one is left as it was)
    after = {p for p in tmp_path.rglob("*")}
    new = {p for p in after - before if p.name != "__pycache__" and "__pycache__" not in p.parts}
    assert not new, sorted(map(str, new))
