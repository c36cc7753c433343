"""Two explain runs with the same inputs and seed write byte-identical files.

The runs are separate processes with different hash seeds (``PYTHONHASHSEED``), started seconds
apart, so neither set/dict order nor the clock may leak into the output. No field of report.json,
segments.csv or attributions.npz is excluded: none holds a time stamp (docs/report-format.md,
"Reproducibility").
"""

import gzip
import subprocess
import zipfile

import pytest

COMPARED = ("report.json", "segments.csv", "attributions.npz",
            "overlays/gradient.nii.gz", "overlays/culprit.nii.gz")


@pytest.fixture(scope="module")
def second_run(demo_case, first_run, tmp_path_factory, explain_command, child_env):
    out = tmp_path_factory.mktemp("second") / "out"
    done = subprocess.run(explain_command(demo_case, out), capture_output=True, text=True,
                          env=child_env(2), timeout=300)
    assert done.returncode == 0, done.stderr
    return out


@pytest.mark.parametrize("name", COMPARED)
def test_same_bytes_from_two_runs(first_run, second_run, name):
    assert (first_run / name).read_bytes() == (second_run / name).read_bytes(), name


def test_npz_members_carry_no_clock_time(first_run):
    # ZIP (PKWARE APPNOTE.TXT 4.4.6): each member holds an MS-DOS date and time; the earliest
    # representable, 1980-01-01 00:00:00, is what Python's zipfile writes when none is given.
    with zipfile.ZipFile(first_run / "attributions.npz") as archive:
        stamps = {info.date_time for info in archive.infolist()}
    assert stamps == {(1980, 1, 1, 0, 0, 0)}


@pytest.mark.parametrize("name", ["overlays/gradient.nii.gz", "overlays/culprit.nii.gz"])
def test_gzip_header_has_no_mtime(first_run, name):
    # gzip (RFC 1952 section 2.3.1): bytes 4-7 are MTIME; 0 means "no time stamp available".
    head = (first_run / name).read_bytes()[:10]
    assert head[:2] == b"\x1f\x8b"
    assert head[4:8] == b"\x00\x00\x00\x00"
    with gzip.open(first_run / name) as stream:  # and it is a whole gzip stream
        assert len(stream.read()) > 348  # NIfTI-1 header is 348 bytes (NIfTI-1 standard)
