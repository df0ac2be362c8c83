"""Hyperparameters: value, positivity, bounds, fixing and priors.

A :class:`Param` is a specification, immutable; fitting returns new objects.
Positive hyperparameters (every kernel amplitude, scale, period, the excess
noise) are optimised as ``log(value)``; a location such as the constant mean
is optimised as it is. The optimiser's coordinate for a parameter is called
its *free coordinate* throughout the code.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np


@dataclass(frozen=True)
class LogNormal:
    """Gaussian prior on ``log(value)``: median ``median``, log-width ``width``.

    The log-density is ``-0.5 * ((log(value) - log(median)) / width)**2`` up to a
    constant, expressed in the free coordinate ``log(value)``.
    """

    median: float
    width: float

    def __post_init__(self):
        if not (self.median > 0 and math.isfinite(self.median)):
            raise ValueError(f"LogNormal median must be positive and finite, got {self.median}")
        if not (self.width > 0 and math.isfinite(self.width)):
            raise ValueError(f"LogNormal width must be positive and finite, got {self.width}")

    def logpdf(self, coordinate: float) -> tuple[float, float]:
        """Log-density and its derivative with respect to the free coordinate."""
        z = (coordinate - math.log(self.median)) / self.width
        return -0.5 * z * z - math.log(self.width * math.sqrt(2 * math.pi)), -z / self.width


@dataclass(frozen=True)
class Normal:
    """Gaussian prior on a location parameter (such as the mean), in its own units."""

    loc: float
    scale: float

    def __post_init__(self):
        if not (self.scale > 0 and math.isfinite(self.scale)):
            raise ValueError(f"Normal scale must be positive and finite, got {self.scale}")

    def logpdf(self, coordinate: float) -> tuple[float, float]:
        z = (coordinate - self.loc) / self.scale
        return -0.5 * z * z - math.log(self.scale * math.sqrt(2 * math.pi)), -z / self.scale


@dataclass(frozen=True)
class Param:
    """One hyperparameter.

    Parameters
    ----------
    value : float
        Current (initial) value.
    bounds : tuple of (float or None, float or None), optional
        Lower and upper bounds in natural units, enforced by the optimiser.
        ``None`` leaves a side open. Default: both open.
    fixed : bool, default False
        Keep the value during fitting.
    prior : LogNormal or Normal, optional
        Log-prior added to the objective during fitting.
    positive : bool, optional
        Positive parameters must be > 0 and are optimised as ``log(value)``.
        Default ``None``: decided by where the parameter is used (kernel
        hyperparameters and the excess noise are positive, the mean is not),
        so ``fixed(-0.5)`` works as a mean; until then it counts as positive
        for :attr:`coordinate`, and its positivity is checked when it is used.

    Examples
    --------
    >>> Param(2.0, bounds=(0.1, 10.0)).coordinate
    0.6931471805599453
    """

    value: float
    bounds: tuple = (None, None)
    fixed: bool = False
    prior: object = None
    positive: bool | None = None
    name: str = field(default="", compare=False)

    def __post_init__(self):
        value = float(self.value)
        object.__setattr__(self, "value", value)
        label = f"hyperparameter {self.name!r}" if self.name else "hyperparameter"
        if not math.isfinite(value):
            raise ValueError(f"{label} must be finite, got {value}")
        if self.positive and value <= 0:
            raise ValueError(
                f"{label} must be positive, got {value}; pass a value > 0 "
                "(it is optimised as its logarithm)"
            )
        lo, hi = self.bounds
        if lo is not None and hi is not None and lo >= hi:
            raise ValueError(f"{label}: lower bound {lo} is not below upper bound {hi}")
        if self.positive and lo is not None and lo <= 0:
            raise ValueError(f"{label}: lower bound must be positive, got {lo}")
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            raise ValueError(f"{label}: value {value} lies outside its bounds {self.bounds}")

    @property
    def coordinate(self) -> float:
        """The optimiser's coordinate: ``log(value)`` if positive, else ``value``."""
        return math.log(self.value) if self.positive is not False else self.value

    def coordinate_bounds(self) -> tuple:
        """Bounds in the optimiser's coordinate (``None`` where open)."""
        f = math.log if self.positive is not False else float
        lo, hi = self.bounds
        return (None if lo is None else f(lo), None if hi is None else f(hi))

    def with_coordinate(self, coordinate: float) -> Param:
        if self.positive is False:
            return replace(self, value=float(coordinate))
        value = math.exp(coordinate)
        # exp(log(b)) can land an ulp outside a bound b; an optimiser sitting on a
        # bound must not then fail the bounds check.
        lo, hi = self.bounds
        if lo is not None and value < lo <= value * (1 + 1e-12):
            value = float(lo)
        if hi is not None and hi < value <= hi * (1 + 1e-12):
            value = float(hi)
        return replace(self, value=value)


def as_param(spec, name: str, positive: bool = True) -> Param:
    """Turn a float or a :class:`Param` into a named :class:`Param`."""
    if isinstance(spec, Param):
        # One replace, so that a failed check names the parameter.
        return replace(spec, positive=positive, name=name)
    if isinstance(spec, bool) or not isinstance(spec, (int, float, np.floating, np.integer)):
        raise TypeError(
            f"hyperparameter {name!r} must be a number or a longwave.Param, got "
            f"{type(spec).__name__}; for example {name}=1.5 or {name}=Param(1.5, fixed=True)"
        )
    return Param(float(spec), positive=positive, name=name)


def fixed(value: float) -> Param:
    """Shorthand for ``Param(value, fixed=True)``."""
    return Param(value, fixed=True)
