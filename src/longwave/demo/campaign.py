"""A simulated monitoring campaign: many sources, several variability classes.

Scenario (our own): a small robotic telescope watches one crowded field for
one observing season. Each source is sampled on the nights the field is up
and the sky is clear, a handful of times per night, with photometric error
bars that grow for fainter sources; a few points per source are ruined by
passing satellites or cosmic rays (outliers). Every class draws its
variability from a known kernel, so fitted hyperparameters can be checked
against the truth.

Written as a survey file (:meth:`Campaign.write`), the truth travels with the
data as per-object metadata (``class``, ``kernel``, ``true_amplitude``,
``true_scale``, ``true_mean``, ``true_excess_noise``, ``n_outliers``), so a
survey made by ``longwave simulate`` can be checked by anyone who fits it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..kernels import Matern12, Matern32, Oscillator
from ..model import Model
from ..simulate import simulate_series
from ..storage import SurveyFile, write_survey
from .cadence import night_cadence

#: Truth columns a campaign carries, in the order they are stored as metadata.
TRUTH_KEYS = ("amplitude", "scale", "mean", "excess_noise")
#: Further truth columns, stored only when a class with such parameters is
#: simulated (NaN for the other sources).
EXTRA_TRUTH_KEYS = ("frequency", "quality")


@dataclass(frozen=True)
class VariabilityClass:
    """One class of sources: a kernel family and ranges for its hyperparameters.

    Every range is sampled log-uniformly. ``scale`` is ``None`` for kernels
    without one; ``extra`` holds the ranges of their other parameters, as
    ``(name, (low, high))`` pairs.
    """

    name: str
    kernel: type
    amplitude: tuple[float, float]
    scale: tuple[float, float] | None
    weight: float
    extra: tuple = ()

    @property
    def spec(self) -> str:
        """The model specification naming this class's kernel (``"matern32"``, ...)."""
        return self.kernel.default_label


CLASSES = (
    VariabilityClass("flickering", Matern32, (0.05, 0.3), (0.3, 3.0), 0.4),
    VariabilityClass("wandering", Matern32, (0.1, 0.5), (5.0, 30.0), 0.4),
    VariabilityClass("random_walk", Matern12, (0.1, 0.4), (10.0, 80.0), 0.2),
)

#: Classes available by name but not in the default mix. ``pulsating``: a
#: damped, randomly driven oscillation with periods of 0.5-5 days (angular
#: frequency 2 pi / period) that stays coherent for 2-20 radians per cycle
#: (quality factor). A survey-wide fit needs a starting frequency near each
#: source's own, which a single specification cannot give; so the demo,
#: which fits one specification to every source, leaves this class out.
OPTIONAL_CLASSES = (
    VariabilityClass("pulsating", Oscillator, (0.05, 0.3), None, 0.2,
                     extra=(("frequency", (2 * np.pi / 5.0, 2 * np.pi / 0.5)),
                            ("quality", (2.0, 20.0)))),
)


def select_classes(names) -> tuple[VariabilityClass, ...]:
    """The built-in classes named in ``names`` (a sequence or a comma-separated string).

    Examples
    --------
    >>> [c.name for c in select_classes("wandering,flickering")]
    ['wandering', 'flickering']
    """
    if isinstance(names, str):
        names = [n.strip() for n in names.split(",") if n.strip()]
    known = {c.name: c for c in CLASSES + OPTIONAL_CLASSES}
    unknown = [n for n in names if n not in known]
    if unknown or not names:
        raise ValueError(f"variability classes must be among {', '.join(known)}, got "
                         f"{', '.join(unknown) or 'none'}; for example "
                         "classes='flickering,random_walk'")
    return tuple(known[n] for n in names)


