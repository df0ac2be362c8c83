"""Run the survey on an existing Dask cluster.

With ``--scheduler tcp://HOST:PORT`` the survey runs on that cluster. Without
it, this script first starts a scheduler and one worker process as
subprocesses on 127.0.0.1 (what you would run on your own machines, with the
commands printed below), runs the survey there, and stops them again.

Run: ``python examples/survey_on_cluster.py [--scheduler ADDRESS] [--out DIR]`` (about 30 s).
"""

import argparse
import json
import subprocess
import sys
import tempfile
import time
from contextlib import ExitStack
from pathlib import Path

from distributed import Client

from longwave.demo.files import simulate_survey_file
from longwave.storage import ResultStore
from longwave.survey import run_survey


def start_local_cluster(stack: ExitStack, folder: Path) -> str:
    """A scheduler and a two-process worker on 127.0.0.1; returns the scheduler address."""
    info = folder / "scheduler.json"
    scheduler = [sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
                 "--port", "0", "--no-dashboard", "--scheduler-file", str(info)]
    worker = [sys.executable, "-m", "distributed.cli.dask_worker", "--scheduler-file",
              str(info), "--nworkers", "2", "--nthreads", "1", "--host", "127.0.0.1",
              "--no-dashboard"]
    print("starting:", " ".join(scheduler[2:]), "\nstarting:", " ".join(worker[2:]))
    for cmd in (scheduler, worker):
        log = stack.enter_context(open(folder / f"{cmd[3].rsplit('_', 1)[-1]}.log", "w"))
        proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT)
        stack.callback(_stop, proc)
        if cmd is scheduler:
            deadline = time.monotonic() + 30
            while not info.exists() or not info.read_text().strip():
                if proc.poll() is not None or time.monotonic() > deadline:
                    raise RuntimeError(f"the scheduler did not start; see {log.name}")
                time.sleep(0.2)
    address = json.loads(info.read_text())["address"]
    with Client(address, timeout=30) as client:  # the survey starts with every worker there
        client.wait_for_workers(2, timeout=60)
    return address


def _stop(proc: subprocess.Popen) -> None:
    proc.terminate()
    try:
        proc.wait(timeout=15)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scheduler", default=None, help="tcp://HOST:PORT of a scheduler")
    parser.add_argument("--out", default=None, help="folder for the files (default: temp)")
    args = parser.parse_args()
    folder = Path(args.out or tempfile.mkdtemp())
    folder.mkdir(parents=True, exist_ok=True)
    survey = simulate_survey_file(folder / "survey.h5", objects=100, seed=8, overwrite=True)
    print(survey.format())
    with ExitStack() as stack:
        address = args.scheduler or start_local_cluster(stack, folder)
        print(f"scheduler: {address}")
        summary = run_survey(survey.path, folder / "results.h5", model="matern32", clip=5.0,
                             scheduler=address, overwrite=True, progress=False)
    print(summary.format())
    table = ResultStore.read(folder / "results.h5")
    assert len(table) == survey.objects and summary.by_status["ok"] >= 0.9 * survey.objects


if __name__ == "__main__":
    main()
