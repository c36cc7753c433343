"""The cohort table is checked before any work; case ids never leave the output folder."""

import json

import pytest

from explain.audit import read_cohort, safe_folder_name
from explain.cli import main
from explain.errors import InputError


def _case(folder, case_id):
    folder.mkdir(parents=True)
    (folder / "case.json").write_text(json.dumps({"format": "culprit-lens-case/1",
                                                  "case_id": case_id}))


def _table(path, lines):
    path.write_text("\n".join(lines) + "\n")
    return path


def test_missing_file_and_missing_case_column(tmp_path):
    with pytest.raises(InputError, match="not found"):
        read_cohort(tmp_path / "nope.csv")
    with pytest.raises(InputError, match="no 'case' column"):
        read_cohort(_table(tmp_path / "c.csv", ["path,grade", "a/case.json,1"]))


def test_duplicate_ids_are_refused(tmp_path):
    _case(tmp_path / "a", "same")
    _case(tmp_path / "b", "same")
    with pytest.raises(InputError, match="already used on line 2"):
        read_cohort(_table(tmp_path / "c.csv", ["case", "a/case.json", "b/case.json"]))


@pytest.mark.parametrize("bad", ["../escape", "/etc", "a/b", "..", ".hidden", "tab\there", ""])
def test_unsafe_ids_are_refused(tmp_path, bad):
    _case(tmp_path / "a", bad)
    with pytest.raises(InputError, match="unsafe|empty"):
        read_cohort(_table(tmp_path / "c.csv", ["case", "a/case.json"]))


def test_odd_ids_map_to_safe_folders(tmp_path):
    _case(tmp_path / "a", "patient 7: LAD")
    _case(tmp_path / "b", "ordinary-1")
    cohort = read_cohort(_table(tmp_path / "c.csv", ["case,site", "a/case.json,x", "b/case.json,y"]))
    folders = [r.folder for r in cohort.rows]
    assert folders[1] == "ordinary-1"
    assert "/" not in folders[0] and " " not in folders[0] and ":" not in folders[0]
    assert folders[0] == safe_folder_name("patient 7: LAD") != safe_folder_name("patient 7- LAD")
    assert cohort.rows[0].metadata == {"site": "x"}


def test_a_missing_manifest_is_a_case_not_a_bad_cohort(tmp_path):
    cohort = read_cohort(_table(tmp_path / "c.csv", ["case,case_id", "gone/case.json,g1"]))
    assert cohort.rows[0].case_id == "g1"


def test_command_line_refuses_a_bad_cohort_with_status_2_and_writes_nothing(tmp_path, capsys):
    _case(tmp_path / "a", "../../up")
    table = _table(tmp_path / "c.csv", ["case", "a/case.json"])
    out = tmp_path / "out"
    status = main(["audit", "--cohort", str(table), "--model", "builtin:reference",
                   "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert status == 2
    assert len(err.strip().splitlines()) == 1 and "unsafe" in err
    assert not out.exists()
