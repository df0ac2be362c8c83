"""Fitted against true hyperparameters of a simulated survey, and which kernel won.

The demo fits every object twice, once per candidate kernel, and compares:

* **model choice**: per object, the kernel with the higher log marginal
  likelihood. The candidates have the same number of free hyperparameters,
  so this is the comparison a penalised criterion (AIC, BIC) would make too.
* **recovery**: per class, the fitted hyperparameters *of the true kernel's
  fit* against the truth, as log ratios. Using the true kernel isolates the
  estimation error from the model-choice error, which is reported apart.

Only numpy arrays go in and out, so tests and the report share one code path.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

#: Statuses whose hyperparameters count as a fit (``not_converged`` may sit
#: at a bound; it is still the optimiser's best and is kept, but flagged).
FITTED = ("ok", "not_converged")

#: Log-ratio statistics are robust: median and 1.4826 x median absolute
#: deviation (a normal sigma for Gaussian scatter; common practice).
MAD_TO_SIGMA = 1.4826


@dataclass
class Fits:
    """One kernel's survey results, aligned to the truth's object order.

    Attributes
    ----------
    spec : str
        Model specification (``"matern32"``).
    status : ndarray of str
    lml : ndarray of float
        Log marginal likelihood, NaN when not fitted.
    amplitude, scale : ndarray of float
        Fitted kernel hyperparameters, NaN when not fitted.
    runtime : ndarray of float
    """

    spec: str
    status: np.ndarray
    lml: np.ndarray
    amplitude: np.ndarray
    scale: np.ndarray
    runtime: np.ndarray

    @classmethod
    def from_table(cls, spec: str, table, ids) -> Fits:
        """Columns of a :class:`~longwave.storage.ResultTable` in the order of ``ids``.

        Raises
        ------
        ValueError
            If an id has no row, or the table has no ``<spec>.amplitude`` and
            ``<spec>.scale`` columns.
        """
        index = {s: i for i, s in enumerate(table.id.tolist())}
        missing = [s for s in ids if s not in index]
        if missing:
            raise ValueError(f"{len(missing)} object(s) have no result for model {spec!r}, "
                             f"first {missing[0]!r}; rerun the survey with resume=True")
        names = [f"{spec}.amplitude", f"{spec}.scale"]
        absent = [n for n in names if n not in table.params]
        if absent:
            raise ValueError(f"results for {spec!r} need parameter columns {names}, missing "
                             f"{absent} (stored: {table.param_names})")
        rows = np.array([index[s] for s in ids], dtype=np.int64)
        fitted = np.isin(table.status[rows], FITTED)

        def col(values):
            return np.where(fitted, values[rows], np.nan)

        return cls(spec, table.status[rows].astype(str), col(table.log_marginal_likelihood),
                   col(table.params[names[0]]), col(table.params[names[1]]),
                   table.runtime[rows].astype(float))


@dataclass
class ClassRecovery:
    """Recovery statistics of one variability class.

    Attributes
    ----------
    name, kernel : str
        Class name and its true kernel's specification name.
    count : int
        Objects in the class.
    fitted : int
        Objects whose true-kernel fit produced hyperparameters.
    scale_median, scale_sigma : float
        Median and robust sigma of ``ln(fitted scale / true scale)``.
    amplitude_median, amplitude_sigma : float
        The same for the amplitude.
    preferred_true : float
        Fraction of fitted objects whose true kernel had the higher log
        marginal likelihood.
    """

    name: str
    kernel: str
    count: int
    fitted: int
    scale_median: float
    scale_sigma: float
    amplitude_median: float
    amplitude_sigma: float
    preferred_true: float


@dataclass
class Recovery:
    """The survey-wide comparison.

    Attributes
    ----------
    classes : list of ClassRecovery
    preferred : ndarray of str
        Per object, the specification with the higher log marginal likelihood
        (empty string when neither fit produced one).
    fitted_scale, fitted_amplitude : ndarray of float
        Per object, from the fit with the true kernel.
    """

    classes: list = field(default_factory=list)
    preferred: np.ndarray = field(default_factory=lambda: np.array([], dtype=str))
    fitted_scale: np.ndarray = field(default_factory=lambda: np.array([]))
    fitted_amplitude: np.ndarray = field(default_factory=lambda: np.array([]))

    def table(self) -> str:
        """Plain-text table, one row per class."""
        head = (f"{'class':<12} {'kernel':<9} {'objects':>7} {'fitted':>6} "
                f"{'ln(scale ratio)':>17} {'ln(amp ratio)':>15} {'true kernel won':>15}")
        rows = [head, "-" * len(head)]
        for c in self.classes:
            rows.append(
                f"{c.name:<12} {c.kernel:<9} {c.count:>7d} {c.fitted:>6d} "
                f"{c.scale_median:>+8.3f} ± {c.scale_sigma:<6.3f} "
                f"{c.amplitude_median:>+7.3f} ± {c.amplitude_sigma:<5.3f} "
                f"{100 * c.preferred_true:>14.1f}%")
        rows.append("ln ratios: median ± robust sigma (1.4826 MAD) over the class, fitted with "
                    "the true kernel")
        return "\n".join(rows)


def robust(values) -> tuple[float, float]:
    """Median and 1.4826 x MAD of the finite values (NaN, NaN when there are none)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return float("nan"), float("nan")
    med = float(np.median(v))
    return med, float(MAD_TO_SIGMA * np.median(np.abs(v - med)))


