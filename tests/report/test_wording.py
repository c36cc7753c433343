"""Grade and target in words: a model without grade labels is never said to give a category.

Category names and their order are those of CAD-RADS 2.0 (Cury RC et al., "CAD-RADS 2.0 - 2022
Coronary Artery Disease-Reporting and Data System", JCCT 2022).
"""

import re

import pytest
from matplotlib.text import Text

from explain import explain_case, wrap_model
from explain.report.figures import contribution_figure, culprit_figure, profile_figure, tree_figure
from explain.report.wording import grade_phrase, target_phrase, verdict

CLAIM = re.compile(r"CAD-RADS\s+(0|1|2|3|4A|4B|5)\b")


@pytest.mark.parametrize("prediction, words", [
    ({"grade": None, "column": 5}, "output column 5 has the top score"),
    ({"grade": "4b", "column": 5}, "CAD-RADS 4B (output column 5)"),    # CAD-RADS 2.0 category
    ({"grade": "dark", "column": 1}, "grade 'dark' (output column 1)"),  # not a category
])
def test_grade_phrase(prediction, words):
    assert words in grade_phrase(prediction) and words in verdict(prediction)
    if prediction["grade"] != "4b":
        assert "CAD-RADS" not in verdict(prediction)


def test_target_phrase_names_columns():
    assert target_phrase(5) == "output column 5"
    assert "CAD-RADS" in target_phrase("expected")


@pytest.fixture(scope="module")
def unlabelled(synth):
    case = synth.make_case(lesion_hu=100.0)
    model = wrap_model(synth.DarkCentre(), name="no-labels")
    return explain_case(model, case, methods=("gradient",), points=8, size=7, pixel_mm=0.7,
                        baseline_hu=350.0)


def _figure_texts(e):
    figures = [contribution_figure(e), tree_figure(e), culprit_figure(e, "gradient"),
               profile_figure(e, "gradient")]
    return [t.get_text() for fig in figures for t in fig.findobj(Text)]


def test_unlabelled_model_figures_and_repr_claim_no_category(unlabelled):
    e = unlabelled
    # auto without grade labels is the top column (explain.model.targets), here column 1
    assert e.prediction["grade"] is None and e.target["label"] == e.prediction["column"] == 1
    texts = [*_figure_texts(e), repr(e)]
    assert not [t for t in texts if CLAIM.search(t)]
    assert any("contribution to output column 1" in t for t in texts)
    assert "output column 1 has the top score" in repr(e)


def test_label_count_must_match_columns(synth):
    from explain import ModelError

    model = wrap_model(synth.DarkCentre(), grade_labels=["0", "1", "2"])
    with pytest.raises(ModelError, match="3 labels .* for 2 output columns"):
        explain_case(model, synth.make_case(), methods=("gradient",), points=4, size=5,
                     pixel_mm=0.7)
