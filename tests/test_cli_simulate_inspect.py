"""``longwave simulate`` and ``longwave inspect`` through real subprocesses and real files.

The chain a user follows: simulate a survey, fit it with ``longwave survey``
(serially, ``-w 0``), then inspect the result file.
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from longwave.demo.campaign import read_truth, simulate_campaign
from longwave.storage import ResultStore, SurveyFile, open_series

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2


def lw(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "longwave", *map(str, args)],
                          capture_output=True, text=True, timeout=300, cwd=cwd)


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """A 24-object survey, fitted with and without stored prediction grids."""
    d = tmp_path_factory.mktemp("chain")
    survey = d / "s.h5"
    p = lw("simulate", survey, "--objects", 24, "--classes", "flickering,wandering",
           "--seed", 3)
    assert p.returncode == 0, p.stderr
    for name, extra in (("grid.h5", ["--grid-count", 80]), ("plain.h5", [])):
        p = lw("survey", survey, "-o", d / name, "-w", 0, "-q", *extra)
        assert p.returncode == 0, p.stderr
    return d


def test_simulate_writes_a_survey_with_its_truth(fitted):
    with SurveyFile(fitted / "s.h5") as sf:
        assert len(sf) == 24 and sf.has_err
        assert np.all((sf.n_points >= 150) & (sf.n_points <= 400))  # the --points default
    truth = read_truth(fitted / "s.h5")
    assert set(truth["class"]) <= {"flickering", "wandering"}
    assert set(truth["kernel"]) == {"matern32"}


def test_simulate_is_seeded_and_refuses_to_overwrite(tmp_path):
    a = tmp_path / "a.h5"
    assert lw("simulate", a, "--objects", 5, "--seed", 9).returncode == 0
    # The same seed in process gives the same values: the option reaches the simulator.
    same = simulate_campaign(5, seed=9)
    with SurveyFile(a) as fa:
        assert all(np.array_equal(fa[i].y, same.values[i]) for i in range(5))
    again = lw("simulate", a, "--objects", 5)
    assert again.returncode == 2 and "exists; pass --overwrite" in again.stderr


@pytest.mark.parametrize("suffix", [".npz", ".csv", ".h5"])
def test_simulate_long_series_in_each_format(tmp_path, suffix):
    path = tmp_path / f"long{suffix}"
    p = lw("simulate", path, "--long", "3e3", "--scale", 0.5, "--seed", 2)
    assert p.returncode == 0, p.stderr
    assert '"scale": 0.5' in p.stdout
    if suffix == ".npz":
        with np.load(path) as f:
            t, y = f["t"], f["y"]
    elif suffix == ".csv":
        t, y, _ = np.loadtxt(path, delimiter=",", skiprows=1, unpack=True)
    else:
        with open_series(path) as ds:
            t, y, _ = ds.read()
    assert t.size == y.size == 3000 and np.all(np.diff(t) >= 0)


@pytest.mark.parametrize("args, message", [
    (["x.txt", "--long", 100], "a single series is written as .npz, .csv, .h5"),
    (["x.npz"], "a survey is written as .h5, .hdf5"),
    (["x.h5", "--classes", "flickering,pulsar"], "must be among flickering"),
])
def test_simulate_errors_state_the_rule(tmp_path, args, message):
    p = lw("simulate", *args, cwd=tmp_path)
    assert p.returncode == 2 and message in p.stderr, p.stderr


def test_inspect_summary_matches_the_file(fitted):
    p = lw("inspect", fitted / "grid.h5")
    assert p.returncode == 0, p.stderr
    assert "24 objects" in p.stdout and "by status: ok" in p.stdout
    assert "fit time per object: median" in p.stdout and '"clip": null' in p.stdout
    js = lw("inspect", fitted / "grid.h5", "--json")
    summary = json.loads(js.stdout)
    table = ResultStore.read(fitted / "grid.h5")
    assert sum(summary["by_status"].values()) == len(table) == 24
    ok = table.status == "ok"
    for name in table.param_names:
        assert summary["params"][name]["median"] == pytest.approx(
            np.median(table.params[name][ok]))
    assert summary["fit_seconds"]["total"] == pytest.approx(
        table.runtime[np.isin(table.status, ("ok", "not_converged"))].sum())


def test_inspect_object_plots_the_stored_grid(fitted, tmp_path):
    ident = ResultStore.read(fitted / "grid.h5").id[0]
    png = tmp_path / "o.png"
    p = lw("inspect", fitted / "grid.h5", "--object", ident, "--survey", fitted / "s.h5",
           "--plot", png)
    assert p.returncode == 0, p.stderr
    assert "stored posterior" in p.stdout and "(true " in p.stdout
    assert png.read_bytes()[:8] == PNG_SIGNATURE


def test_inspect_refits_when_no_grid_is_stored(fitted, tmp_path):
    ident = ResultStore.read(fitted / "plain.h5").id[1]
    png = tmp_path / "r.png"
    missing = lw("inspect", fitted / "plain.h5", "--object", ident, "--plot", png)
    assert missing.returncode == 2 and "pass --survey SURVEY.h5" in missing.stderr
    p = lw("inspect", fitted / "plain.h5", "--object", ident, "--survey", fitted / "s.h5",
           "--plot", png)
    assert p.returncode == 0, p.stderr
    assert "refit posterior" in p.stdout and png.read_bytes()[:8] == PNG_SIGNATURE


@pytest.mark.parametrize("args, message", [
    (["--object", "nosuch"], "object 'nosuch' is not in"),
    (["--plot", "x.png"], "name it with --object ID"),
])
def test_inspect_errors_state_the_fix(fitted, args, message):
    p = lw("inspect", fitted / "grid.h5", *args)
    assert p.returncode == 2 and message in p.stderr, p.stderr


def test_inspect_names_a_missing_file(tmp_path):
    p = lw("inspect", tmp_path / "none.h5")
    assert p.returncode == 2 and "does not exist" in p.stderr
