"""The command line: bad input is one line on stderr and exit status 2, nothing half-written."""

import json
import subprocess
import sys

import pytest

from explain.cli import main


def test_missing_case_is_exit_2_one_line(tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["explain", "--case", str(tmp_path / "nope.json"), "--model", "builtin:reference",
                 "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "nope.json" in err and "Traceback" not in err
    assert not out.exists()


def test_bad_manifest_is_exit_2(tmp_path, capsys):
    manifest = tmp_path / "case.json"
    manifest.write_text(json.dumps({"format": "culprit-lens-case/1", "case_id": "x"}))
    code = main(["explain", "--case", str(manifest), "--model", "builtin:reference",
                 "--out", str(tmp_path / "out")])
    assert code == 2
    assert "missing field 'image'" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_usage_error_is_exit_2(capsys):
    with pytest.raises(SystemExit) as info:
        main(["explain"])
    assert info.value.code == 2


def test_console_script_runs_without_traceback(tmp_path):
    # The installed entry point, as a user runs it: python -m explain.cli behaves the same.
    result = subprocess.run(
        [sys.executable, "-m", "explain.cli", "explain", "--case", str(tmp_path / "x.json"),
         "--model", "builtin:reference", "--out", str(tmp_path / "o")],
        capture_output=True, text=True, timeout=120)
    assert result.returncode == 2
    assert "Traceback" not in result.stderr and "x.json" in result.stderr


def test_non_empty_output_refused_before_work(tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    code = main(["explain", "--case", str(tmp_path / "nope.json"), "--model", "builtin:reference",
                 "--out", str(out)])
    assert code == 2
    assert "--force" in capsys.readouterr().err
    assert [p.name for p in out.iterdir()] == ["keep.txt"]


@pytest.mark.parametrize("text", ["6:x", "30:50", "6:50:bony", "6"])
def test_phantom_bad_lesion_is_exit_2(tmp_path, capsys, text):
    out = tmp_path / "ph"
    code = main(["phantom", "--out", str(out), "--lesion", text])
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err and err.count("\n") == 1
    assert not out.exists()


def test_phantom_count_and_lesion_together_refused(tmp_path, capsys):
    code = main(["phantom", "--out", str(tmp_path / "c"), "--count", "3", "--lesion", "6:50"])
    assert code == 2 and "--count" in capsys.readouterr().err
