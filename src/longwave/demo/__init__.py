"""Built-in demonstrations, each a library call behind ``longwave demo``.

:func:`run_demo` is the full job (survey, recovery, benchmark, report);
:func:`run_single_series_demo` fits one long series. The campaign simulator
behind both is :func:`simulate_campaign`; :func:`inspect_results` reads a
result file back (``longwave inspect``).
"""

from .campaign import (
    CLASSES,
    Campaign,
    LongSeries,
    VariabilityClass,
    read_truth,
    select_classes,
    simulate_campaign,
    simulate_long_series,
)
from .single import SingleSeriesDemo, run_single_series_demo
from .survey import DemoOutcome, run_demo

__all__ = [
    "CLASSES",
    "Campaign",
    "DemoOutcome",
    "LongSeries",
    "SingleSeriesDemo",
    "VariabilityClass",
    "read_truth",
    "run_demo",
    "run_single_series_demo",
    "select_classes",
    "simulate_campaign",
    "simulate_long_series",
]
