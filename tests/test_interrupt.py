"""Interrupting explain (SIGINT, SIGTERM) and two runs into one folder leave no mixture behind.

Exit statuses 130 and 143 are the shell convention 128 + signal number (bash manual, "EXIT
STATUS"; SIGINT = 2, SIGTERM = 15 in POSIX signal.h).
"""

import os
import signal
import subprocess
import sys

import pytest

from explain.errors import InputError
from explain.interrupt import Terminated, signals_as_exceptions, signals_deferred
from explain.io import atomic_output_dir

MAIN_FILES = ("report.json", "segments.csv", "attributions.npz", "report.html")


def _run_bytecode(n=2_000_000):
    """Give Python's signal handler bytecode boundaries to run at (another thread may have
    received the signal; the main thread acts on it at its next check)."""
    total = 0
    for i in range(n):
        total += i
    return total


def _leftovers(parent, keep):
    return sorted(p.name for p in parent.iterdir() if p.name not in keep)


@pytest.mark.parametrize("signum, status", [(signal.SIGTERM, 143), (signal.SIGINT, 130)])
def test_signal_during_explain_leaves_nothing(demo_case, tmp_path, explain_command, child_env,
                                              signum, status):
    out = tmp_path / "out"
    proc = subprocess.Popen(explain_command(demo_case, out, quiet=False), env=child_env(0),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        first = proc.stderr.readline()  # the first progress line: the run is working
        assert first.startswith("  "), first
        proc.send_signal(signum)
        _, rest = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == status, rest
    ours = [line for line in rest.splitlines() if line.startswith("culprit-lens:")]
    assert len(ours) == 1 and "Traceback" not in rest, rest
    assert rest.splitlines()[-1] == ours[0]
    assert not out.exists()
    assert _leftovers(tmp_path, keep=()) == []  # no staging folder, no lock file


def test_two_runs_into_one_new_folder(demo_case, first_run, tmp_path, explain_command,
                                      child_env):
    out = tmp_path / "out"
    procs = [subprocess.Popen(explain_command(demo_case, out), env=child_env(seed),
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for seed in (3, 4)]
    results = [p.communicate(timeout=300) for p in procs]
    codes = sorted(p.returncode for p in procs)
    assert codes == [0, 2], results
    loser = next(err for p, (_, err) in zip(procs, results) if p.returncode == 2)
    assert loser.count("\n") == 1 and loser.startswith("culprit-lens: error: --out:"), loser
    for name in MAIN_FILES:  # one complete report, the same as a run on its own
        assert (out / name).read_bytes() == (first_run / name).read_bytes(), name
    assert _leftovers(tmp_path, keep=("out",)) == []


def test_a_held_folder_is_refused_then_free_again(tmp_path):
    out = tmp_path / "out"
    with atomic_output_dir(out) as staging:
        (staging / "a.txt").write_text("first")
        with pytest.raises(InputError, match="another culprit-lens run is writing into"):
            with atomic_output_dir(out):
                pass
    assert (out / "a.txt").read_text() == "first"
    with pytest.raises(InputError, match="not empty"):  # the check is repeated under the lock
        with atomic_output_dir(out):
            pass
    assert _leftovers(tmp_path, keep=("out",)) == []


def test_sigterm_becomes_an_exception_and_cleanup_runs(tmp_path):
    out = tmp_path / "out"
    with pytest.raises(Terminated):
        with signals_as_exceptions(), atomic_output_dir(out) as staging:
            (staging / "part.txt").write_text("half")
            os.kill(os.getpid(), signal.SIGTERM)
            _run_bytecode()
            pytest.fail("SIGTERM was not turned into Terminated")
    assert _leftovers(tmp_path, keep=()) == []
    assert signal.getsignal(signal.SIGTERM) == signal.SIG_DFL  # handlers restored


def test_a_signal_while_deferred_is_raised_after_the_step():
    finished = []
    with pytest.raises(Terminated):
        with signals_as_exceptions():
            with signals_deferred():
                os.kill(os.getpid(), signal.SIGTERM)
                _run_bytecode()  # the handler runs in here, while deferred
                finished.append(True)
    assert finished == [True]


def test_sigterm_during_demo_leaves_nothing(tmp_path, child_env):
    out = tmp_path / "demo"
    proc = subprocess.Popen([sys.executable, "-m", "explain.cli", "demo", "--out", str(out)],
                            env=child_env(0), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)
    try:
        assert proc.stderr.readline().startswith("  ")  # "making phantom case ..."
        proc.send_signal(signal.SIGTERM)
        _, rest = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 143, rest
    assert rest.splitlines()[-1].startswith("culprit-lens: terminated") and "Traceback" not in rest
    assert _leftovers(tmp_path, keep=()) == []
