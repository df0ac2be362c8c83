"""Built-in demonstrations, each a library call behind ``longwave demo``."""

from .single import SingleSeriesDemo, run_single_series_demo

__all__ = ["SingleSeriesDemo", "run_single_series_demo"]
