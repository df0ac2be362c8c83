"""Run every method setting against the reference on one series.

The runner uses only the method interface (``check``, ``evaluate``,
``posterior``, ``describe``): it never asks which method it holds. For each
setting it measures, on the compared stretch (see :mod:`.reference`):

1. at the reference's fitted hyperparameters (the approximation alone): the
   log marginal likelihood difference per point, the posterior mean error in
   reference sigmas, the variance ratio and the mean marginal KL divergence
   at every compared time, and the cost of one evaluation and of a prediction;
2. with its own fit from the same starting model (what a user would get):
   the fitted hyperparameters against the reference's fit, the fit's cost,
   and held-out scores (NLPD, 68 % and 95 % coverage) on the interpolation
   gaps and the forecast stretch;
3. on the full series, when its evaluation carries ``lower_bound`` and
   ``upper_bound``: that certified interval of the exact log marginal likelihood.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from ..inference import fit as fit_model
from ..series import Series
from . import metrics
from .kernel_options import apply_kernel_options
from .recommend import Recommendation, Tolerance, choose_setting
from .reference import DEFAULT_REFERENCE_MAX_N, Holdout, choose_reference
from .results import (
    HeldoutScore,
    MethodResult,
    ReferenceSummary,
    ScalingCurve,
    ScalingPoint,
    Zoom,
)
from .scaling import finish_curve, measure_point
from .timing import time_best, time_call

CAUTIONS = (
    "Approximate methods can be overconfident: a variance ratio below 1 means the "
    "approximation reports less uncertainty than the exact posterior.",
    "Every uncertainty here is conditional on the kernel chosen; a wrong kernel gives "
    "confidently wrong intervals for every method alike.",
    "Far from the data (long gaps, forecasts beyond a few correlation lengths) every "
    "posterior falls back to the prior: the mean returns to the constant mean and the "
    "variance to the kernel's variance.",
)


@dataclass
class BenchmarkResult:
    """Everything one benchmark run measured (see :mod:`.results` for the parts).

    Attributes
    ----------
    reference : ReferenceSummary
    methods : list of MethodResult
    recommendation : Recommendation
    zoom : Zoom
    scaling : list of ScalingCurve
        Cost of one evaluation on growing prefixes of the training points.
    config : dict
        The run's inputs (sizes, tolerance, seed, hold-out, model).
    cautions : list of str
    """

    reference: ReferenceSummary
    methods: list
    recommendation: Recommendation
    zoom: Zoom
    scaling: list
    config: dict
    cautions: list = field(default_factory=lambda: list(CAUTIONS))

    def to_dict(self) -> dict:
        """Plain nested dict (JSON-compatible apart from NaN)."""
        return asdict(self)


def warm_up(method, model, series, n: int = 200) -> None:
    """One untimed evaluation and prediction on a few points, so that compilation
    and first-call caches are not billed to the timed calls (common practice)."""
    small = series.subset(np.arange(min(n, series.n)))
    try:
        method.evaluate(model, small, gradient=True)
        method.posterior(model, small).predict(small.t[:10])
    except Exception:  # noqa: BLE001 - the timed call reports any real problem
        pass


def _predict(method, model, series, t):
    post = method.posterior(model, series)
    return post, post.predict(t)


def _heldout(post, t, y, err) -> HeldoutScore:
    if t.size == 0:
        return HeldoutScore()
    pred = post.predict(t, observed=True, err=err)
    return HeldoutScore(
        n=int(t.size),
        nlpd=metrics.nlpd(y, pred.mean, pred.var),
        coverage_68=metrics.coverage(y, pred.mean, pred.var, metrics.COVERAGE_LEVELS["68"]),
        coverage_95=metrics.coverage(y, pred.mean, pred.var, metrics.COVERAGE_LEVELS["95"]),
    )


@dataclass(frozen=True)
class _Split:
    """The compared stretch and what is held out of it."""

    stretch: Series
    labels: np.ndarray
    train: Series

    def part(self, code: int):
        idx = np.flatnonzero(self.labels == code)
        return self.stretch.t[idx], self.stretch.y[idx], self.stretch.err[idx]


def _zoom_grid(split: _Split, points: int) -> np.ndarray:
    """A window around the first interpolation gap (else the end of the stretch)."""
    t, gap = split.stretch.t, np.flatnonzero(split.labels == 1)
    if gap.size:
        i0, i1 = gap[0], gap[0] + np.argmax(np.diff(np.append(gap, gap[-1] + 2)) > 1)
        pad = max(int(i1 - i0), 10)
        lo, hi = max(i0 - pad, 0), min(i1 + pad, t.size - 1)
    else:
        lo, hi = int(0.85 * (t.size - 1)), t.size - 1
    return np.linspace(t[lo], t[hi], points)


class _Scorer:
    """Scores one setting against the reference's predictions (shared inputs held once)."""

    def __init__(self, split, full, start_model, ref_model, ref_pred, zoom_t, *,
                 fit, restarts, seed, full_lml):
        self.split, self.full = split, full
        self.start_model, self.ref_model, self.ref_pred = start_model, ref_model, ref_pred
        self.zoom_t, self.fit, self.restarts, self.seed = zoom_t, fit, restarts, seed
        self.full_lml = full_lml
        # Floor the variances so that a numerically zero posterior variance
        # cannot turn a ratio or a KL into inf.
        self.var_floor = 1e-12 * ref_model.kernel.variance()

    def score(self, cand, ref_lml, zoom_curves) -> MethodResult:
        description = dict(cand.method.describe())
        if cand.kernel_options:
            description["kernel_options"] = dict(cand.kernel_options)
        res = MethodResult(cand.label, description)
        method, train = cand.method, self.split.train
        # The same hyperparameters, with this setting's kernel options applied.
        ref_model = apply_kernel_options(self.ref_model, cand.kernel_options, cand.label)
        start_model = apply_kernel_options(self.start_model, cand.kernel_options, cand.label)
        try:
            method.check(ref_model, train)
        except ValueError as exc:
            res.status, res.message = "refused", str(exc)
            return res
        try:
            method.check(ref_model, self.full)
        except ValueError as exc:
            res.full_series_ok, res.full_series_message = False, str(exc)
        try:
            # settings fixed from the data once (greedy inducing times), as fit() does
            method = method.prepare(ref_model, train)
            self._measure(res, method, ref_model, start_model, ref_lml, zoom_curves)
        except Exception as exc:  # noqa: BLE001 - one failing setting must not end the run
            res.status, res.message = "failed", f"{type(exc).__name__}: {exc}"
        return res

    def _measure(self, res, method, ref_model, start_model, ref_lml, zoom_curves):
        train, ref = self.split.train, self.ref_pred
        warm_up(method, ref_model, train)
        ev, c = time_best(method.evaluate, ref_model, train, gradient=True)
        res.lml, res.extras = ev.value, dict(ev.extras)
        res.evaluate_seconds, res.evaluate_peak_mb = c.seconds, c.peak_mb
        res.lml_diff_per_point = metrics.lml_difference_per_point(ev.value, ref_lml, train.n)
        (post, pred), c = time_best(_predict, method, ref_model, train, self.split.stretch.t)
        res.predict_seconds, res.predict_peak_mb = c.seconds, c.peak_mb
        bad = int(np.sum(~(np.isfinite(pred.mean) & np.isfinite(pred.var))))
        if bad or not np.isfinite(ev.value):
            raise FloatingPointError(
                f"non-finite output: log marginal likelihood {ev.value}, posterior mean or "
                f"variance at {bad} of {pred.t.size} times"
            )
        var, var_ref = np.maximum(pred.var, self.var_floor), np.maximum(ref.var, self.var_floor)
        res.mean_error_sigma, res.max_error_sigma = metrics.mean_error_sigma(
            pred.mean, ref.mean, var_ref)
        res.variance_ratio, res.min_variance_ratio = metrics.variance_ratio(var, var_ref)
        res.mean_kl = metrics.mean_marginal_kl(ref.mean, var_ref, pred.mean, var)
        z = post.predict(self.zoom_t)
        zoom_curves[res.label] = {"mean": z.mean.tolist(), "std": z.std.tolist()}
        if self.fit:
            fr, c = time_call(fit_model, start_model, train, method=method,
                              restarts=self.restarts, seed=self.seed)
            res.fit_seconds, res.fit_peak_mb, res.fit_converged = c.seconds, c.peak_mb, fr.converged
            res.hyperparameters = metrics.hyperparameter_differences(
                fr.params, ref_model.values(), {p.name: p.positive for p in ref_model.params})
            post = method.posterior(fr.model, train)
        res.interpolation = _heldout(post, *self.split.part(1))
        res.forecast = _heldout(post, *self.split.part(2))
        if "lower_bound" in res.extras and "upper_bound" in res.extras:
            full_ev = method.evaluate(ref_model, self.full, gradient=False)
            lo, hi = full_ev.extras["lower_bound"], full_ev.extras["upper_bound"]
            res.certified = {"n": self.full.n, "lower": lo, "upper": hi, "gap": hi - lo,
                             "per_point_gap": (hi - lo) / self.full.n}
            if np.isfinite(self.full_lml):
                res.certified["exact"] = self.full_lml
                res.certified["contains_exact"] = bool(lo <= self.full_lml <= hi)


