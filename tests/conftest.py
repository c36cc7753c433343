"""Fixtures for the tests that run ``python -m explain.cli explain`` on the demo case in
subprocesses (tests/test_determinism.py, tests/test_interrupt.py)."""

import os
import subprocess
import sys
from pathlib import Path

import pytest

from explain.phantom import write_phantom_case
from explain.report.demo import DEMO_LESIONS

def _explain_command(case, out, *, quiet=True):
    """The command line of one explain run of ``case`` with the bundled model, gradient only."""
    cmd = [sys.executable, "-m", "explain.cli", "explain", "--case", str(case),
           "--model", "builtin:reference", "--methods", "gradient", "--seed", "0",
           "--out", str(out)]
    return cmd + (["--quiet"] if quiet else [])


def _child_env(hash_seed):
    """The environment of a child run: this worktree first on the path, a chosen hash seed."""
    env = dict(os.environ)
    root = str(Path(__file__).resolve().parents[1])
    env["PYTHONPATH"] = os.pathsep.join(p for p in (root, env.get("PYTHONPATH")) if p)
    env["PYTHONHASHSEED"] = str(hash_seed)
    return env


@pytest.fixture(scope="session")
def demo_case(tmp_path_factory):
    """The demo's phantom case (seed 0, the demo lesion), written once per test session."""
    folder = tmp_path_factory.mktemp("demo-case")
    return write_phantom_case(folder / "case", seed=0, lesions=list(DEMO_LESIONS))


@pytest.fixture(scope="session")
def first_run(demo_case, tmp_path_factory):
    """One complete run's output folder, to compare other runs against."""
    out = tmp_path_factory.mktemp("first") / "out"
    done = subprocess.run(_explain_command(demo_case, out), capture_output=True, text=True,
                          env=_child_env(1), timeout=300)
    if done.returncode != 0:
        raise RuntimeError(f"reference run failed ({done.returncode}): {done.stderr}")
    return out


@pytest.fixture(scope="session")
def explain_command():
    """``explain_command(case, out, quiet=True)``: the argv of one explain run."""
    return _explain_command


@pytest.fixture(scope="session")
def child_env():
    """``child_env(hash_seed)``: the environment of a child run."""
    return _child_env
