"""The small synthetic case and hand-made explanation of tests/report/conftest.py, loaded by path
(tests use importlib mode, so conftest modules cannot be imported by name)."""

import importlib.util
from pathlib import Path
from types import SimpleNamespace

import pytest

_spec = importlib.util.spec_from_file_location(
    "report_synthetic", Path(__file__).parents[1] / "report" / "conftest.py")
_synth = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(_synth)


@pytest.fixture(scope="session")
def synth():
    """``make_case``, ``make_explanation``, ``LESION``, ``BLOB_ARC_MM`` of the report tests."""
    return SimpleNamespace(make_case=_synth.make_case, make_explanation=_synth.make_explanation,
                           LESION=_synth.LESION, BLOB_ARC_MM=_synth.BLOB_ARC_MM)


@pytest.fixture(scope="module")
def case(synth):
    return synth.make_case()


@pytest.fixture(scope="module")
def explanation(synth, case):
    return synth.make_explanation(case)
