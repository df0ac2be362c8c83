"""Benchmark runner: which approximation to pick for a given series.

``run_benchmark`` compares method settings with an exact reference and
recommends the cheapest within a tolerance; ``run_scaling`` times methods
against n; ``time_call`` is the stopwatch the project's bench scripts share.
"""

from .recommend import Recommendation, Tolerance, choose_setting, pareto_front
from .reference import Holdout, choose_reference, largest_stretch
from .runner import BenchmarkResult, run_benchmark
from .scaling import growth_exponent, run_scaling, size_grid
from .settings import Candidate, parse_methods
from .timing import Cost, time_best, time_call

__all__ = [
    "BenchmarkResult",
    "Candidate",
    "Cost",
    "Holdout",
    "Recommendation",
    "Tolerance",
    "choose_reference",
    "growth_exponent",
    "largest_stretch",
    "parse_methods",
    "choose_setting",
    "pareto_front",
    "run_benchmark",
    "run_scaling",
    "size_grid",
    "time_best",
    "time_call",
]
