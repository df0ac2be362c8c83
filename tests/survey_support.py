"""Helpers of the survey tests: seeded survey files, result reading, ports and processes.

Objects are Matérn-3/2 draws with excess noise (longwave.simulate), short so
that a few hundred fit in seconds; a handful of malformed objects is mixed
in, each with the reason the pipeline must record (longwave.survey.validate).
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time

import numpy as np

import longwave as lw
from longwave.kernels import Matern32
from longwave.simulate import simulate_series
from longwave.storage import ResultStore, write_survey

# id -> (t, y, err, expected status, words of the expected message)
MALFORMED = {
    "bad-nan": ([0.0, 1.0, 2.0, 3.0], [1.0, np.nan, 0.5, 0.2], [0.1] * 4, "bad_input",
                "y has 1 non-finite"),
    "bad-zero-err": ([0.0, 1.0, 2.0, 3.0], [1.0, 0.3, 0.5, 0.2], [0.1, 0.0, 0.1, 0.1],
                     "bad_input", "err has 1 value(s) <= 0"),
    "bad-one-point": ([5.0], [1.0], [0.1], "bad_input", "only 1 point(s)"),
    "bad-empty": ([], [], [], "bad_input", "only 0 point(s)"),
    "odd-unsorted-duplicates": ([3.0, 1.0, 2.0, 2.0, 0.0, 4.0, 6.0, 5.0],
                                [0.2, 0.1, 0.4, 0.3, 0.0, 0.5, 0.1, 0.2], [0.1] * 8, "ok",
                                "not sorted"),
}


def make_objects(n_objects: int, n_points: int, seed: int = 0):
    """``(ids, times, values, errors)`` of simulated objects, seeded per object."""
    ids, times, values, errors = [], [], [], []
    for k in range(n_objects):
        rng = np.random.default_rng([seed, k])
        t = np.sort(rng.uniform(0.0, 300.0, n_points))
        truth = lw.Model(Matern32(amplitude=float(rng.uniform(0.5, 2.0)),
                                  scale=float(rng.uniform(3.0, 30.0))),
                         mean=float(rng.normal()), excess_noise=0.05)
        series, _ = simulate_series(truth, t, err=0.1, rng=rng)
        ids.append(f"obj{k:05d}")
        times.append(series.t)
        values.append(series.y)
        errors.append(series.err)
    return ids, times, values, errors


def write_test_survey(path, n_objects: int, n_points: int, *, seed: int = 0,
                      malformed: bool = True) -> list[str]:
    """Write a survey file; returns all ids (malformed ones interleaved)."""
    ids, times, values, errors = make_objects(n_objects, n_points, seed)
    if malformed:
        for j, (oid, (t, y, err, _s, _w)) in enumerate(MALFORMED.items()):
            at = (j + 1) * max(n_objects // (len(MALFORMED) + 1), 1)
            ids.insert(at, oid)
            times.insert(at, np.asarray(t, float))
            values.insert(at, np.asarray(y, float))
            errors.insert(at, np.asarray(err, float))
    write_survey(path, ids, times, values, errors)
    return ids


def read_rows(path) -> dict:
    """Result store rows by id (raises if an id appears twice)."""
    table = ResultStore.read(path)
    rows = {}
    for i in range(len(table)):
        row = table.row(i)
        assert row.id not in rows, f"id {row.id} written twice"
        rows[row.id] = row
    return rows


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start(args, **options) -> subprocess.Popen:
    """A subprocess in its own session, so that it and its children can be killed together."""
    return subprocess.Popen(args, start_new_session=True, **options)


def stop(proc: subprocess.Popen, timeout: float = 10.0) -> None:
    """Terminate a process started by :func:`start` and everything in its session."""
    if proc.poll() is None:
        try:
            os.killpg(proc.pid, signal.SIGTERM)
        except ProcessLookupError:
            pass
        try:
            proc.wait(timeout)
        except subprocess.TimeoutExpired:
            pass
    # Children (dask worker processes) may outlive their parent: kill the session.
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass
    proc.wait(timeout)


def wait_for_port(port: int, timeout: float = 30.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
            if s.connect_ex(("127.0.0.1", port)) == 0:
                return
        time.sleep(0.1)
    raise TimeoutError(f"nothing listens on 127.0.0.1:{port} after {timeout} s")


def longwave_cmd(*args) -> list[str]:
    return [sys.executable, "-m", "longwave", *map(str, args)]
