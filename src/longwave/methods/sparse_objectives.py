"""VFE and FITC objectives, certified bounds and adjoints from the m-by-m statistics.

Everything here costs O(m^3) and never sees the data. Inputs are whitened:
``S = Linv Phi Linv^T`` and ``cw = Linv b`` with ``Kuu = L L^T`` (jitter
included) and the sums of :class:`~longwave.methods.sparse_stats.Accumulator`.

VFE (Titsias 2009, eq. 9), with ``Q = Kfu Kuu^-1 Kuf`` and ``Lam = diag(s2)``::

    F = log N(r | 0, Q + Lam) - tr(Lam^-1 (Kff - Q)) / 2
    log N(r | 0, Q + Lam) = -(sum w r^2 - |LB^-1 cw|^2) / 2
                            - (sum log s2 + 2 sum log diag LB) / 2 - n log(2 pi) / 2,
    LB = chol(I + S),   tr(Lam^-1 (Kff - Q)) = kd sum w - tr(S)

(Woodbury and the matrix determinant lemma in whitened form, as in
Bauer, van der Wilk & Rasmussen 2016, eqs. 9-10).

Upper bound (Titsias 2014 technical report, sec. 3; Burt, Rasmussen & van
der Wilk 2019, Lemma 4 and eq. 4): since ``0 <= Kff - Q``,
``log|Kff + Lam| >= log|Q + Lam|``; and with the weighted trace
``t_w = tr(Lam^-1 (Kff - Q))``, ``Lam^-1/2 (Kff - Q) Lam^-1/2 <= t_w I`` so
``Kff + Lam <= Q + (1 + t_w) Lam`` and::

    log p(y) <= -log|Q + Lam| / 2 - r^T (Q + (1 + t_w) Lam)^-1 r / 2 - n log(2 pi) / 2.

For homoscedastic noise ``(1 + t_w) s2 = s2 + t`` with ``t = tr(Kff - Q)``,
which is the published bound; the weighted form carries it to per-point
noise. It needs nothing beyond ``S`` and ``cw`` (``Phi / (1 + t_w)`` is the
statistic of the scaled noise), so it comes from the same pass.

FITC (Snelson & Ghahramani 2006, eq. 8; Quiñonero-Candela & Rasmussen 2005,
eq. 22): ``log N(r | 0, Q + D)``, ``D = diag(s2 + kd - q)``, with the same
whitened algebra on ``S_F = Linv Kuf D^-1 Kfu Linv^T`` and ``c_F``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_solve, cholesky, solve_triangular

LOG_2PI = float(np.log(2 * np.pi))


def _chol(mat, what):
    try:
        return cholesky(mat, lower=True, check_finite=False)
    except np.linalg.LinAlgError as exc:
        raise np.linalg.LinAlgError(
            f"{what} is not positive definite (m={mat.shape[0]}); raise the jitter "
            "(VFE(jitter=1e-6)) or use fewer or better spread inducing times"
        ) from exc


@dataclass(frozen=True)
class Solved:
    """The factorised m-by-m system of one evaluation.

    Attributes
    ----------
    lb : ndarray of shape (m, m)
        ``chol(I + S)``.
    g_hat : ndarray of shape (m,)
        ``(I + S)^-1 cw``: whitened posterior weights.
    value : float
        The objective (VFE lower bound or FITC log marginal likelihood).
    """

    lb: np.ndarray
    g_hat: np.ndarray
    value: float

    def b_inv(self) -> np.ndarray:
        """``(I + S)^-1``, shape (m, m)."""
        return cho_solve((self.lb, True), np.eye(self.lb.shape[0]), check_finite=False)


def gaussian_part(s, cw, sum_rr, sum_log, n) -> Solved:
    """``log N(r | 0, Q + D)`` from whitened statistics with weights ``1 / D``."""
    m = s.shape[0]
    lb = _chol(np.eye(m) + s, "I + S (whitened sparse system)")
    e = solve_triangular(lb, cw, lower=True, check_finite=False)
    g_hat = solve_triangular(lb, e, lower=True, trans="T", check_finite=False)
    logdet = sum_log + 2.0 * np.log(np.diag(lb)).sum()
    value = -0.5 * (sum_rr - e @ e) - 0.5 * logdet - 0.5 * n * LOG_2PI
    return Solved(lb=lb, g_hat=g_hat, value=float(value))


def vfe_bounds(s, cw, sum_rr, sum_log, sum_w, n, kd):
    """VFE lower bound, certified upper bound, and the solved system.

    Returns
    -------
    lower, upper, trace_w : float
    solved : Solved
        For ``log N(r | 0, Q + Lam)`` (whose value is *not* the lower bound).
    """
    solved = gaussian_part(s, cw, sum_rr, sum_log, n)
    trace_w = kd * sum_w - np.trace(s)
    lower = solved.value - 0.5 * trace_w
    scale = 1.0 + max(trace_w, 0.0)
    m = s.shape[0]
    lbc = _chol(np.eye(m) + s / scale, "I + S / (1 + t_w)")
    ec = solve_triangular(lbc, cw, lower=True, check_finite=False)
    quad_scaled = sum_rr / scale - (ec @ ec) / scale**2
    logdet = sum_log + 2.0 * np.log(np.diag(solved.lb)).sum()
    upper = -0.5 * quad_scaled - 0.5 * logdet - 0.5 * n * LOG_2PI
    return float(lower), float(upper), float(trace_w), solved


def vfe_adjoints(solved: Solved, s, linv):
    """Derivatives of the VFE bound w.r.t. ``Phi``, ``b`` and ``Kuu``.

    With ``Sigma = Kuu + Phi``, ``g = Sigma^-1 b`` (Titsias 2009, eq. 9
    differentiated; whitened with ``Kuu^-1 = Linv^T Linv``)::

        dF/db   = g = Linv^T g_hat
        dF/dPhi = (Kuu^-1 - Sigma^-1 - g g^T) / 2 = Linv^T C Linv / 2,
                  C = I - B^-1 - g_hat g_hat^T
        dF/dKuu = Linv^T (C - S) Linv / 2

    Returns
    -------
    g_phi, g_uu : ndarray of shape (m, m)
        ``dF/dPhi`` and ``dF/dKuu``.
    g : ndarray of shape (m,)
        ``dF/db``.
    """
    core = np.eye(s.shape[0]) - solved.b_inv() - np.outer(solved.g_hat, solved.g_hat)
    g_phi = 0.5 * linv.T @ core @ linv
    g_uu = 0.5 * linv.T @ (core - s) @ linv
    return _sym(g_phi), _sym(g_uu), linv.T @ solved.g_hat


def fitc_kuu_adjoint(solved: Solved, delta_aa, linv):
    """``dF/dKuu`` of FITC once the gradient pass has summed ``sum delta_i a_i a_i^T``.

    Differentiating ``log N(r | 0, Q + D)`` through ``Q`` and through
    ``D_i = s2_i + kd - k_i^T Kuu^-1 k_i``::

        dF/dKuu = Linv^T (-g_hat g_hat^T / 2 + (I - B^-1) / 2 + sum delta a a^T) Linv
    """
    m = linv.shape[0]
    core = 0.5 * (np.eye(m) - solved.b_inv()) - 0.5 * np.outer(solved.g_hat, solved.g_hat)
    return _sym(linv.T @ (core + delta_aa) @ linv)


def _sym(mat):
    return 0.5 * (mat + mat.T)
