"""How long the second thread of a split posterior waits before it starts.

Usage::

    python bench/bench_thread_wake.py [--trials 60] [--work-ms 1.0]

``methods.kalman_split.in_two_threads`` runs two compiled (nogil) loops of
``--work-ms`` each, the way a split posterior runs its halves, with a pause
of 0, 0.1, 1 or 10 ms before each call (the other core idle that long, as
between a user's calls); the cases take turns in blocks of 10 calls in the
same run. Printed: the median and 90th percentile of
the delay from the call to the start of the second loop, and the call's
total time against the work of one loop. On a virtual machine an idle
virtual CPU can take about a millisecond to wake, which at n = 1e5 is as
long as a half's work (DEVELOPERS.md, "Performance notes").
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from numba import njit

from longwave.methods.kalman_split import in_two_threads


@njit(nogil=True, cache=True)
def _work(k):
    x = 0.0
    for i in range(k):
        x += np.sqrt(i * 1.0)
    return x


def _steps_for(seconds):
    _work(10)
    t0 = time.perf_counter()
    _work(1_000_000)
    return max(1, int(1_000_000 * seconds / (time.perf_counter() - t0)))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=60, help="calls per case")
    parser.add_argument("--work-ms", type=float, default=1.0, help="work of each loop")
    args = parser.parse_args(argv)
    k = _steps_for(args.work_ms / 1e3)
    pauses_ms = (0.0, 0.1, 1.0, 10.0)
    delays = {p: [] for p in pauses_ms}
    totals = {p: [] for p in pauses_ms}
    block = 10  # trials of one case in a row; the cases take turns, block by block
    for _ in range(max(1, args.trials // block)):
        for pause in pauses_ms:
            for _ in range(block):
                if pause:
                    time.sleep(pause / 1e3)
                start = {}

                def second(start=start):
                    start["t"] = time.perf_counter()
                    return _work(k)

                t0 = time.perf_counter()
                in_two_threads(lambda: _work(k), second)
                totals[pause].append(time.perf_counter() - t0)
                delays[pause].append(start["t"] - t0)
    print(f"two loops of {args.work_ms:.2f} ms each, {len(delays[0.0])} calls per case")
    for pause in pauses_ms:
        d = np.array(delays[pause]) * 1e3
        tot = np.median(totals[pause]) * 1e3
        print(f"  pause of {pause:4.1f} ms before each call: second loop starts after "
              f"{np.median(d):.3f} ms (median), {np.percentile(d, 90):.3f} ms (90th pct); "
              f"call {tot:.3f} ms = {tot / args.work_ms:.2f}x one loop")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
