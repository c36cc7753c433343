"""``culprit-lens sanity`` and ``explain --sanity``: the files, the verdict, bad input.

The models are the hand-built ones of tests/quality/sanity_models.py, loaded as FILE.py:FACTORY;
the weight-blind one must fail the randomisation check of Adebayo et al. 2018.
"""

import json
from pathlib import Path

import pytest

from explain import CAUTION
from explain.cli import main

MODELS = Path(__file__).parent / "quality" / "sanity_models.py"
SMALL = ["--points", "8", "--size", "12", "--pixel-mm", "0.5", "--methods", "gradient"]


def test_sanity_writes_json_figure_and_page_and_fails_a_weight_blind_model(
        demo_case, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["sanity", "--case", str(demo_case), "--model", f"{MODELS}:weight_blind",
                 "--out", str(out), "--rotations", "0,90", "--jitter-draws", "1", "--seed", "4",
                 "--quiet", *SMALL])
    printed = capsys.readouterr().out
    assert code == 0
    assert "gradient: FAILS" in printed
    assert sorted(p.name for p in out.iterdir()) == ["sanity.html", "sanity.json", "sanity.png"]
    report = json.loads((out / "sanity.json").read_text())
    assert report["format"] == "culprit-lens-sanity/1"
    assert report["caution"] == CAUTION
    rnd = report["randomisation"]
    assert rnd["seed"] == 4 and report["settings"]["seed"] == 4
    assert [layer["name"] for layer in rnd["layers"]] == ["out", "offset"]
    assert rnd["methods"]["gradient"]["passed"] is False
    assert "0.5" in rnd["pass_rule"]
    stab = report["stability"]
    assert [(r["kind"], r["setting"]) for r in stab["augmented"]] == [
        ("rotation", 90.0), ("jitter", 0.0)]
    page = (out / "sanity.html").read_text()
    assert CAUTION in page and "data:image/png;base64," in page and "<script" not in page
    assert (out / "sanity.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_sanity_refuses_a_model_without_parameters(demo_case, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["sanity", "--case", str(demo_case), "--model", f"{MODELS}:no_parameters",
                 "--out", str(out), "--quiet", *SMALL])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "no parameters" in err and "Traceback" not in err
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out")]


@pytest.mark.parametrize("option, match", [
    (["--rotations", "0,ninety"], "--rotations"), (["--jitter-draws", "-2"], "jitter draws"),
    (["--jitter-mm", "0"], "jitter"), (["--seed", "-1"], "seed")])
def test_sanity_bad_options_are_one_line_exit_2(demo_case, tmp_path, capsys, option, match):
    out = tmp_path / "out"
    code = main(["sanity", "--case", str(demo_case), "--model", f"{MODELS}:weight_blind",
                 "--out", str(out), "--quiet", *SMALL, *option])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and match in err
    assert not out.exists()


def test_explain_with_sanity_writes_both(demo_case, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["explain", "--case", str(demo_case), "--model", f"{MODELS}:weight_blind",
                 "--out", str(out), "--sanity", "--sanity-no-stability", "--quiet", *SMALL])
    assert code == 0, capsys.readouterr().err
    assert (out / "report.json").is_file() and (out / "report.html").is_file()
    report = json.loads((out / "sanity" / "sanity.json").read_text())
    assert report["stability"] is None
    assert report["randomisation"]["methods"]["gradient"]["passed"] is False


def test_explain_with_sanity_refuses_a_model_without_parameters_before_writing(
        demo_case, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["explain", "--case", str(demo_case), "--model", f"{MODELS}:no_parameters",
                 "--out", str(out), "--sanity", "--quiet", *SMALL])
    assert code == 2 and "no parameters" in capsys.readouterr().err
    assert not out.exists()


@pytest.fixture(scope="module")
def two_runs(demo_case, tmp_path_factory):
    """Two randomisation-only runs with the same inputs and seed."""
    outs = []
    for name in ("a", "b"):
        out = tmp_path_factory.mktemp(f"sanity-{name}") / "out"
        assert main(["sanity", "--case", str(demo_case), "--model", f"{MODELS}:weight_blind",
                     "--out", str(out), "--no-stability", "--quiet", *SMALL]) == 0
        outs.append(out)
    return outs


def test_same_inputs_and_seed_write_the_same_bytes(two_runs):
    a, b = two_runs
    for name in ("sanity.json", "sanity.html", "sanity.png"):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


@pytest.mark.browser
def test_page_loads_and_its_figure_decodes_in_chromium(two_runs, tmp_path, chromium):
    page = two_runs[0] / "sanity.html"
    dom, console = chromium.run(page, tmp_path, "--dump-dom")
    assert console == [] and "Sanity checks" in dom
    result = chromium.probe(page, tmp_path)
    png = (two_runs[0] / "sanity.png").read_bytes()
    size = [int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")]  # PNG IHDR
    assert result["count"] == 1 and result["sizes"][0] == size
