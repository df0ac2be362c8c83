"""Squared-exponential kernel and its rational spectral (state-space) approximation.

Dense form (Rasmussen & Williams 2006, eq. 4.9)::

    k(tau) = amplitude^2 exp(-tau^2 / (2 scale^2)),
    S(w) = amplitude^2 sqrt(2 pi) scale exp(-scale^2 w^2 / 2)   (its spectral density).

State-space approximation (Hartikainen & Särkkä 2010, sec. 4; convergence in
Särkkä & Piché 2014): replace ``exp(x)``, ``x = scale^2 w^2 / 2``, in
``1 / S`` by its Taylor polynomial of degree ``order``::

    S_N(w) = amplitude^2 sqrt(2 pi) scale / sum_{n <= N} x^n / n!.

The denominator is a polynomial in ``w^2`` with positive coefficients, so
``p(-s^2)`` (``s = i w``) has no root on the imaginary axis and its roots come
in pairs ``+-s``; the ``N`` roots with negative real part make a stable monic
polynomial ``P(s)`` with ``|P(i w)|^2 = p(w^2) / a_N``, and ``S_N`` is the
spectrum of the companion-form model with characteristic polynomial ``P``
driven by white noise of density ``q = amplitude^2 sqrt(2 pi) / a_N``, at unit
scale. A scale ``l`` only stretches time: ``A_l(dt) = A_1(dt / l)``, so
rates and frequencies scale by ``1 / l`` and nothing else depends on it.

Closed-form transition. The roots ``lam_i`` are distinct, so
``A(dt) = sum_i e^{lam_i dt} R_i`` with ``R_i = v_i u_i^T`` (right and left
eigenvectors of the companion matrix). A complex pair ``lam = -r +- i w``
contributes one term: rate ``r``, frequency ``w``, ``C = 2 Re R``,
``S = -2 Im R``; a real root a term with ``C = R``.

Error. ``S_N >= S`` everywhere (the Taylor polynomial of ``exp`` is below it
for ``x >= 0``), so ``k_N - k`` is the transform of a non-negative function
and its maximum over ``tau`` is at ``tau = 0``:
``max |k_N - k| = k_N(0) - k(0) = Pinf_N[0, 0] - amplitude^2``, computed
exactly by :meth:`SquaredExp.covariance_error_bound`. It is about 6e-4 of the
variance at order 8 (the default, the smallest order within 1e-3) and falls
by about half per order.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from .._loops.blocks import CODE_SQUARED_EXP
from .base import SUPPORT_REL, Primitive, decay_root
from .statespace import StateSpace

#: Default bound on the covariance error of the state-space form, relative to the variance.
DEFAULT_TOLERANCE = 1e-3
#: Highest order accepted: beyond it the modal covariance loses digits to cancellation.
MAX_ORDER = 12


@lru_cache(maxsize=32)  # a pure function of an integer: memoised, not mutable state
def unit_model(order: int):
    """Unit-amplitude, unit-scale model of the given order.

    Returns
    -------
    dict with keys
        ``F`` (N, N), ``q`` float, ``Pinf`` (N, N), ``rate``, ``freq`` (J,),
        ``cos_coef``, ``sin_coef`` (J, 1, N, N).
    """
    n = order
    a = np.array([0.5**i / math.factorial(i) for i in range(n + 1)])
    coef = np.zeros(2 * n + 1)  # p(-s^2), highest power first
    for i in range(n + 1):
        coef[2 * n - 2 * i] = a[i] * (-1.0) ** i
    roots = np.roots(coef)
    stable = roots[roots.real < 0]
    if stable.size != n:
        raise RuntimeError(f"SquaredExp order {n}: found {stable.size} stable roots, not {n}")
    q = math.sqrt(2 * math.pi) / a[n]
    # Complex modal coordinates z (x = V z, V the Vandermonde matrix of the roots):
    # dz_i = lam_i z_i dt + b_i dW, b_i = 1 / P'(lam_i) (partial fractions of 1 / P),
    # f = sum_i z_i, and the stationary covariance is a Cauchy-like matrix, computed
    # entry by entry without the ill-conditioned companion form.
    b = np.array([1.0 / np.prod(lam - np.delete(stable, i)) for i, lam in enumerate(stable)])
    pz = -q * np.outer(b, b.conj()) / (stable[:, None] + stable.conj()[None, :])
    # Real coordinates: a real root keeps z; a pair (lam, conj lam) with Im lam > 0
    # becomes u = 2 Re z, v = 2 Im z, which rotate: d(u + iv) = lam (u + iv) dt.
    rows, rate, freq, blocks = [], [], [], []
    for i, lam in enumerate(stable):
        if abs(lam.imag) <= 1e-12 * abs(lam):
            rows.append(np.eye(n)[i].astype(complex))
            rate.append(-lam.real)
            freq.append(0.0)
            blocks.append(1)
        elif lam.imag > 0:
            k = int(np.argmin(np.abs(stable - lam.conj())))
            u, v = np.zeros(n, complex), np.zeros(n, complex)
            u[i], u[k] = 1.0, 1.0
            v[i], v[k] = -1j, 1j
            rows += [u, v]
            rate.append(-lam.real)
            freq.append(lam.imag)
            blocks.append(2)
    t = np.array(rows)
    pinf = np.real(t @ pz @ t.conj().T)
    pinf = 0.5 * (pinf + pinf.T)
    n_terms = len(blocks)
    cos_c = np.zeros((n_terms, 1, n, n))
    sin_c = np.zeros_like(cos_c)
    f = np.zeros((n, n))
    h = np.zeros(n)
    off = 0
    for j, size in enumerate(blocks):
        sl = slice(off, off + size)
        h[off] = 1.0
        cos_c[j, 0, sl, sl] = np.eye(size)
        if size == 2:
            sin_c[j, 0, sl, sl] = [[0.0, -1.0], [1.0, 0.0]]
            f[sl, sl] = [[-rate[j], -freq[j]], [freq[j], -rate[j]]]
        else:
            f[sl, sl] = -rate[j]
        off += size
    lvec = np.real(t @ b)[:, None]
    return {
        "F": f,
        "L": lvec,
        "q": q,
        "H": h,
        "Pinf": pinf,
        "rate": np.array(rate),
        "freq": np.array(freq),
        "cos_coef": cos_c,
        "sin_coef": sin_c,
    }


def relative_error(order: int) -> float:
    """Maximum covariance error of the order-``order`` form, relative to the variance."""
    unit = unit_model(order)
    return float(unit["H"] @ unit["Pinf"] @ unit["H"] - 1.0)


def default_order(tolerance: float = DEFAULT_TOLERANCE) -> int:
    """Smallest order whose relative covariance error is at most ``tolerance``."""
    for order in range(1, MAX_ORDER + 1):
        if relative_error(order) <= tolerance:
            return order
    raise ValueError(
        f"SquaredExp: no order up to {MAX_ORDER} reaches a relative covariance error of "
        f"{tolerance:g} (order {MAX_ORDER} gives {relative_error(MAX_ORDER):.2g}); "
        "use a larger tolerance, or Exact()/VFE() with the dense kernel"
    )


class SquaredExp(Primitive):
    """Squared-exponential kernel ``amplitude^2 exp(-tau^2 / (2 scale^2))``.

    Parameters
    ----------
    amplitude : float or Param
        Standard deviation of the process.
    scale : float or Param
        Length scale (time units).
    order : int, optional
        Order of the spectral approximation (state dimension), 1 to 12.
        Default: the smallest with covariance error at most ``tolerance`` of the
        variance (8 for the default 1e-3). The scale only stretches time, so the
        order, fixed at construction, keeps its error while fitting.
    tolerance : float, default 1e-3
        Used when ``order`` is not given; 12 (the highest order) reaches about 3e-5.
    label : str, optional
        Prefix of the hyperparameter names in a model, default ``"squared_exp"``.

    Examples
    --------
    >>> k = SquaredExp(amplitude=2.0, scale=3.0)
    >>> round(float(k.value(3.0)), 6)  # 4 exp(-1/2)
    2.426123
    >>> k.state_space().dim, k.covariance_error_bound() <= 1e-3 * 4.0
    (8, True)
    """

    param_names_local = ("amplitude", "scale")
    default_label = "squared_exp"
    has_state_space_form = True
    loop_code = CODE_SQUARED_EXP  # compiled form in _loops/blocks.py (sparse methods)

    def __init__(self, *, order: int | None = None, tolerance: float = DEFAULT_TOLERANCE,
                 label: str | None = None, **values):
        if order is not None and (
            isinstance(order, bool) or int(order) != order or not 1 <= order <= MAX_ORDER
        ):
            raise ValueError(
                f"SquaredExp: order must be a whole number from 1 to {MAX_ORDER}, got "
                f"{order!r}; for example order=8, or leave it out for the automatic choice"
            )
        super().__init__(label=label, **values)
        self.order = default_order(tolerance) if order is None else int(order)

    def covariance_error_bound(self) -> float:
        """Maximum over ``tau`` of ``|k_ss(tau) - k(tau)|`` (exact, attained at 0)."""
        return self._params[0].value ** 2 * relative_error(self.order)

    def support_radius(self, rel: float = SUPPORT_REL) -> float:
        # value and log-derivatives are at most (1 + x^2) exp(-x^2 / 2) k(0), x = tau / scale;
        # with s = x^2 / 2 that is (1 + 2 s) exp(-s)
        return self._params[1].value * math.sqrt(2.0 * decay_root(rel, 1.0, 2.0))

    def _value(self, tau, amplitude, scale):
        return amplitude**2 * np.exp(-0.5 * (tau / scale) ** 2)

    def _grad(self, tau, amplitude, scale):
        u2 = (tau / scale) ** 2
        k = amplitude**2 * np.exp(-0.5 * u2)
        return np.stack([2 * k, u2 * k])

    def _state_space(self, amplitude, scale):
        unit = unit_model(self.order)
        var = amplitude**2
        n = self.order
        j = unit["rate"].size
        rate, freq = unit["rate"] / scale, unit["freq"] / scale
        # x(t) = x_1(t / scale): F = F_1 / scale, Qc = q / scale, same Pinf
        pinf = var * unit["Pinf"]
        return StateSpace(
            F=unit["F"] / scale,
            L=unit["L"],
            Qc=np.array([[var * unit["q"] / scale]]),
            H=unit["H"].copy(),
            Pinf=pinf,
            dPinf=np.stack([2 * pinf, np.zeros((n, n))]),
            rate=rate,
            freq=freq,
            cos_coef=unit["cos_coef"].copy(),
            sin_coef=unit["sin_coef"].copy(),
            d_rate=np.stack([np.zeros(j), -rate]),
            d_freq=np.stack([np.zeros(j), -freq]),
            d_cos_coef=np.zeros((2, j, 1, n, n)),
            d_sin_coef=np.zeros((2, j, 1, n, n)),
        )
