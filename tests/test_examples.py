"""Every script in examples/ runs to the end in a subprocess (each asserts its own outcome)."""

from __future__ import annotations

import subprocess
import sys
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


def test_every_example_is_covered():
    assert sorted(p.name for p in EXAMPLES.glob("*.py")) == sorted(CASES)


@pytest.mark.parametrize("script", sorted(CASES))
def test_example_runs(script, tmp_path):
    args, expected = CASES[script]
    proc = subprocess.run([sys.executable, str(EXAMPLES / script),
                           *(a.format(tmp=tmp_path) for a in args)],
                          capture_output=True, text=True, timeout=300, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert expected in proc.stdout, proc.stdout[-2000:]
