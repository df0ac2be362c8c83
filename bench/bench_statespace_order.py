"""State dimension against accuracy and cost, and the gain from cached transitions.

Usage::

    python bench/bench_statespace_order.py            # n = 4000 points (about a minute)
    python bench/bench_statespace_order.py --quick    # n = 1000

Part 1: a quasi-periodic kernel, Matérn-3/2 x Periodic (period 1, scale 0.5,
so the Fourier form needs several harmonics), with orders 1 to 12 of the
periodic expansion; the state dimension is ``2 (2 order + 1)``. For each
order: the reported covariance error bound (relative to the variance), the
log-likelihood error against the order-20 form (a reference exact to 1e-16),
and the cost per point of one log-likelihood-plus-gradient evaluation with
the dense loops (``Kalman``) and the block loops (``BlockKalman``), with
their ratio. Part 2: ``BlockKalman`` with a transition cache of 8 slots,
of 1 slot (the previous step only) and none, on a regular cadence with a
Julian-date offset (its steps round to a few distinct doubles), the same with
20 % of the points missing, and an irregular cadence (no step repeats: the
cache can only cost its look-up).

Timings are the best of ``--repeat`` interleaved runs, measured side by side
in one process because the machine is shared and noisy; read the ratios.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from longwave import Model, Series, log_marginal_likelihood
from longwave.kernels import Matern32, Periodic
from longwave.methods import Kalman
from longwave.methods.kalman_blocks import BlockKalman


def quasi_periodic(order):
    return Matern32(amplitude=1.0, scale=5.0) * Periodic(
        amplitude=1.0, period=1.0, scale=0.5, order=order
    )


def best_times(calls, repeat):
    """Best wall time of each zero-argument callable, interleaved ``repeat`` times."""
    best = [np.inf] * len(calls)
    for _ in range(repeat):
        for i, call in enumerate(calls):
            t0 = time.perf_counter()
            call()
            best[i] = min(best[i], time.perf_counter() - t0)
    return best


def draw(t, rng):
    """A smooth quasi-periodic signal plus noise (not a prior draw: any data will do)."""
    envelope = np.exp(-((t % 7.0) - 3.5) ** 2 / 8)
    y = np.sin(2 * np.pi * t) * envelope + 0.1 * rng.standard_normal(t.size)
    return Series(t, y, err=0.1)


def order_table(n, repeat, rng):
    t = np.sort(rng.uniform(0.0, n / 20.0, n))
    series = draw(t, rng)
    ref = log_marginal_likelihood(Model(quasi_periodic(20), excess_noise=0.05), series,
                                  method=BlockKalman())
    n_free = len(Model(quasi_periodic(1), excess_noise=0.05).free_names)
    print(f"Part 1: Matérn-3/2 x Periodic(scale 0.5), n = {n}, lml + gradient "
          f"({n_free} parameters)")
    print(f"{'order':>5} {'d':>4} {'error bound':>12} {'|lml err|':>10} "
          f"{'dense us/pt':>12} {'block us/pt':>12} {'dense/block':>11}")
    for order in [1, 2, 3, 4, 6, 8, 10, 12]:
        model = Model(quasi_periodic(order), excess_noise=0.05)
        kernel = model.kernel
        lml = log_marginal_likelihood(model, series, method=BlockKalman())
        dense, block = best_times([
            lambda m=model: log_marginal_likelihood(m, series, method=Kalman(), gradient=True),
            lambda m=model: log_marginal_likelihood(m, series, method=BlockKalman(),
                                                    gradient=True),
        ], repeat)
        rel = kernel.covariance_error_bound() / kernel.variance()
        print(f"{order:>5} {kernel.state_space().dim:>4} {rel:>12.2e} {abs(lml - ref):>10.2e} "
              f"{1e6 * dense / n:>12.2f} {1e6 * block / n:>12.2f} {dense / block:>11.2f}")


def cache_table(n, repeat, rng):
    print(f"\nPart 2: transition cache, BlockKalman, order 6 (d = 26), n = {n}")
    print(f"{'cadence':>18} {'gradient':>9} {'8 slots':>9} {'1 slot':>9} {'off':>9} "
          f"{'off/8 slots':>12} {'off/1 slot':>11}   (us per point)")
    model = Model(quasi_periodic(6), excess_noise=0.05)
    step = 0.05
    regular = 2.46e6 + np.arange(n) * step  # differences round to a few distinct doubles
    gappy = regular[rng.uniform(size=n) > 0.2]  # 20 % missing: steps of 1, 2, 3... x step
    irregular = np.sort(rng.uniform(0.0, n * step, n))  # no step repeats
    for name, t in [("regular+offset", regular), ("regular, 20% gaps", gappy),
                    ("irregular", irregular)]:
        series = draw(t, rng)
        for gradient in (False, True):
            times = best_times([
                lambda s=series, g=gradient, c=c: log_marginal_likelihood(
                    model, s, method=BlockKalman(cache=c), gradient=g)
                for c in (8, 1, 0)
            ], repeat)
            us = [1e6 * x / series.n for x in times]
            print(f"{name:>18} {str(gradient):>9} {us[0]:>9.2f} {us[1]:>9.2f} {us[2]:>9.2f} "
                  f"{times[2] / times[0]:>12.2f} {times[2] / times[1]:>11.2f}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="n = 1000 instead of 4000")
    parser.add_argument("--repeat", type=int, default=3, help="interleaved runs (best kept)")
    args = parser.parse_args(argv)
    n = 1000 if args.quick else 4000
    rng = np.random.default_rng(2026)
    # compile every loop once before timing
    warm = draw(np.arange(20) * 0.1, rng)
    for method in (Kalman(), BlockKalman(), BlockKalman(cache=0)):
        log_marginal_likelihood(Model(quasi_periodic(1), excess_noise=0.05), warm,
                                method=method, gradient=True)
        log_marginal_likelihood(Model(quasi_periodic(1), excess_noise=0.05), warm, method=method)
    order_table(n, args.repeat, rng)
    cache_table(4 * n, args.repeat, rng)


if __name__ == "__main__":
    main()
