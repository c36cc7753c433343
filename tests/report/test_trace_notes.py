"""A culprit tie and float32 coalition values are said in the report's notes and settings."""

from types import SimpleNamespace

import numpy as np

from explain.report.explanation import _shapley_kind, _trace_notes


def _trace(**kw):
    base = dict(tied=(), culprit=0, precision_note=None, shapley_stderr=None, n_permutations=None,
                seed=None)
    return SimpleNamespace(**{**base, **kw})


def test_tie_note_names_the_level_segments_and_the_rule():
    notes = _trace_notes(_trace(tied=(2,), culprit=1), (1, 6, 7))
    assert len(notes) == 1
    assert "segment(s) 7" in notes[0] and "segment 6" in notes[0]
    assert "lowest SCCT number is named" in notes[0]
    assert _trace_notes(_trace(), (1, 6, 7)) == []


def test_precision_note_is_passed_on():
    notes = _trace_notes(_trace(precision_note="coalition values computed in float32: x"), (1,))
    assert notes == ["coalition values computed in float32: x"]


def test_shapley_kind_says_exact_only_when_exact():
    assert _shapley_kind(_trace()).startswith("exact")
    sampled = _shapley_kind(_trace(shapley_stderr=np.ones(21), n_permutations=256, seed=4))
    assert "sampled" in sampled and "256 permutations" in sampled and "exact" not in sampled