def _prefix_scaling(method, model, train, label, steps, last=None) -> ScalingCurve:
    """Cost of one evaluation on growing prefixes of the training points."""
    sizes = sorted({max(train.n >> k, 2) for k in range(steps)})
    curve = ScalingCurve(label)
    for n in sizes:
        if last is not None and n == train.n:
            curve.points.append(last)
        else:
            curve.points.append(measure_point(method, model, train.subset(np.arange(n)),
                                              predict=False))
    return finish_curve(curve)


def check_settings(candidates, n: int, model) -> None:
    """Reject settings that cannot make sense for ``n`` compared points of ``model``.

    A setting whose ``describe()`` reports an ``inducing`` count of ``n`` or
    more is no approximation: it costs more than Exact on the same points.
    Kernel options must be taken by some kernel of the model.
    """
    for cand in candidates:
        apply_kernel_options(model, cand.kernel_options, cand.label)
        m = cand.method.describe().get("inducing")
        if isinstance(m, int) and m >= n:
            raise ValueError(
                f"method setting {cand.label!r}: {m} inducing points for {n} compared "
                f"(training) points; the count must be below n, for example m={max(n // 8, 1)}"
            )


def run_benchmark(series: Series, model, candidates, *, tolerance: Tolerance | None = None,
                  seed: int = 0, reference_max_n: int = DEFAULT_REFERENCE_MAX_N,
                  holdout: Holdout | None = None, fit: bool = True, restarts: int = 0,
                  scaling_steps: int = 4, zoom_points: int = 400,
                  progress=None) -> BenchmarkResult:
    """Compare method settings with the reference on one series and recommend one.

    Parameters
    ----------
    series : Series
    model : Model
        Kernel and starting hyperparameters; every fit starts from here.
    candidates : sequence of Candidate
        From :func:`longwave.benchmark.parse_methods`.
    tolerance : Tolerance, optional
        Default ``Tolerance.from_nats(0.01)``.
    seed : int, default 0
        Seeds the hold-out placement and the fits' restarts.
    reference_max_n : int, default 5000
        Largest stretch for an Exact reference.
    holdout : Holdout, optional
        Default ``Holdout()``: three 2 % gaps and the final 5 %.
    fit : bool, default True
        Fit each setting's own hyperparameters (off: score held-out data at the
        reference's, and rank by one evaluation's cost).
    restarts : int, default 0
        Extra optimiser starts per fit.
    scaling_steps : int, default 4
        Prefix sizes (halving) timed for the time-against-n figure; 0 skips.
    zoom_points : int, default 400
        Grid size of the overlay window.
    progress : callable, optional
        Called with one line of text per step.

    Returns
    -------
    BenchmarkResult
    """
    say = progress or (lambda _msg: None)
    tolerance = tolerance or Tolerance.from_nats()
    holdout = holdout or Holdout()
    candidates = list(candidates)
    plan = choose_reference(model, series, reference_max_n)
    stretch = series.subset(np.arange(plan.start, plan.stop))
    labels = holdout.split(stretch.n, seed)
    split = _Split(stretch, labels, stretch.subset(np.flatnonzero(labels == 0)))
    train = split.train
    if train.n < 3:
        raise ValueError(f"need at least 3 training points after hold-out, got {train.n}")
    check_settings(candidates, train.n, model)
    say(f"reference {plan.label}: {plan.reason}")
    ref_fit, ref_cost = time_call(fit_model, model, train, method=plan.method,
                                  restarts=restarts, seed=seed)
    ref_model = ref_fit.model
    say(f"reference fitted in {ref_cost.seconds:.3g} s: {ref_model!r}")
    ref_post, ref_pred = _predict(plan.method, ref_model, train, stretch.t)
    full_lml = (plan.method.evaluate(ref_model, series).value if plan.whole_series
                else float("nan"))
    zoom_t = _zoom_grid(split, zoom_points)
    zr = ref_post.predict(zoom_t)
    curves = {"reference": {"mean": zr.mean.tolist(), "std": zr.std.tolist()}}
    scorer = _Scorer(split, series, model, ref_model, ref_pred, zoom_t, fit=fit,
                     restarts=restarts, seed=seed, full_lml=full_lml)
    results = []
    for cand in candidates:
        res = scorer.score(cand, ref_fit.log_marginal_likelihood, curves)
        say(f"{cand.label:>24s}: {res.status}"
            + (f" |dlml|/n={abs(res.lml_diff_per_point):.3g} KL={res.mean_kl:.3g} "
               f"cost={res.cost_seconds:.3g} s" if res.status == "ok" else f" ({res.message})"))
        results.append(res)
    scaling = []
    if scaling_steps > 0:
        scaling.append(_prefix_scaling(plan.method, ref_model, train,
                                       f"reference ({plan.label})", scaling_steps))
        for cand, res in zip(candidates, results):
            if res.status == "ok":
                last = ScalingPoint(train.n, res.evaluate_seconds, res.evaluate_peak_mb)
                own = apply_kernel_options(ref_model, cand.kernel_options, cand.label)
                scaling.append(_prefix_scaling(cand.method, own, train, cand.label,
                                               scaling_steps, last))
    inside = (stretch.t >= zoom_t[0]) & (stretch.t <= zoom_t[-1])
    zoom = Zoom(t=zoom_t.tolist(), data_t=stretch.t[inside].tolist(),
                data_y=stretch.y[inside].tolist(), data_heldout=labels[inside].tolist(),
                curves=curves)
    reference = ReferenceSummary(
        label=plan.label, reason=plan.reason, start=plan.start, stop=plan.stop,
        full_n=series.n, t_start=float(stretch.t[0]), t_stop=float(stretch.t[-1]),
        n_train=train.n, n_interpolation=int((labels == 1).sum()),
        n_forecast=int((labels == 2).sum()), params=ref_model.values(),
        lml=ref_fit.log_marginal_likelihood, full_lml=full_lml,
        fit_converged=ref_fit.converged, fit_seconds=ref_cost.seconds,
        fit_peak_mb=ref_cost.peak_mb,
        interpolation=_heldout(ref_post, *split.part(1)),
        forecast=_heldout(ref_post, *split.part(2)),
    )
    config = {
        "n": series.n, "model": repr(model), "methods": [c.label for c in candidates],
        "tolerance": asdict(tolerance), "seed": seed, "reference_max_n": reference_max_n,
        "holdout": asdict(holdout), "fit": fit, "restarts": restarts,
    }
    return BenchmarkResult(reference, results, choose_setting(results, tolerance, plan.label),
                           zoom, scaling, config)