def preferred_kernel(fits: dict) -> np.ndarray:
    """Per object, the specification whose fit has the highest log marginal likelihood.

    Parameters
    ----------
    fits : dict of str to Fits
        Aligned to the same objects.

    Returns
    -------
    ndarray of str
        ``""`` where no fit produced a likelihood.
    """
    specs = list(fits)
    lml = np.vstack([fits[s].lml for s in specs])
    best = np.argmax(np.where(np.isfinite(lml), lml, -np.inf), axis=0)
    out = np.array(specs, dtype=str)[best]
    out[~np.isfinite(lml).any(axis=0)] = ""
    return out


def recover(truth: dict, fits: dict) -> Recovery:
    """Compare the fits with the truth (see the module docstring).

    Parameters
    ----------
    truth : dict of str to ndarray
        From :func:`longwave.demo.campaign.read_truth`: needs ``class``,
        ``kernel``, ``scale``, ``amplitude``.
    fits : dict of str to Fits
        One per candidate kernel, keyed by specification; every true kernel
        of ``truth`` must be among them.

    Returns
    -------
    Recovery
    """
    kernels = np.asarray(truth["kernel"], dtype=str)
    absent = sorted(set(kernels.tolist()) - set(fits))
    if absent:
        raise ValueError(f"true kernels {absent} have no fit; fit the survey with each of "
                         f"them too (fitted: {sorted(fits)})")
    m = kernels.size
    scale, amplitude = np.full(m, np.nan), np.full(m, np.nan)
    for spec, f in fits.items():
        own = kernels == spec
        scale[own], amplitude[own] = f.scale[own], f.amplitude[own]
    preferred = preferred_kernel(fits)
    out = Recovery(preferred=preferred, fitted_scale=scale, fitted_amplitude=amplitude)
    classes = np.asarray(truth["class"], dtype=str)
    for name in dict.fromkeys(classes.tolist()):  # first-seen order
        sel = classes == name
        ok = sel & np.isfinite(scale)
        s_med, s_sig = robust(np.log(scale[ok] / truth["scale"][ok]))
        a_med, a_sig = robust(np.log(amplitude[ok] / truth["amplitude"][ok]))
        won = float(np.mean(preferred[ok] == kernels[ok])) if ok.any() else float("nan")
        out.classes.append(ClassRecovery(name, str(kernels[sel][0]), int(sel.sum()),
                                         int(ok.sum()), s_med, s_sig, a_med, a_sig, won))
    out.classes.sort(key=lambda c: c.name)
    return out