@dataclass
class Campaign:
    """Simulated survey data and the truth behind it.

    Attributes
    ----------
    ids : list of str
    times, values, errors : list of ndarray
        One array per source.
    classes : ndarray of str (fixed-width unicode)
    truth : dict of str to ndarray
        True ``amplitude``, ``scale``, ``mean``, ``excess_noise`` per source.
    n_outliers : ndarray of int
    kernels : ndarray of str
        Specification name of each source's true kernel (``matern32``, ...).
    """

    ids: list
    times: list
    values: list
    errors: list
    classes: np.ndarray
    truth: dict
    n_outliers: np.ndarray
    kernels: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.ids)

    def meta(self) -> dict:
        """Per-object metadata columns holding the truth (see the module docstring)."""
        out = {"class": self.classes.astype(str),
               "kernel": (self.kernels if self.kernels is not None
                          else np.full(len(self), "")).astype(str)}
        out.update({f"true_{k}": np.asarray(self.truth[k], float)
                    for k in TRUTH_KEYS + EXTRA_TRUTH_KEYS if k in self.truth})
        out["n_outliers"] = np.asarray(self.n_outliers, np.int64)
        return out

    def write(self, path, *, overwrite: bool = False) -> None:
        """Write the campaign as a survey file, the truth as metadata.

        Parameters
        ----------
        path : str or Path
            New ``.h5`` file (see :func:`longwave.storage.write_survey`).
        overwrite : bool, default False
        """
        write_survey(path, self.ids, self.times, self.values, self.errors, meta=self.meta(),
                     overwrite=overwrite)


def read_truth(path) -> dict:
    """The truth columns of a survey file written by :meth:`Campaign.write`.

    Returns
    -------
    dict of str to ndarray
        ``id``, ``class``, ``kernel``, ``amplitude``, ``scale``, ``mean``,
        ``excess_noise``, ``n_outliers`` and ``n`` (points), one entry per object;
        also ``frequency`` and ``quality`` when pulsating sources were simulated.
        A parameter a source's kernel lacks is NaN.

    Raises
    ------
    ValueError
        If the file lacks the truth metadata (it was not simulated here).
    """
    with SurveyFile(path) as sf:
        missing = [k for k in ("class", *(f"true_{k}" for k in TRUTH_KEYS))
                   if k not in sf.meta_names]
        if missing:
            raise ValueError(f"{path} has no simulated truth: metadata {missing} missing (it "
                             f"holds {sf.meta_names}); make the survey with `longwave "
                             "simulate` or Campaign.write")
        # Metadata come with the points; batches read each column in one go.
        rows = [obj.meta for batch in sf.iter_batches(batch_size=4096) for obj in batch]
        out = {"id": sf.ids.astype(str), "n": sf.n_points.copy()}
        names = set(sf.meta_names)
    out["class"] = np.array([r["class"] for r in rows], dtype=str)
    out["kernel"] = np.array([r.get("kernel", "") for r in rows], dtype=str)
    for k in TRUTH_KEYS + EXTRA_TRUTH_KEYS:
        if f"true_{k}" in names:
            out[k] = np.array([r[f"true_{k}"] for r in rows], dtype=float)
    out["n_outliers"] = np.array([r.get("n_outliers", 0) for r in rows], dtype=np.int64)
    return out


