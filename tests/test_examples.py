"""Every script in examples/ runs to the end in a subprocess (each asserts its own outcome).

The four scripts start together and are waited for together: most of their
wall time is process and cluster start-up, which overlaps well, so the
suite pays for roughly the slowest one instead of the sum.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"

# Script -> (arguments, a line its output must contain).
CASES = {
    "fit_long_series.py": (["{tmp}"], "wrote 1000000 grid points"),
    "own_pipeline.py": ([], "bag: 40 sources"),
    "choose_method.py": (["{tmp}"], "recommended: "),
    "survey_on_cluster.py": (["--out", "{tmp}"], "100 objects in"),
}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    started = {}
    for script, (args, _) in CASES.items():
        tmp = tmp_path_factory.mktemp(script.removesuffix(".py"))
        started[script] = (subprocess.Popen(
            [sys.executable, str(EXAMPLES / script), *(a.format(tmp=tmp) for a in args)],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=tmp),
            time.monotonic())
    done = {}
    for script, (proc, t0) in started.items():
        try:
            out, err = proc.communicate(timeout=300)
        except subprocess.TimeoutExpired:
            proc.kill()
            out, err = proc.communicate()
        done[script] = (proc.returncode, out, err, time.monotonic() - t0)
    return done


def test_every_example_is_covered():
    assert sorted(p.name for p in EXAMPLES.glob("*.py")) == sorted(CASES)


@pytest.mark.parametrize("script", sorted(CASES))
def test_example_runs(script, runs):
    code, out, err, _seconds = runs[script]
    assert code == 0, err[-3000:]
    assert CASES[script][1] in out, out[-2000:]
