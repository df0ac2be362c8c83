"""Covariance functions (kernels): dense form, state-space form, derivatives."""

from .base import Kernel, Primitive, Product, Sum
from .cosine import Cosine
from .matern import Matern12, Matern32, Matern52
from .oscillator import Oscillator
from .periodic import Periodic
from .squared_exp import SquaredExp
from .statespace import StateSpace

__all__ = [
    "Kernel",
    "Primitive",
    "Sum",
    "Product",
    "StateSpace",
    "Matern12",
    "Matern32",
    "Matern52",
    "Cosine",
    "Oscillator",
    "Periodic",
    "SquaredExp",
]
