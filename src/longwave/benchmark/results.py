"""Typed records of a benchmark run (rule: dataclasses, never ``dtype=object``).

Figures not measured are NaN (written as ``null`` in the JSON report).
"""

from __future__ import annotations

from dataclasses import dataclass, field

NAN = float("nan")

#: Status of one method at one setting.
STATUSES = ("ok", "refused", "failed")


@dataclass
class HeldoutScore:
    """Predictive scores on held-out observations (see :mod:`.metrics`).

    Attributes
    ----------
    n : int
        Held-out points.
    nlpd : float
        Mean negative log predictive density, nats.
    coverage_68, coverage_95 : float
        Fractions inside the central 68.27 % and 95 % predictive intervals.
    """

    n: int = 0
    nlpd: float = NAN
    coverage_68: float = NAN
    coverage_95: float = NAN


@dataclass
class MethodResult:
    """One method at one setting, compared with the reference.

    Attributes
    ----------
    label : str
        Setting string, such as ``"vfe:m=64"``.
    description : dict
        The method's ``describe()``.
    status : str
        ``ok``; ``refused`` (its ``check`` declined the data); ``failed`` (it raised).
    message : str
        Why it was refused or failed; empty when ok.
    full_series_ok : bool
        Whether its ``check`` accepts the whole series (not only the stretch).
    full_series_message : str
    lml, lml_diff_per_point : float
        Log marginal likelihood at the reference's fitted hyperparameters, and
        its difference from the reference's, per point.
    mean_error_sigma, max_error_sigma : float
        Posterior mean error in reference standard deviations (mean, largest).
    variance_ratio, min_variance_ratio : float
        Posterior variance over the reference's (mean, smallest).
    mean_kl : float
        Mean marginal KL divergence from the reference, nats.
    interpolation, forecast : HeldoutScore
        With the method's own fitted hyperparameters (the reference's when
        fitting is off).
    hyperparameters : dict
        Per name: value, reference value, difference (log ratio for positive ones).
    fit_converged : bool
    evaluate_seconds, evaluate_peak_mb : float
        One evaluation with gradient (one optimiser step).
    fit_seconds, fit_peak_mb : float
        The whole fit (NaN when fitting is off).
    predict_seconds, predict_peak_mb : float
        Building the posterior and predicting at every compared time.
    extras : dict
        The method's own figures at the reference hyperparameters (such as bounds).
    certified : dict
        Certified interval of the exact log marginal likelihood on the full
        series (keys lower, upper, gap, per_point_gap, n), when the method gives one.
    """

    label: str
    description: dict
    status: str = "ok"
    message: str = ""
    full_series_ok: bool = True
    full_series_message: str = ""
    lml: float = NAN
    lml_diff_per_point: float = NAN
    mean_error_sigma: float = NAN
    max_error_sigma: float = NAN
    variance_ratio: float = NAN
    min_variance_ratio: float = NAN
    mean_kl: float = NAN
    interpolation: HeldoutScore = field(default_factory=HeldoutScore)
    forecast: HeldoutScore = field(default_factory=HeldoutScore)
    hyperparameters: dict = field(default_factory=dict)
    fit_converged: bool = False
    evaluate_seconds: float = NAN
    evaluate_peak_mb: float = NAN
    fit_seconds: float = NAN
    fit_peak_mb: float = NAN
    predict_seconds: float = NAN
    predict_peak_mb: float = NAN
    extras: dict = field(default_factory=dict)
    certified: dict = field(default_factory=dict)

    def __post_init__(self):
        if self.status not in STATUSES:
            raise ValueError(f"status must be one of {STATUSES}, got {self.status!r}")

    @property
    def cost_seconds(self) -> float:
        """Fit (or, with fitting off, one evaluation) plus prediction, wall seconds."""
        first = self.fit_seconds if self.fit_seconds == self.fit_seconds else self.evaluate_seconds
        return first + self.predict_seconds


@dataclass
class ReferenceSummary:
    """The reference's setting, stretch, fit and cost.

    Attributes
    ----------
    label, reason : str
    start, stop, full_n : int
        Compared stretch ``[start, stop)`` of the sorted full series.
    t_start, t_stop : float
    n_train, n_interpolation, n_forecast : int
    params : dict of str to float
        Hyperparameters fitted by the reference on the training points.
    lml : float
        Its log marginal likelihood on the training points.
    full_lml : float
        On the whole series, when the reference covers it (else NaN).
    fit_converged : bool
    fit_seconds, fit_peak_mb : float
    interpolation, forecast : HeldoutScore
    """

    label: str
    reason: str
    start: int
    stop: int
    full_n: int
    t_start: float
    t_stop: float
    n_train: int
    n_interpolation: int
    n_forecast: int
    params: dict
    lml: float
    full_lml: float
    fit_converged: bool
    fit_seconds: float
    fit_peak_mb: float
    interpolation: HeldoutScore
    forecast: HeldoutScore


@dataclass
class Zoom:
    """Posteriors on a fine grid over one window, for the overlay plot.

    Attributes
    ----------
    t : list of float
        Grid times.
    data_t, data_y : list of float
        Observations inside the window (training and held out).
    data_heldout : list of int
        0 train, 1 interpolation, 2 forecast, per observation.
    curves : dict of str to dict
        Per label (the reference under ``"reference"``): ``mean`` and ``std`` lists.
    """

    t: list
    data_t: list
    data_y: list
    data_heldout: list
    curves: dict


@dataclass
class ScalingPoint:
    """Cost of one method at one size.

    Attributes
    ----------
    n : int
    evaluate_seconds, evaluate_peak_mb : float
        One log marginal likelihood evaluation with gradient.
    predict_seconds, predict_peak_mb : float
        Posterior and prediction at the n data times (NaN when skipped).
    """

    n: int
    evaluate_seconds: float
    evaluate_peak_mb: float
    predict_seconds: float = NAN
    predict_peak_mb: float = NAN


@dataclass
class ScalingCurve:
    """One method's cost against n, and the fitted growth exponent.

    Attributes
    ----------
    label : str
    points : list of ScalingPoint
    time_exponent, memory_exponent : float
        Least-squares slope of log cost on log n of one evaluation (see
        :func:`.scaling.growth_exponent`).
    predict_time_exponent, predict_memory_exponent : float
        The same for posterior plus prediction at the n data times.
    stopped : str
        Why larger sizes were not run (refused, over the time budget), or empty.
    """

    label: str
    points: list = field(default_factory=list)
    time_exponent: float = NAN
    memory_exponent: float = NAN
    predict_time_exponent: float = NAN
    predict_memory_exponent: float = NAN
    stopped: str = ""


@dataclass
class ScalingResult:
    """Outcome of scaling mode: synthetic series of growing n, every method timed.

    Attributes
    ----------
    model : str
        The model simulated and evaluated (its repr).
    seed : int
    sizes : list of int
        Sizes attempted.
    curves : list of ScalingCurve
    """

    model: str
    seed: int
    sizes: list
    curves: list = field(default_factory=list)
