"""Crash safety: writers killed with SIGKILL at random moments (guarantees: docs/layouts.md).

Correctness source: the guarantee stated in docs/layouts.md ("every batch
whose flush() returned is readable after a kill; a resumed run loses and
duplicates nothing"), checked against what the killed child reported; the
atomicity of ``os.replace`` is POSIX rename(2) semantics.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np

from longwave.storage import ResultStore, SurveyFile, write_survey

N_OBJECTS = 300

# The child appends results in random-sized batches, flushing explicitly and
# printing each flushed id only after flush() returned; merges happen every
# few parts, so kills land in appends, part writes, merges and the final close.
CHILD = textwrap.dedent("""
    import random, sys
    import numpy as np
    from longwave.storage import ObjectResult, ResultStore
    path, n, seed = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    rnd = random.Random(seed)
    store = ResultStore(path, ["a"], {"run": "crash-test"}, resume=True,
                        flush_every=10**6, merge_every=rnd.randint(1, 4))
    done = store.done_ids()
    print("ready", flush=True)
    pending = []
    for i in range(n):
        oid = f"obj-{i:04d}"
        if oid in done:
            continue
        if i % 3 == 0:
            t = np.linspace(0.0, 1.0, 50 + i)
            store.append_prediction(oid, t, t * i, t + i)
        store.append(ObjectResult(id=oid, status="ok", n=i, params={"a": 0.5 * i}))
        pending.append(oid)
        if rnd.random() < 0.25:
            store.flush()
            print("flushed", " ".join(pending), flush=True)
            pending = []
    store.close()
    print("closed", flush=True)
""")


def _check_consistent(path, flushed):
    table = ResultStore.read(path)
    ids = table.id.tolist()
    assert len(ids) == len(set(ids)), "duplicated rows"
    assert flushed <= set(ids), f"lost flushed rows: {sorted(flushed - set(ids))[:5]}"
    np.testing.assert_array_equal(table.params["a"], 0.5 * table.n)
    for oid in ids:
        i = int(oid.split("-")[1])
        assert table.n[ids.index(oid)] == i
    return table


def test_result_store_survives_sigkill_and_resumes_exactly(tmp_path):
    script = tmp_path / "child.py"
    script.write_text(CHILD)
    path = tmp_path / "results.h5"
    rng = np.random.default_rng(20240604)
    flushed: set[str] = set()
    kills = 0
    for round_no in range(40):
        if kills >= 6:
            break
        proc = subprocess.Popen([sys.executable, str(script), str(path), str(N_OBJECTS),
                                 str(round_no)], stdout=subprocess.PIPE, text=True)
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(rng.uniform(0.0, 0.4))
        alive = proc.poll() is None
        os.kill(proc.pid, signal.SIGKILL)
        out, _ = proc.communicate(timeout=30)
        for line in out.splitlines():
            if line.startswith("flushed"):
                flushed.update(line.split()[1:])
        if alive and "closed" not in out:
            kills += 1
        # The file opens after every kill and holds every flushed batch.
        _check_consistent(path, flushed)
    assert kills >= 5, f"only {kills} kills landed while the writer ran"
    # A last, uninterrupted resume completes the survey: nothing lost, nothing twice.
    done = subprocess.run([sys.executable, str(script), str(path), str(N_OBJECTS), "99"],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    table = _check_consistent(path, flushed)
    assert sorted(table.id.tolist()) == [f"obj-{i:04d}" for i in range(N_OBJECTS)]
    assert table.merged and not (tmp_path / "results.h5.journal").exists()
    assert not list(tmp_path.glob(".results.h5.*.tmp"))  # interrupted merges cleaned up
    for i in (0, 3, 297):
        t, mean, std = ResultStore.read_prediction(path, f"obj-{i:04d}")
        np.testing.assert_array_equal(mean, t * i)
        np.testing.assert_array_equal(std, t + i)


SURVEY_CHILD = textwrap.dedent("""
    import sys
    import numpy as np
    from longwave.storage import SurveyWriter
    rng = np.random.default_rng(1)
    with SurveyWriter(sys.argv[1], has_err=False, overwrite=True, buffer_points=5000) as w:
        print("ready", flush=True)
        for i in range(10**6):
            w.add(f"x{i}", rng.random(100), rng.random(100))
""")


def test_killed_survey_conversion_leaves_existing_file_intact(tmp_path):
    path = tmp_path / "survey.h5"
    write_survey(path, ["old"], [np.arange(4.0)], [np.ones(4)])
    before = path.read_bytes()
    script = tmp_path / "child.py"
    script.write_text(SURVEY_CHILD)
    proc = subprocess.Popen([sys.executable, str(script), str(path)], stdout=subprocess.PIPE,
                            text=True)
    assert proc.stdout.readline().strip() == "ready"
    time.sleep(0.5)
    os.kill(proc.pid, signal.SIGKILL)
    proc.communicate(timeout=30)
    assert path.read_bytes() == before
    with SurveyFile(path) as sf:
        assert sf.ids.tolist() == ["old"]


def test_finished_files_get_the_permissions_of_any_new_file(tmp_path):
    # Source: POSIX open(2): a new file gets mode 0666 masked by the umask (common
    # practice); the temporary file behind an atomic write must not stay private.
    import os
    import stat

    from longwave.storage import _h5

    old = os.umask(0o027)
    try:
        with _h5.atomic_path(tmp_path / "out.h5", overwrite=False) as tmp:
            with _h5.open_h5(tmp, "w") as f:
                f["x"] = [1.0]
        plain = tmp_path / "plain.txt"
        plain.write_text("x")
    finally:
        os.umask(old)
    got = stat.S_IMODE((tmp_path / "out.h5").stat().st_mode)
    assert got == stat.S_IMODE(plain.stat().st_mode) == 0o640
