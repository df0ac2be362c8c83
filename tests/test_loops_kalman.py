"""Compiled loops (``longwave._loops``) against their plain-numpy twins.

Source of truth: ``tests/reference_kalman.py``, written from the textbook
equations (Särkkä 2013, Theorems 4.2 and 8.2; Hartikainen & Särkkä 2010).
The two differ only in the order of floating-point operations, so they must
agree to 1e-12 relative: elementwise, with an absolute floor of 1e-12 times
the array's scale (``Pinf`` for covariances, the prior standard deviation for
means), since entries that should be zero are only zero to round-off.
"""

from __future__ import annotations

import numpy as np
import pytest
import reference_kalman as ref
from conftest import hard_series, kernel_amplitude, kernel_scale

from longwave import Model
from longwave._loops import kalman as loops
from longwave._loops.sample import sample_states

RTOL = 1e-12


def close(actual, expected, scale):
    np.testing.assert_allclose(actual, expected, rtol=RTOL, atol=RTOL * scale)


def loop_inputs(kernel, series, mean=0.2, excess=0.15):
    """Arguments of the loops for a model with free kernel parameters, mean and excess noise.

    Built here rather than through ``methods.Kalman`` so the layout of
    ``sens`` is checked against its documentation, not against its one caller.
    """
    model = Model(kernel, mean=mean, excess_noise=excess)
    ss = kernel.state_space()
    p_kernel, p = ss.n_params, ss.n_params + 2

    def pad(arr):
        out = np.zeros((p,) + arr.shape[1:])
        out[:p_kernel] = arr
        return out

    trans = (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef)
    dtrans = (pad(ss.d_rate), pad(ss.d_freq), pad(ss.d_cos_coef), pad(ss.d_sin_coef))
    dnoise = np.zeros(p)
    dnoise[-1] = 2 * excess**2  # d(excess^2) / d log(excess)
    dmean = np.zeros(p)
    dmean[p_kernel] = 1.0
    dynamic = np.arange(p) < p_kernel
    sens = (dtrans, pad(ss.dPinf), dnoise, dmean, dynamic)
    resid = series.y - mean
    noise = model.noise_variance(series.err)
    return series.t, resid, noise, ss.H, ss.Pinf, trans, sens


@pytest.fixture
def case(kernel, rng):
    series = hard_series(rng, 300, kernel_scale(kernel), kernel_amplitude(kernel))
    return kernel, series, loop_inputs(kernel, series)


def random_transition(rng, n_terms=2, n_pow=3, d=3, p=2, rotating=True):
    rate = rng.uniform(0.1, 2.0, n_terms)
    freq = rng.uniform(0.5, 3.0, n_terms) if rotating else np.zeros(n_terms)
    if rotating:
        freq[0] = 0.0  # one non-rotating term exercises the shortcut in the loop
    shape = (n_terms, n_pow, d, d)
    trans = (rate, freq, rng.standard_normal(shape), rng.standard_normal(shape))
    dtrans = (
        rng.standard_normal((p, n_terms)),
        rng.standard_normal((p, n_terms)),
        rng.standard_normal((p,) + shape),
        rng.standard_normal((p,) + shape),
    )
    return trans, dtrans


DTS = [0.0, 1e-9, 0.37, 1.0, 4.2, 60.0]


@pytest.mark.parametrize("rotating", [True, False], ids=["rotating", "damped"])
def test_transition_equals_twin(rng, rotating):
    # source: tests/reference_kalman.transition (closed form of kernels/statespace.py)
    trans, _ = random_transition(rng, rotating=rotating)
    out = np.empty((3, 3))
    for dt in DTS:
        loops.transition(dt, *trans, out)
        expected = ref.transition(dt, *trans)
        close(out, expected, np.abs(expected).max())


@pytest.mark.parametrize("rotating", [True, False], ids=["rotating", "damped"])
def test_transition_grad_equals_twin(rng, rotating):
    # source: tests/reference_kalman.transition_grad (product rule on the closed form)
    trans, dtrans = random_transition(rng, rotating=rotating)
    out = np.empty((3, 3))
    for dt in DTS:
        for q in range(2):
            loops.transition_grad(dt, trans, dtrans, q, out)
            expected = ref.transition_grad(dt, trans, dtrans, q)
            close(out, expected, max(np.abs(expected).max(), 1e-300))


def test_transition_at_zero_is_identity(kernel):
    # source: A(0) = expm(0) = I (definition of the transition, common practice)
    ss = kernel.state_space()
    out = np.empty((ss.dim, ss.dim))
    loops.transition(0.0, ss.rate, ss.freq, ss.cos_coef, ss.sin_coef, out)
    np.testing.assert_array_equal(out, np.eye(ss.dim))


def test_filter_loglik_equals_twin(case):
    # source: tests/reference_kalman.filter_loglik (prediction-error decomposition)
    _, _, (t, resid, noise, H, Pinf, trans, _) = case
    value = loops.filter_loglik(t, resid, noise, H, Pinf, trans)
    expected = ref.filter_loglik(t, resid, noise, H, Pinf, trans)
    assert value == pytest.approx(expected, rel=RTOL)


