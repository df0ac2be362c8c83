"""Accuracy figures comparing an approximate posterior with the reference.

Plain functions of arrays; each docstring gives its formula and where it
comes from. "Reference" is the exact posterior (see :mod:`.reference`),
marked ``_ref``; the approximation has no suffix.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtri

#: Nominal central interval levels reported as coverage: one and two sigma-ish.
COVERAGE_LEVELS = {"68": 0.6827, "95": 0.95}


def lml_difference_per_point(value: float, value_ref: float, n: int) -> float:
    """``(log p_approx(y) - log p_ref(y)) / n``, in nats per point.

    Dividing by n makes one tolerance serve series of any length (common
    practice when comparing likelihood approximations). Negative for a
    lower bound such as VFE's.
    """
    return (float(value) - float(value_ref)) / int(n)


def mean_error_sigma(mean, mean_ref, var_ref) -> tuple[float, float]:
    """Mean and largest ``|mu - mu_ref| / sigma_ref`` over the query points.

    The error of the posterior mean in units of the reference posterior
    standard deviation: below about 0.1 the difference is small beside the
    uncertainty the reference itself reports (common practice).

    Returns
    -------
    mean_error, max_error : float
    """
    z = np.abs(np.asarray(mean) - np.asarray(mean_ref)) / np.sqrt(np.asarray(var_ref))
    return float(z.mean()), float(z.max())


def variance_ratio(var, var_ref) -> tuple[float, float]:
    """Mean and smallest ``var / var_ref`` over the query points.

    Below 1 the approximation is overconfident: it claims less uncertainty
    than the exact posterior (common practice). The smallest value shows the
    worst place.

    Returns
    -------
    mean_ratio, min_ratio : float
    """
    r = np.asarray(var) / np.asarray(var_ref)
    return float(r.mean()), float(r.min())


def gaussian_kl(mean_ref, var_ref, mean, var) -> np.ndarray:
    """Pointwise ``KL(N(mean_ref, var_ref) || N(mean, var))``, in nats.

    The closed form for two univariate Gaussians (common formula, for
    example Kullback 1959)::

        KL = (log(var / var_ref) + (var_ref + (mean_ref - mean)^2) / var - 1) / 2

    It is zero only when both moments agree; a pure mean shift of ``d``
    reference sigmas costs ``d^2 / 2`` nats.
    """
    mean_ref, var_ref = np.asarray(mean_ref), np.asarray(var_ref)
    mean, var = np.asarray(mean), np.asarray(var)
    return 0.5 * (np.log(var / var_ref) + (var_ref + (mean_ref - mean) ** 2) / var - 1.0)


def mean_marginal_kl(mean_ref, var_ref, mean, var) -> float:
    """Mean over the query points of :func:`gaussian_kl` (marginals only).

    Clipped at 0: for identical posteriors rounding can leave about -1e-17.
    """
    return max(float(np.mean(gaussian_kl(mean_ref, var_ref, mean, var))), 0.0)


def nlpd(y, mean, var) -> float:
    """Mean negative log predictive density of held-out observations, in nats.

    ``mean_i (log(2 pi var_i) / 2 + (y_i - mean_i)^2 / (2 var_i))`` with the
    predictive variance of an observation (latent variance plus noise), as
    in Quinonero-Candela et al. 2006, "Evaluating predictive uncertainty
    challenge", LNCS 3944. Lower is better; it punishes both a wrong mean
    and a wrong width.
    """
    y, mean, var = np.asarray(y), np.asarray(mean), np.asarray(var)
    return float(np.mean(0.5 * np.log(2 * math.pi * var) + (y - mean) ** 2 / (2 * var)))


def coverage(y, mean, var, level: float) -> float:
    """Fraction of held-out points inside the central ``level`` predictive interval.

    The interval is ``mean +- z sigma`` with ``z = Phi^-1((1 + level) / 2)``;
    a calibrated predictor covers close to ``level`` (common practice).
    """
    if not 0 < level < 1:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level}")
    z = ndtri(0.5 + 0.5 * level)
    inside = np.abs(np.asarray(y) - np.asarray(mean)) <= z * np.sqrt(np.asarray(var))
    return float(inside.mean())


def hyperparameter_differences(fitted: dict, fitted_ref: dict, positive: dict) -> dict:
    """Fitted hyperparameters beside the reference's fit.

    For positive parameters the difference is ``log(value / value_ref)``
    (a relative error, symmetric in the two); for the others (the mean) it
    is ``value - value_ref``.

    Parameters
    ----------
    fitted, fitted_ref : dict of str to float
        Values by parameter name.
    positive : dict of str to bool
        Whether each parameter is positive.

    Returns
    -------
    dict of str to dict
        Per name: ``value``, ``reference`` and ``difference``.
    """
    out = {}
    for name, ref in fitted_ref.items():
        value = fitted[name]
        diff = math.log(value / ref) if positive[name] else value - ref
        out[name] = {"value": float(value), "reference": float(ref), "difference": float(diff)}
    return out
