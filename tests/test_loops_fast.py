"""The loops specialised to d <= 3 (``_loops/kalman_fast.py``) against the general loops.

Source of truth: the general loops of ``_loops/kalman.py`` (themselves checked
against the plain-numpy twins of ``tests/reference_kalman.py`` in
``test_loops_kalman.py``), run on the same inputs. The specialised loops use
other, algebraically equal formulas (covariance carried as ``P - Pinf``,
row 0 updated as ``P_0b r / s``, fused multiply-adds, a running-product
log-determinant, a polynomial exponential), so they agree to rounding:
1e-10 relative, with an absolute floor of 1e-10 times the array's scale.
Block sizes of 1, 7 and 512 steps exercise the block boundaries.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import hard_series, kernel_amplitude, kernel_scale

from longwave import Model, log_marginal_likelihood, posterior
from longwave._loops import _generate_fast, blocked_transition
from longwave._loops import kalman as loops
from longwave.kernels import Matern12, Matern32, Matern52, Oscillator
from longwave.kernels.statespace import closed_transition
from longwave.methods import Exact, Kalman
from longwave.methods.kalman import fast_form

RTOL = 1e-10

FAST_CASES = {
    "matern12": lambda: Matern12(amplitude=1.3, scale=7.0),
    "matern32": lambda: Matern32(amplitude=0.8, scale=5.0),
    "matern52": lambda: Matern52(amplitude=1.1, scale=9.0),
    # two terms, H = (1, 1): basis change and block-filled transitions
    "matern12+matern12": lambda: Matern12(amplitude=1.0, scale=3.0)
    + Matern12(amplitude=0.5, scale=20.0),
    # d = 3, two terms of different degree
    "matern32+matern12": lambda: Matern32(amplitude=1.0, scale=12.0)
    + Matern12(amplitude=0.4, scale=2.0),
    # rotating term
    "oscillator": lambda: Oscillator(amplitude=1.0, frequency=0.2, quality=3.0),
}


def close(actual, expected, scale):
    np.testing.assert_allclose(actual, expected, rtol=RTOL, atol=RTOL * scale)


def test_generated_module_is_current():
    path = _generate_fast.TARGET
    assert path.read_text() == _generate_fast.module_source(), (
        "kalman_fast.py is out of date: run python -m longwave._loops._generate_fast"
    )


def test_exp_block_matches_numpy():
    x = np.concatenate([
        [0.0, -0.0, -1e-300, 1e-300, -1e-9, 1e-9, -707.9, -708.0, 708.0, 709.0],
        np.linspace(-700, 700, 2001),
        -np.random.default_rng(1).exponential(5.0, 1000),
    ])
    work = np.empty((blocked_transition.n_rows(1), x.size))
    work[1] = x
    blocked_transition.exp_block(work, x.size)
    np.testing.assert_allclose(work[blocked_transition.ROW_E], np.exp(x), rtol=5e-16, atol=0)
    # below the normal range the result is exactly zero, never negative or NaN
    work[1, :3] = [-708.5, -745.0, -1e6]
    blocked_transition.exp_block(work, 3)
    np.testing.assert_array_equal(work[blocked_transition.ROW_E, :3], 0.0)


@pytest.fixture(params=sorted(FAST_CASES))
def fast_case(request):
    return request.param


def _dts(rng):
    return np.concatenate([[0.0, 1e-9, 0.37, 1.0, 60.0, 1e4], rng.exponential(2.0, 40)])


def test_block_transitions_match_the_closed_form(fast_case, rng):
    ss = FAST_CASES[fast_case]().state_space()
    d = ss.dim
    trans = (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef)
    dtrans = (ss.d_rate, ss.d_freq, ss.d_cos_coef, ss.d_sin_coef)
    dt = _dts(rng)
    work = np.empty((blocked_transition.n_rows(d), dt.size))
    work[blocked_transition.ROW_DT] = dt
    rows = slice(blocked_transition.ROW_A, blocked_transition.ROW_A + d * d)
    blocked_transition.fill_transition(dt.size, trans, work, blocked_transition.ROW_A)
    close(work[rows].T.reshape(-1, d, d), ss.transition(dt), 1.0)
    grads = ss.transition_grad(dt)
    for q in range(ss.n_params):
        blocked_transition.fill_transition_grad(
            dt.size, trans, dtrans, q, work, blocked_transition.ROW_A
        )
        close(work[rows].T.reshape(-1, d, d), grads[q], np.abs(grads[q]).max())


def _inputs(case, rng, excess=0.15, mean=0.2, free=(True,) * 8):
    """Transformed arrays of one model, for both the general and the specialised loops."""
    kernel = FAST_CASES[case]()
    series = hard_series(rng, 300, kernel_scale(kernel), kernel_amplitude(kernel))
    ss = kernel.state_space()
    form = fast_form(ss)
    assert form is not None
    d, pk = ss.dim, ss.n_params
    p = pk + 2
    keep = np.asarray(free[:p])

    def pad(arr):
        out = np.zeros((p,) + arr.shape[1:])
        out[:pk] = arr
        return np.ascontiguousarray(out[keep])

    dnoise = np.zeros(p)
    dnoise[-1] = 2 * excess**2
    dmean = np.zeros(p)
    dmean[pk] = 1.0
    sens = (
        tuple(pad(a) for a in form.dtrans),
        pad(form.dpinf),
        dnoise[keep],
        dmean[keep],
        (np.arange(p) < pk)[keep],
    )
    H = np.eye(d)[0]
    return series, form, sens, (mean, excess**2), H


@pytest.mark.parametrize("block", [1, 7, 512])
def test_likelihood_and_gradient_match_general_loops(fast_case, rng, block):
    series, form, sens, scal, H = _inputs(fast_case, rng)
    resid = series.y - scal[0]
    noise = series.err**2 + scal[1]
    data = (series.t, series.y, series.err)
    value = loops.filter_loglik(series.t, resid, noise, H, form.pinf, form.trans)
    v_ref, g_ref = loops.filter_loglik_grad(
        series.t, resid, noise, H, form.pinf, form.trans, sens
    )
    p = sens[2].size
    work = np.empty((blocked_transition.n_rows(form.dim, 1 + 4 * ((p + 3) // 4)), block))
    got = form.loop("loglik")(data, scal, form.pinf, form.trans, work)
    v_got, g_got = form.loop("loglik_grad")(data, scal, form.pinf, form.trans, sens, work)
    assert got == pytest.approx(value, rel=RTOL)
    assert v_got == pytest.approx(v_ref, rel=RTOL)
    close(g_got, g_ref, np.abs(g_ref).max())


@pytest.mark.parametrize("free", [(True, False, True, False), (False, False, True, True),
                                  (False,) * 8], ids=["amp+mean", "mean+noise", "none"])
def test_gradient_of_parameter_subsets(rng, free):
    # one lane group partly filled, mean-only and noise-only lanes, no parameters at all
    series, form, sens, scal, H = _inputs("matern32", rng, free=free)
    resid = series.y - scal[0]
    noise = series.err**2 + scal[1]
    v_ref, g_ref = loops.filter_loglik_grad(
        series.t, resid, noise, H, form.pinf, form.trans, sens
    )
    work = form.work(5)
    v, g = form.loop("loglik_grad")(
        (series.t, series.y, series.err), scal, form.pinf, form.trans, sens, work
    )
    assert v == pytest.approx(v_ref, rel=RTOL)
    assert g.shape == g_ref.shape
    close(g, g_ref, np.abs(g_ref).max() if g_ref.size else 1.0)


def test_extreme_innovation_variances_keep_the_log_determinant(rng):
    # noise variances from 1e-150 to 1e150 drive the running product through
    # both flush paths; the general loop takes one log per step
    series, form, sens, scal, H = _inputs("matern32", rng)
    err = 10.0 ** rng.uniform(-75, 75, series.n)
    noise = err**2 + scal[1]
    resid = series.y - scal[0]
    ref = loops.filter_loglik(series.t, resid, noise, H, form.pinf, form.trans)
    got = form.loop("loglik")((series.t, series.y, err), scal, form.pinf, form.trans, form.work())
    assert got == pytest.approx(ref, rel=RTOL)


def _filter_every_state(form, series, scal, work):
    """``(mf, Pf, obs)`` of every point (``refilter`` from the prior: a whole pass)."""
    n, d = series.n, form.dim
    obs, mf, Pf = np.empty((n, d + 2)), np.empty((n, d)), np.empty((n, d, d))
    form.loop("refilter")((series.t, series.y, series.err), scal, form.pinf, form.trans,
                          work, obs, mf, Pf, 0)
    return mf, Pf, obs


def _adjoint_pass(form, t, obs, work):
    n, d = obs.shape[0], form.dim
    lam, Lam = np.zeros((n, d)), np.zeros((n, d, d))
    lam[-1, 0], Lam[-1, 0, 0] = obs[-1, 0], obs[-1, 1]  # v / s and 1 / s of the last point
    form.loop("adjoint")(t, form.pinf, form.trans, work, obs, lam, Lam)
    return lam, Lam


@pytest.mark.parametrize("block", [1, 7, 512])
def test_filter_smoother_and_prediction_match_general_loops(fast_case, rng, block):
    # The adjoint smoother (modified Bryson-Frazier; Bierman 1977) against the
    # general loops' RTS smoother: with A_k from t_k to t_(k+1), the smoothed
    # state is ms_k = mf_k + Pf_k A_k^T u_(k+1), Ps_k = Pf_k - Pf_k A_k^T U_(k+1) A_k Pf_k.
    series, form, _, scal, H = _inputs(fast_case, rng)
    n, d = series.n, form.dim
    t = series.t
    resid = series.y - scal[0]
    noise = series.err**2 + scal[1]
    ref_f = (np.empty((n, d)), np.empty((n, d, d)))
    ref_s = (np.empty((n, d)), np.empty((n, d, d)))
    loops.filter_store(t, resid, noise, H, form.pinf, form.trans, *ref_f)
    loops.smooth(t, form.pinf, form.trans, *ref_f, *ref_s)
    work = np.empty((blocked_transition.n_rows(d, 2), block))
    filt = _filter_every_state(form, series, scal, work)
    lam, Lam = _adjoint_pass(form, t, filt[2], work)
    amp = np.sqrt(form.pinf[0, 0])
    scale = np.abs(form.pinf).max()
    close(filt[0], ref_f[0], amp)
    close(filt[1], ref_f[1], scale)
    np.testing.assert_array_equal(filt[1], np.swapaxes(filt[1], 1, 2))
    np.testing.assert_array_equal(Lam, np.swapaxes(Lam, 1, 2))
    A = closed_transition(*form.trans, np.diff(t))
    pa = np.einsum("kab,kcb->kac", filt[1][:-1], A)  # Pf_k A_k^T
    ms = filt[0].copy()
    ms[:-1] += np.einsum("kab,kb->ka", pa, lam[1:])
    Ps = filt[1].copy()
    Ps[:-1] -= np.einsum("kab,kbc,kdc->kad", pa, Lam[1:], pa)
    close(ms, ref_s[0], amp)
    close(Ps, ref_s[1], scale)
    tq = np.concatenate([t[:30], t[-3:], rng.uniform(t[0] - 50, t[-1] + 50, 700),
                         [t[0] - 1e6, t[-1] + 1e6]])
    rng.shuffle(tq)
    idx = np.searchsorted(t, tq, side="right") - 1
    ref_m, ref_v = np.empty(tq.size), np.empty(tq.size)
    loops.predict_between(tq, idx, t, H, form.pinf, form.trans, ref_f, ref_s, ref_m, ref_v)
    for name in ("predict", "predict_serial"):
        got_m, got_v = np.empty(tq.size), np.empty(tq.size)
        form.loop(name)(tq, idx, t, form.pinf, form.trans, filt[:2], (lam, Lam), got_m, got_v)
        close(got_m, ref_m, amp)
        close(got_v, ref_v, scale)


def test_adjoint_smoother_starts_from_the_adjoint_stored_at_the_end(rng):
    # a block of a posterior starts from a checkpoint: two windows give one pass
    series, form, _, scal, H = _inputs("matern52", rng)
    n, d = series.n, form.dim
    t = series.t
    filt = _filter_every_state(form, series, scal, form.work())
    whole = _adjoint_pass(form, t, filt[2], form.work())
    c = n // 3
    lam, Lam = np.zeros((n, d)), np.zeros((n, d, d))
    lam[-1, 0], Lam[-1, 0, 0] = filt[2][-1, 0], filt[2][-1, 1]
    form.loop("adjoint")(t[c:], form.pinf, form.trans, form.work(), filt[2][c:], lam[c:], Lam[c:])
    form.loop("adjoint")(t[:c + 1], form.pinf, form.trans, form.work(), filt[2][:c + 1],
                         lam[:c + 1], Lam[:c + 1])
    np.testing.assert_array_equal(lam, whole[0])
    np.testing.assert_array_equal(Lam, whole[1])


@pytest.mark.parametrize("stride", [2, 7, 64])
def test_refilter_from_checkpoints_gives_every_state(fast_case, rng, stride):
    # a lean posterior keeps a state every `stride` points and re-runs the filter
    # over a window from there: the same states and observation terms as one pass
    series, form, _, scal, H = _inputs(fast_case, rng)
    n, d = series.n, form.dim
    work = form.work(2)
    mf, Pf, obs = _filter_every_state(form, series, scal, work)
    ck = (np.empty((n // stride + 2, d)), np.empty((n // stride + 2, d, d)))
    data = (series.t, series.y, series.err)
    g, inv = form.loop("filter_checkpoints")(data, scal, form.pinf, form.trans, work, *ck,
                                              stride)
    assert (g, inv) == (obs[-1, 0], obs[-1, 1])
    np.testing.assert_array_equal(ck[0][-1], mf[-1])
    np.testing.assert_array_equal(ck[1][-1], Pf[-1])
    for c in range(n // stride + 1):
        lo = 0 if c == 0 else c * stride - 1
        end = min(lo + stride + 1, n)
        got = (np.full((end - lo, d + 2), np.nan), np.empty((end - lo, d)),
               np.empty((end - lo, d, d)))
        got[1][0], got[2][0] = ck[0][c], ck[1][c]
        form.loop("refilter")(tuple(a[lo:end] for a in data), scal, form.pinf, form.trans,
                              form.work(1), *got, 0 if c == 0 else 1)
        first = 0 if c == 0 else 1
        # to rounding: the transitions of a window are filled in other vector lanes
        amp = np.sqrt(form.pinf[0, 0])
        close(got[0][first:], obs[lo + first:end], np.abs(obs).max())
        close(got[1], mf[lo:end], amp)
        close(got[2], Pf[lo:end], np.abs(form.pinf).max())


def test_basis_change_keeps_likelihood_gradient_and_posterior(fast_case, rng):
    kernel = FAST_CASES[fast_case]()
    series = hard_series(rng, 250, kernel_scale(kernel), kernel_amplitude(kernel))
    model = Model(kernel, mean=0.2, excess_noise=0.15)
    v_k, g_k = log_marginal_likelihood(model, series, method=Kalman(), gradient=True)
    v_e, g_e = log_marginal_likelihood(model, series, method=Exact(), gradient=True)
    assert v_k == pytest.approx(v_e, rel=1e-10)
    np.testing.assert_allclose(g_k, g_e, rtol=1e-8, atol=1e-8 * np.abs(g_e).max())
    tq = rng.uniform(series.t[0] - 20, series.t[-1] + 20, 300)
    pk = posterior(model, series, method=Kalman()).predict(tq)
    pe = posterior(model, series, method=Exact()).predict(tq)
    var0 = kernel.variance()
    np.testing.assert_allclose(pk.mean, pe.mean, rtol=1e-8, atol=1e-9 * np.sqrt(var0))
    np.testing.assert_allclose(pk.var, pe.var, rtol=1e-7, atol=1e-9 * var0)


def test_fast_form_declines_what_it_cannot_do():
    big = Matern52(amplitude=1.0, scale=2.0) + Matern32(amplitude=1.0, scale=5.0)
    assert fast_form(big.state_space()) is None  # d = 5: general loops
    assert fast_form(Matern32(amplitude=1.0, scale=2.0).state_space()).single
    assert not fast_form(FAST_CASES["oscillator"]().state_space()).single