def test_filter_loglik_grad_equals_twin(case):
    # source: tests/reference_kalman.filter_loglik_grad (differentiated filter equations)
    _, _, args = case
    value, grad = loops.filter_loglik_grad(*args)
    expected_value, expected_grad = ref.filter_loglik_grad(*args)
    assert value == pytest.approx(expected_value, rel=RTOL)
    close(grad, expected_grad, np.abs(expected_grad).max())
    # and the value is the same as the value-only loop's
    assert value == pytest.approx(loops.filter_loglik(*args[:-1]), rel=RTOL)


def test_filter_store_equals_twin(case):
    # source: tests/reference_kalman.filter_store (Särkkä 2013, Theorem 4.2)
    kernel, series, (t, resid, noise, H, Pinf, trans, _) = case
    n, d = t.size, H.size
    mf, Pf = np.empty((n, d)), np.empty((n, d, d))
    loops.filter_store(t, resid, noise, H, Pinf, trans, mf, Pf)
    mf_ref, Pf_ref = ref.filter_store(t, resid, noise, H, Pinf, trans)
    close(mf, mf_ref, np.sqrt(np.abs(np.diag(Pinf))).max())
    close(Pf, Pf_ref, np.abs(Pinf).max())


def compiled_filter_and_smoother(t, resid, noise, H, Pinf, trans):
    n, d = t.size, H.size
    filt = (np.empty((n, d)), np.empty((n, d, d)))
    smoothed = (np.empty((n, d)), np.empty((n, d, d)))
    loops.filter_store(t, resid, noise, H, Pinf, trans, *filt)
    loops.smooth(t, Pinf, trans, *filt, *smoothed)
    return filt, smoothed


def test_smooth_equals_twin(case):
    # source: tests/reference_kalman.smooth (RTS recursion, Särkkä 2013, Theorem 8.2),
    # fed the same filter output so only the smoother is compared
    _, _, (t, resid, noise, H, Pinf, trans, _) = case
    filt, (ms, Ps) = compiled_filter_and_smoother(t, resid, noise, H, Pinf, trans)
    ms_ref, Ps_ref = ref.smooth(t, Pinf, trans, *filt)
    close(ms, ms_ref, np.sqrt(np.abs(np.diag(Pinf))).max())
    close(Ps, Ps_ref, np.abs(Pinf).max())


def test_predict_between_equals_twin(case):
    # source: tests/reference_kalman.predict_between (RTS on the augmented time grid)
    kernel, _, (t, resid, noise, H, Pinf, trans, _) = case
    filt, smoothed = compiled_filter_and_smoother(t, resid, noise, H, Pinf, trans)
    scale = kernel_scale(kernel)
    gaps = np.flatnonzero(np.diff(t) > 100 * scale)
    tq = np.concatenate([
        t[:7], t[-3:],                                # exactly at data times (and duplicates)
        t[gaps] + 0.5 * np.diff(t)[gaps],             # middle of the long gaps
        t[gaps] + 0.1 * scale,                        # just after a gap opens
        [t[0] - 3 * scale, t[0] - 1e6, t[-1] + 2 * scale, t[-1] + 1e6],
        np.linspace(t[0], t[-1], 200),
    ])
    idx = np.searchsorted(t, tq, side="right") - 1
    mean, var = np.empty(tq.size), np.empty(tq.size)
    loops.predict_between(tq, idx, t, H, Pinf, trans, filt, smoothed, mean, var)
    mean_ref, var_ref = ref.predict_between(tq, t, H, Pinf, trans, filt, smoothed)
    close(mean, mean_ref, kernel_amplitude(kernel))
    close(var, var_ref, kernel.variance())


@pytest.mark.parametrize("duplicates", [False, True], ids=["distinct", "repeated"])
@pytest.mark.parametrize(
    "cadence, rtol",
    # Steps of at least a tenth of the length scale keep Q(dt) well conditioned, so
    # its square root is determined to round-off and the loops agree to RTOL.
    # Exponential steps include tiny ones, where Q's smallest eigenvalues
    # (~ (dt/scale)^(2d-1) of the largest) sink to the round-off floor; a matrix
    # square root then is only determined to sqrt(machine epsilon) ~ 1.5e-8
    # (Higham 2008, "Functions of Matrices", sec. 6.1 on the condition of the
    # square root), so that case is checked at 1e-7.
    [("well-conditioned", RTOL), ("tiny-steps", 1e-7)],
)
def test_sample_states_equals_twin(kernel, rng, duplicates, cadence, rtol):
    # source: tests/reference_kalman.sample_states (discrete model, Hartikainen & Särkkä 2010)
    ss = kernel.state_space()
    scale = kernel_scale(kernel)
    if cadence == "tiny-steps":
        steps = rng.exponential(scale / 3, 400)
    else:
        steps = rng.uniform(0.1, 1.0, 400) * scale
    t = np.cumsum(steps)
    if duplicates:
        t[1::7] = t[0::7][: t[1::7].size]
        t.sort()
    z = rng.standard_normal((t.size, ss.dim))
    trans = (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef)
    out = np.empty(t.size)
    sample_states(t, ss.H, ss.Pinf, trans, z, out)
    expected = ref.sample_states(t, ss.H, ss.Pinf, trans, z)
    amplitude = kernel_amplitude(kernel)
    np.testing.assert_allclose(out, expected, rtol=rtol, atol=rtol * amplitude)
