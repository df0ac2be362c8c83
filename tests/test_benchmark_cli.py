"""``longwave bench`` through real subprocesses, on real files (CSV, .npz, survey HDF5).

Source: the command's contract in longwave.cli.bench: exit code 0 with a
report folder, exit code 2 with the error on stderr (longwave.cli.main).
"""

import json
import subprocess
import sys

import numpy as np
import pytest

from longwave import Model
from longwave.kernels import Matern32
from longwave.simulate import simulate_series
from longwave.storage import write_survey


def _bench(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "longwave", "bench", *map(str, args)],
                          capture_output=True, text=True, timeout=300, cwd=cwd)


def _draw(n, seed):
    truth = Model(Matern32(amplitude=1.0, scale=25.0), excess_noise=0.05)
    t = np.cumsum(np.random.default_rng(seed).exponential(1.0, n))
    series, _ = simulate_series(truth, t, err=0.1, rng=seed + 10)
    return series


@pytest.fixture(scope="module")
def csv_file(tmp_path_factory):
    s = _draw(300, 1)
    path = tmp_path_factory.mktemp("in") / "star.csv"
    np.savetxt(path, np.column_stack([s.t, s.y, s.err]), delimiter=",",
               header="time,value,error", comments="")
    return path


def test_csv_input_writes_a_report_and_prints_the_recommendation(csv_file, tmp_path):
    out = tmp_path / "rep"
    proc = _bench(csv_file, "--out", out, "--methods", "kalman", "vfe:m=8,32", "--no-fit",
                  "--seed", 3, "--quiet")
    assert proc.returncode == 0, proc.stderr
    assert "RECOMMENDED: " in proc.stdout and "Cautions:" in proc.stdout
    report = json.loads((out / "report.json").read_text(encoding="utf-8"))
    assert report["config"]["seed"] == 3 and report["config"]["input"] == str(csv_file)
    assert [m["label"] for m in report["methods"]] == ["kalman", "vfe:m=8", "vfe:m=32"]
    for name in ("accuracy_vs_time.png", "posterior_zoom.png", "time_vs_n.png", "summary.txt"):
        assert (out / name).stat().st_size > 0


def test_survey_input_samples_objects_with_the_seed(tmp_path):
    series = [_draw(200 + 20 * i, 20 + i) for i in range(4)]
    path = tmp_path / "survey.h5"
    write_survey(path, [f"obj-{i}" for i in range(4)], [s.t for s in series],
                 [s.y for s in series], [s.err for s in series])
    out = tmp_path / "rep"
    proc = _bench(path, "--out", out, "--objects", 2, "--seed", 7, "--methods", "kalman",
                  "vfe:m=16", "--no-fit", "--model", "matern32(scale=20)", "--quiet")
    assert proc.returncode == 0, proc.stderr
    report = json.loads((out / "report.json").read_text(encoding="utf-8"))
    ids = [o["id"] for o in report["objects"]]
    assert len(ids) == 2 and len(set(ids)) == 2 and set(ids) <= {f"obj-{i}" for i in range(4)}
    assert [m["label"] for m in report["combined"]] == ["kalman", "vfe:m=16"]
    assert report["recommendation"]["choice"] == "kalman"
    for ident in ids:
        assert (out / f"{ident}_posterior_zoom.png").is_file()
    again = _bench(path, "--out", tmp_path / "rep2", "--objects", 2, "--seed", 7, "--methods",
                   "kalman", "--no-fit", "--quiet", "--gaps", 0)
    assert again.returncode == 0, again.stderr
    ids2 = [o["id"] for o in json.loads((tmp_path / "rep2" / "report.json").read_text())["objects"]]
    assert ids2 == ids


@pytest.mark.parametrize("methods, message", [
    (["nosuch"], "unknown inference method 'nosuch'"),
    (["vfe:m"], "each option must read KEY=VALUE"),
    (["vfe:m=10000"], "10000 inducing points for"),
    (["kalman:order=2"], "does not take options ['order']"),
])
def test_bad_settings_exit_with_a_clear_error(csv_file, tmp_path, methods, message):
    proc = _bench(csv_file, "--out", tmp_path / "rep", "--methods", *methods, "--quiet")
    assert proc.returncode == 2
    assert message in proc.stderr
    assert not (tmp_path / "rep" / "report.json").exists()


def test_npz_input_and_objects_on_a_single_series_is_an_error(tmp_path):
    s = _draw(100, 2)
    path = tmp_path / "one.npz"
    np.savez(path, time=s.t, value=s.y, error=s.err)
    proc = _bench(path, "--out", tmp_path / "rep", "--objects", 2, "--quiet")
    assert proc.returncode == 2 and "--objects applies to survey files only" in proc.stderr
    missing = _bench(tmp_path / "absent.csv", "--out", tmp_path / "rep", "--quiet")
    assert missing.returncode == 2 and "does not exist" in missing.stderr


def test_scaling_mode_runs_without_input(tmp_path):
    out = tmp_path / "scal"
    proc = _bench("--scaling", "--out", out, "--min-n", 1000, "--max-n", "5e3", "--methods",
                  "kalman", "vfe:m=32", "--quiet")
    assert proc.returncode == 0, proc.stderr
    report = json.loads((out / "scaling.json").read_text(encoding="utf-8"))
    assert report["sizes"] == [1000, 2000, 5000]
    assert [len(c["points"]) for c in report["curves"]] == [3, 3]
    assert (out / "scaling_time.png").is_file() and "time exp" in proc.stdout
    clash = _bench("--scaling", "somefile.csv", "--out", out)
    assert clash.returncode == 2 and "leave out INPUT" in clash.stderr
