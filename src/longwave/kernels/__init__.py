"""Covariance functions (kernels): dense form, state-space form, derivatives."""

from .base import Kernel, Primitive, Product, Sum
from .matern import Matern12, Matern32, Matern52
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
]
