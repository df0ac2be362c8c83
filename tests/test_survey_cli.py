"""``longwave survey`` and ``longwave fit`` through real subprocesses.

The cluster here is the one a user would start by hand: ``dask scheduler``
and ``dask worker`` processes bound to 127.0.0.1, used through
``--scheduler``. References are in-process library runs on the same files
(the pipeline is deterministic).
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from distributed import Client
from survey_support import (
    free_port,
    longwave_cmd,
    make_objects,
    read_rows,
    start,
    stop,
    wait_for_port,
    write_test_survey,
)

from longwave.storage import ResultStore, read_grid
from longwave.survey import fit_object, run_survey

N_OBJECTS, N_POINTS = 240, 120


def _dask_exe() -> str:
    here = Path(sys.executable).with_name("dask")
    return str(here) if here.exists() else shutil.which("dask")


def _run(*args, timeout=180, check=True):
    proc = subprocess.run(longwave_cmd(*args), capture_output=True, text=True, timeout=timeout)
    if check and proc.returncode != 0:
        raise AssertionError(f"exit {proc.returncode}\nstdout:\n{proc.stdout}\n"
                             f"stderr:\n{proc.stderr}")
    return proc


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    path = folder / "survey.h5"
    ids = write_test_survey(path, N_OBJECTS, N_POINTS, seed=5)
    ref = folder / "reference.h5"
    run_survey(path, ref, model="matern32", workers=0, progress=False)
    return path, ids, read_rows(ref)


@pytest.fixture(scope="module")
def external_cluster(tmp_path_factory):
    """``dask scheduler`` plus ``dask worker`` (two single-threaded processes)."""
    port = free_port()
    logs = tmp_path_factory.mktemp("dask-logs")
    address = f"tcp://127.0.0.1:{port}"
    procs = []
    try:
        procs.append(start([_dask_exe(), "scheduler", "--host", "127.0.0.1", "--port", str(port),
                            "--no-dashboard"], stdout=open(logs / "scheduler.log", "w"),
                           stderr=subprocess.STDOUT))
        wait_for_port(port)
        procs.append(start([_dask_exe(), "worker", address, "--host", "127.0.0.1",
                            "--nworkers", "2", "--nthreads", "1", "--no-dashboard"],
                           stdout=open(logs / "worker.log", "w"), stderr=subprocess.STDOUT))
        with Client(address, timeout=60) as client:
            client.wait_for_workers(2, timeout=120)
        yield address
    finally:
        for proc in reversed(procs):
            stop(proc)


def _assert_same_rows(got: dict, ref: dict):
    assert set(got) == set(ref)
    for oid, r in ref.items():
        assert got[oid].status == r.status, oid
        assert got[oid].params == pytest.approx(r.params, rel=1e-10), oid


def test_survey_through_an_external_scheduler(survey, external_cluster, tmp_path):
    out = tmp_path / "external.h5"
    proc = _run("survey", survey[0], "--out", out, "--scheduler", external_cluster,
                "--batch-size", "16", "--json", "--quiet")
    summary = json.loads(proc.stdout)
    assert summary["scheduler"] == external_cluster
    assert summary["workers"] == 2
    assert summary["processed"] == len(survey[1])
    assert summary["by_status"]["bad_input"] == 4
    _assert_same_rows(read_rows(out), survey[2])


def test_client_killed_with_sigkill_then_resumed(survey, external_cluster, tmp_path):
    out = tmp_path / "killed.h5"
    client = start(longwave_cmd("survey", survey[0], "--out", out, "--scheduler",
                                external_cluster, "--batch-size", "4", "--in-flight", "2",
                                "--flush-seconds", "0", "--quiet"),
                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 120
        stored = 0
        while time.monotonic() < deadline and client.poll() is None:
            try:
                stored = len(ResultStore.read(out))
            except (FileNotFoundError, OSError, ValueError):
                stored = 0  # not created yet, or caught mid-rename
            if stored >= 20:
                break
            time.sleep(0.05)
        assert client.poll() is None, "the run ended before it could be killed"
        os.kill(client.pid, signal.SIGKILL)
        client.wait(30)
    finally:
        stop(client)
    partial = read_rows(out)  # readable after the kill, each id at most once
    assert 20 <= len(partial) < len(survey[1])
    proc = _run("survey", survey[0], "--out", out, "--scheduler", external_cluster,
                "--resume", "--json", "--quiet")
    summary = json.loads(proc.stdout)
    assert summary["skipped"] == len(partial)
    assert summary["processed"] == len(survey[1]) - len(partial)
    _assert_same_rows(read_rows(out), survey[2])


def test_long_table_csv_input_serial_with_json(tmp_path):
    ids, times, values, errors = make_objects(6, 50, seed=3)
    path = tmp_path / "table.csv"
    with open(path, "w") as fh:
        fh.write("source_id,mjd,mag,mag_err\n")
        for oid, t, y, e in zip(ids, times, values, errors):
            for row in zip(t, y, e):
                fh.write(f"{oid},{float(row[0])!r},{float(row[1])!r},{float(row[2])!r}\n")
    out = tmp_path / "table.h5"
    proc = _run("survey", path, "--out", out, "--workers", "0", "--json", "--grid-step", "10")
    summary = json.loads(proc.stdout)
    assert summary["processed"] == 6 and summary["by_status"]["ok"] == 6
    rows = read_rows(out)
    for oid, t, y, e in zip(ids, times, values, errors):
        ref = fit_object(t, y, e, model_spec="matern32").result
        assert rows[oid].params == pytest.approx(ref.params, rel=1e-10)
    t_grid, _mean, _std = ResultStore.read_prediction(out, ids[0])
    assert np.allclose(np.diff(t_grid), 10.0)


def test_progress_bar_and_summary_then_quiet_with_a_model_file(tmp_path):
    path = tmp_path / "small.h5"
    write_test_survey(path, 8, 40, malformed=False)
    loud = _run("survey", path, "--out", tmp_path / "a.h5", "-w", "0")
    assert "obj/s" in loud.stderr  # tqdm's rate
    assert "by status: ok 8" in loud.stdout and "median fit time" in loud.stdout
    # Quiet, with the model from a TOML file and the noise switched off on the command line.
    model = tmp_path / "model.toml"
    model.write_text('[[term]]\nkernel = "matern32"\nscale = { value = 10.0, bounds = [1, 100] }\n'
                     '\n[[term]]\nkernel = "matern12"\n')
    out = tmp_path / "b.h5"
    quiet = _run("survey", path, "--out", out, "-w", "0", "--quiet", "--model-file", model,
                 "--noise", "none")
    assert quiet.stdout == "" and "obj/s" not in quiet.stderr
    table = ResultStore.read(out)
    assert table.param_names == ["matern32.amplitude", "matern32.scale", "matern12.amplitude",
                                 "matern12.scale", "mean"]
    assert table.config["model"].startswith("matern32(scale=10 in [1, 100]) + matern12")
    assert "noise=none" in table.config["model"]


def test_bad_specification_exits_2_with_a_caret(tmp_path):
    path = tmp_path / "small.h5"
    write_test_survey(path, 2, 20, malformed=False)
    proc = _run("survey", path, "--out", tmp_path / "r.h5", "-w", "0",
                "--model", "matern32(scale 20)", check=False)
    assert proc.returncode == 2
    lines = proc.stderr.splitlines()
    i = next(k for k, line in enumerate(lines) if "expected '='" in line)
    assert lines[i + 1] == "    matern32(scale 20)"
    assert lines[i + 2] == "    " + " " * 15 + "^"
    assert not (tmp_path / "r.h5").exists()


def test_fit_command_streams_the_grid(tmp_path):
    ids, times, values, errors = make_objects(1, 3000, seed=9)
    series = tmp_path / "long.npz"
    np.savez(series, t=times[0], y=values[0], err=errors[0])
    out = tmp_path / "fit.h5"
    proc = _run("fit", series, "--out", out, "--grid-count", "5000", "--chunk", "1024",
                "--json")
    report = json.loads(proc.stdout)
    assert report["result"]["status"] == "ok" and report["grid_points"] == 5000
    assert "predict" in proc.stderr and "eval" in proc.stderr  # both progress bars
    ref = fit_object(times[0], values[0], errors[0], model_spec="matern32").result
    stored = read_rows(out)["long"]
    assert stored.params == pytest.approx(ref.params, rel=1e-10)
    grid = read_grid(report["prediction_out"])
    assert len(grid) == 5000 and grid.start == times[0].min() and grid.stop == times[0].max()


def test_fit_command_reads_one_object_of_a_survey(tmp_path):
    path = tmp_path / "small.h5"
    ids = write_test_survey(path, 3, 60, malformed=False)
    out = tmp_path / "one.h5"
    proc = _run("fit", path, "--id", ids[1], "--out", out, "--json", "-q")
    report = json.loads(proc.stdout)
    assert report["result"]["id"] == ids[1] and report["prediction_out"] is None
    missing = _run("fit", path, "--out", tmp_path / "x.h5", check=False)
    assert missing.returncode == 2 and "--id ID" in missing.stderr
