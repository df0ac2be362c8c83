"""Survey runner: fit every object of a survey, serially or on dask.distributed.

``fit_object`` (one object, numpy arrays in, a record out) and the model
specification parser import no dask; :func:`run_survey` and
:func:`fit_series` are loaded on first use, so ``import longwave.survey`` stays
light.
"""

from .initial import DataScales, build_model, param_names
from .modelfile import load_model_file
from .pipeline import (
    AUTO,
    GridPrediction,
    ObjectFit,
    PipelineConfig,
    PredictionGrid,
    choose_method,
    fit_batch,
    fit_object,
)
from .spec import ModelSpec, ParamSpec, SpecError, kernel_registry, parse_spec

_LAZY = {"run_survey": ".runner", "SurveySummary": ".summary", "fit_series": ".single"}


def __getattr__(name):
    # The runner imports dask; load it only when asked for.
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name], __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "AUTO",
    "DataScales",
    "PredictionGrid",
    "GridPrediction",
    "ModelSpec",
    "ObjectFit",
    "ParamSpec",
    "PipelineConfig",
    "SpecError",
    "SurveySummary",
    "build_model",
    "choose_method",
    "fit_batch",
    "fit_object",
    "fit_series",
    "kernel_registry",
    "load_model_file",
    "param_names",
    "parse_spec",
    "run_survey",
]