def simulate_campaign(n_objects: int = 1000, *, points=(150, 400), days: float = 150.0,
                      outlier_fraction: float = 0.01, classes=CLASSES,
                      clear_fraction: float = 0.75, night_hours: float = 7.0,
                      seed: int = 0) -> Campaign:
    """Simulate a season-long monitoring campaign.

    Parameters
    ----------
    n_objects : int, default 1000
    points : tuple of int, default (150, 400)
        Range of the number of observations per source.
    days : float, default 150.0
        Season length.
    outlier_fraction : float, default 0.01
        Fraction of points replaced by outliers 5-15 error bars off.
    classes : sequence of VariabilityClass
    clear_fraction : float, default 0.75
        Fraction of nights clear enough to observe.
    night_hours : float, default 7.0
        Observing window each night.
    seed : int, default 0

    Returns
    -------
    Campaign
    """
    if n_objects < 1:
        raise ValueError(f"n_objects must be at least 1, got {n_objects}")
    lo, hi = points
    if not 2 <= lo <= hi:
        raise ValueError(f"points must be (low, high) with 2 <= low <= high, got {points}")
    if not (days > 0 and 0 <= outlier_fraction < 1):
        raise ValueError(f"days must be positive and outlier_fraction in [0, 1), got "
                         f"days={days}, outlier_fraction={outlier_fraction}")
    rng = np.random.default_rng(seed)
    weights = np.array([c.weight for c in classes], dtype=float)
    which = rng.choice(len(classes), size=n_objects, p=weights / weights.sum())
    out = Campaign([], [], [], [], np.empty(n_objects, dtype="U16"),
                   {k: np.full(n_objects, np.nan) for k in TRUTH_KEYS},
                   np.zeros(n_objects, dtype=np.int64), np.empty(n_objects, dtype="U16"))
    for i in range(n_objects):
        cls = classes[which[i]]
        n = int(rng.integers(lo, hi + 1))
        t = night_cadence(n, years=days / 365.25, season_fraction=1.0,
                          night_fraction=clear_fraction, night_hours=night_hours, rng=rng)
        amp = float(np.exp(rng.uniform(*np.log(cls.amplitude))))
        values = {"amplitude": amp}
        # Draw order kept as before optional classes existed: amplitude, scale, then
        # extras, so the built-in classes' seeds give the same sources as ever.
        if cls.scale is not None:
            values["scale"] = float(np.exp(rng.uniform(*np.log(cls.scale))))
        for key, bounds in cls.extra:
            values[key] = float(np.exp(rng.uniform(*np.log(bounds))))
        brightness = rng.uniform(12.0, 18.0)
        base_err = 0.005 * 10 ** (0.2 * (brightness - 12.0))  # fainter: larger errors
        err = base_err * rng.uniform(0.8, 1.5, n)
        excess = 0.5 * base_err
        model = Model(cls.kernel(**values), mean=brightness, excess_noise=excess)
        series, _ = simulate_series(model, t, err, rng=rng)
        y = series.y.copy()
        bad = rng.random(n) < outlier_fraction
        y[bad] += rng.choice([-1.0, 1.0], bad.sum()) * rng.uniform(5, 15, bad.sum()) * err[bad]
        out.ids.append(f"src{i:06d}")
        out.times.append(series.t.copy())
        out.values.append(y)
        out.errors.append(series.err.copy())
        out.classes[i] = cls.name
        out.kernels[i] = cls.spec
        for key, val in {**values, "mean": brightness, "excess_noise": excess}.items():
            if key not in out.truth:
                out.truth[key] = np.full(n_objects, np.nan)
            out.truth[key][i] = val
        out.n_outliers[i] = int(bad.sum())
    return out


@dataclass
class LongSeries:
    """One long series of the campaign and its truth.

    Attributes
    ----------
    t, y, err : ndarray of shape (n,)
    truth : dict of str to float
        ``amplitude``, ``scale``, ``mean``, ``excess_noise``.
    kernel : str
        Specification name of the true kernel.
    """

    t: np.ndarray
    y: np.ndarray
    err: np.ndarray
    truth: dict
    kernel: str


def simulate_long_series(n: int = 20_000, *, days: float = 150.0, amplitude: float = 0.2,
                         scale: float = 1.0, brightness: float = 14.0, kernel=Matern32,
                         clear_fraction: float = 0.75, night_hours: float = 7.0,
                         seed: int = 1) -> LongSeries:
    """A bright, densely monitored source of the same campaign (same nights, same season).

    The cadence is the campaign's: the same season, clear-night fraction and
    nightly window, only with many more visits a night, as a campaign gives
    its priority target. This is the series the demo benchmarks methods on.

    Parameters
    ----------
    n : int, default 20000
    days, clear_fraction, night_hours : float
        As for :func:`simulate_campaign`.
    amplitude, scale, brightness : float
        True kernel amplitude and scale (days), and mean magnitude.
    kernel : kernel class, default Matern32
    seed : int, default 1

    Returns
    -------
    LongSeries
    """
    if n < 10:
        raise ValueError(f"a long series needs at least 10 points, got n={n}")
    rng = np.random.default_rng(seed)
    t = night_cadence(int(n), years=days / 365.25, season_fraction=1.0,
                      night_fraction=clear_fraction, night_hours=night_hours, rng=rng)
    base_err = 0.005 * 10 ** (0.2 * (brightness - 12.0))
    err = base_err * rng.uniform(0.8, 1.5, t.size)
    excess = 0.5 * base_err
    model = Model(kernel(amplitude=amplitude, scale=scale), mean=brightness, excess_noise=excess)
    series, _ = simulate_series(model, t, err, rng=rng)
    truth = {"amplitude": amplitude, "scale": scale, "mean": brightness, "excess_noise": excess}
    return LongSeries(series.t.copy(), series.y.copy(), series.err.copy(), truth,
                      kernel.default_label)
