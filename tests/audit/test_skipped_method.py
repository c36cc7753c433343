"""An audit without --methods runs explain's defaults: one that does not apply is skipped, with a
note in each case's report, and the cases are explained (not failed)."""

import json
import textwrap

import SimpleITK as sitk

from explain.audit import run_audit

MODEL = textwrap.dedent('''
    import torch

    class MeanHU(torch.nn.Module):
        """Mean HU per segment, max over segments, a linear head: no convolution for Grad-CAM."""
        cross_section_spec = {"points": 4, "size": 5, "pixel_mm": 1.0}

        def __init__(self):
            super().__init__()
            self.fc = torch.nn.Linear(1, 2)

        def forward(self, x):
            feats = x.mean(dim=(2, 3, 4))[..., None] / 100.0
            return self.fc(torch.max(feats, dim=1).values)

    def build():
        torch.manual_seed(0)
        return MeanHU()
''')


def _case(folder):
    folder.mkdir()
    image = sitk.Image([24, 24, 24], sitk.sitkInt16) + 40
    image[12, 10, 10] = 400
    image.SetSpacing([0.8, 0.8, 0.8])
    sitk.WriteImage(image, str(folder / "image.nii.gz"))
    segments = []
    for sid, x in ((1, 5.0), (6, 12.0)):
        rows = ["x,y,z"] + [f"{x},{4 + 1.5 * k},{6 + 0.5 * k}" for k in range(8)]
        (folder / f"seg{sid}.csv").write_text("\n".join(rows) + "\n")
        segments.append({"id": sid, "centerline": f"seg{sid}.csv"})
    (folder / "case.json").write_text(json.dumps({
        "format": "culprit-lens-case/1", "case_id": folder.name, "image": "image.nii.gz",
        "segments": segments}))


def test_audit_skips_a_default_method_that_does_not_apply(tmp_path):
    (tmp_path / "model.py").write_text(MODEL)
    _case(tmp_path / "a")
    (tmp_path / "cohort.csv").write_text("case\na/case.json\n")
    result = run_audit(tmp_path / "cohort.csv", f"{tmp_path / 'model.py'}:build",
                       tmp_path / "audit", workers=0, quiet=True, target=0)
    assert result.exit_status == 0
    (row,) = result.rows
    assert row["status"] == "ok", row["error"]
    assert row["gradcam_pointing_hit"] is None
    report = json.loads((tmp_path / "audit" / "cases" / "a" / "report.json").read_text())
    assert "gradcam" not in report["settings"]["methods"]
    assert "gradcam" in report["settings"]["skipped_methods"]
    assert any(n.startswith("gradcam: skipped") for n in report["notes"])
