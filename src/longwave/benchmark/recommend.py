"""Pick the cheapest method setting whose accuracy meets the tolerance.

What the tolerance bounds
-------------------------
One number ``tau`` in nats (default 0.01) bounds three figures, each measured
against the reference at the reference's fitted hyperparameters:

* ``|lml - lml_ref| / n <= tau``: the likelihood surface the fit climbs is
  right to ``tau`` nats per point;
* mean marginal KL divergence from the reference ``<= tau`` nats: the
  posterior marginals (mean and width together) are right;
* mean ``|mu - mu_ref| / sigma_ref <= sqrt(2 tau)``: the mean shift that alone
  would cost ``tau`` nats of KL (a shift of ``d`` sigmas costs ``d^2 / 2``), so
  a method cannot pass on width while its mean wanders.

Each bound can be set on its own. "Cheapest" is the smallest wall time of the
fit plus prediction (measured on the compared stretch), among settings whose
``check`` accepts the whole series.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

#: Default tolerance, nats.
DEFAULT_TOLERANCE = 0.01


@dataclass(frozen=True)
class Tolerance:
    """Accuracy bounds a recommended setting must meet (see the module docstring).

    Attributes
    ----------
    lml_per_point : float
        Bound on ``|lml - lml_ref| / n``, nats.
    mean_error_sigma : float
        Bound on the mean posterior-mean error in reference sigmas.
    kl : float
        Bound on the mean marginal KL divergence, nats.
    """

    lml_per_point: float
    mean_error_sigma: float
    kl: float

    def __post_init__(self):
        for name in ("lml_per_point", "mean_error_sigma", "kl"):
            value = getattr(self, name)
            if not (value > 0 and math.isfinite(value)):
                raise ValueError(
                    f"tolerance {name} must be a positive finite number, got {value}; "
                    "for example 0.01"
                )

    @classmethod
    def from_nats(cls, tau: float = DEFAULT_TOLERANCE, **overrides) -> Tolerance:
        """All three bounds from one number of nats, any of them overridden.

        Examples
        --------
        >>> Tolerance.from_nats(0.02)
        Tolerance(lml_per_point=0.02, mean_error_sigma=0.2, kl=0.02)
        """
        if not (tau > 0 and math.isfinite(tau)):
            raise ValueError(f"tolerance must be a positive number of nats, got {tau}; try 0.01")
        unknown = set(overrides) - {"lml_per_point", "mean_error_sigma", "kl"}
        if unknown:
            raise TypeError(
                f"unknown tolerance bound(s) {sorted(unknown)}; the bounds are "
                "lml_per_point, mean_error_sigma and kl"
            )
        base = {"lml_per_point": tau, "mean_error_sigma": math.sqrt(2 * tau), "kl": tau}
        base.update({k: v for k, v in overrides.items() if v is not None})
        return cls(**base)

    def failures(self, result) -> list[str]:
        """Which bounds a :class:`~.results.MethodResult` exceeds, as short phrases."""
        checks = (
            ("|dlml|/n", abs(result.lml_diff_per_point), self.lml_per_point),
            ("mean error", result.mean_error_sigma, self.mean_error_sigma),
            ("KL", result.mean_kl, self.kl),
        )
        out = []
        for label, value, bound in checks:
            if not value <= bound:  # NaN fails too
                out.append(f"{label} {value:.3g} > {bound:.3g}")
        return out


@dataclass
class Verdict:
    """Why one setting was or was not chosen.

    Attributes
    ----------
    label : str
    verdict : str
        ``recommended``, ``meets tolerance`` (but costs more), ``too inaccurate``,
        ``not for full series`` or the method's status (``refused``, ``failed``).
    reason : str
    cost_seconds : float
    """

    label: str
    verdict: str
    reason: str
    cost_seconds: float


@dataclass
class Recommendation:
    """Outcome of :func:`choose_setting`.

    Attributes
    ----------
    choice : str or None
        Label of the recommended setting; ``None`` when none meets the tolerance.
    tolerance : Tolerance
    table : list of Verdict
        Every setting, cheapest first among those that ran.
    warning : str
        Non-empty when nothing meets the tolerance.
    """

    choice: str | None
    tolerance: Tolerance
    table: list = field(default_factory=list)
    warning: str = ""


def choose_setting(results, tolerance: Tolerance,
                   reference_label: str = "the reference") -> Recommendation:
    """Choose among benchmarked settings.

    Parameters
    ----------
    results : sequence of MethodResult
    tolerance : Tolerance
    reference_label : str
        Named in the warning when nothing meets the tolerance.

    Returns
    -------
    Recommendation
    """
    ran = sorted((r for r in results if r.status == "ok"), key=lambda r: r.cost_seconds)
    rows, passing = [], []
    for r in ran:
        missed = tolerance.failures(r)
        if missed:
            rows.append(Verdict(r.label, "too inaccurate", "; ".join(missed), r.cost_seconds))
        elif not r.full_series_ok:
            rows.append(Verdict(r.label, "not for full series", r.full_series_message,
                                r.cost_seconds))
        else:
            passing.append(r)
            rows.append(Verdict(r.label, "meets tolerance", "", r.cost_seconds))
    choice = passing[0].label if passing else None
    for row in rows:
        if row.label == choice:
            row.verdict = "recommended"
            row.reason = "cheapest setting within every bound"
        elif row.verdict == "meets tolerance":
            row.reason = f"within every bound but slower than {choice}"
    for r in results:
        if r.status != "ok":
            rows.append(Verdict(r.label, r.status, r.message, float("nan")))
    warning = ""
    if choice is None:
        warning = (
            "no benchmarked setting meets the tolerance; use the reference method "
            f"({reference_label}) where it runs, try larger settings (more inducing points), "
            "or loosen the tolerance"
        )
    return Recommendation(choice=choice, tolerance=tolerance, table=rows, warning=warning)


def pareto_front(costs, errors) -> list[int]:
    """Indices of the settings no other setting beats on both cost and error.

    A point is dominated when another is at most as costly and at most as
    wrong, and strictly better in one (common practice). NaN points are
    never on the front. Returned in order of increasing cost.

    Examples
    --------
    >>> pareto_front([1.0, 2.0, 3.0, 2.5], [0.5, 0.1, 0.0, 0.2])
    [0, 1, 2]
    """
    pts = [(c, e, i) for i, (c, e) in enumerate(zip(costs, errors))
           if math.isfinite(c) and math.isfinite(e)]
    pts.sort()
    front, best = [], math.inf
    for _cost, e, i in pts:
        if e < best:
            front.append(i)
            best = e
    return front
