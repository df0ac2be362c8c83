"""HDF5 storage: survey files, long single series, prediction grids and result stores.

The only package that imports ``h5py``. Layouts are documented in
``docs/layouts.md``; every file carries ``longwave_format`` and
``format_version`` root attributes.
"""

from ._h5 import LayoutError
from .convert import (
    survey_from_csv,
    survey_from_fits,
    survey_from_folder,
    survey_from_parquet,
    survey_from_table,
)
from .predict import Grid, predict_to_hdf5, read_grid
from .records import STATUSES, ObjectResult
from .results import ResultStore, ResultTable
from .series_file import SeriesDataset, SeriesWriter, open_series, write_series
from .survey import ObjectData, SurveyFile, SurveyWriter, write_survey
from .tables import iter_table, iter_table_batches, resolve_columns

__all__ = [
    "STATUSES",
    "Grid",
    "LayoutError",
    "ObjectData",
    "ObjectResult",
    "ResultStore",
    "ResultTable",
    "SeriesDataset",
    "SeriesWriter",
    "SurveyFile",
    "SurveyWriter",
    "iter_table",
    "open_series",
    "predict_to_hdf5",
    "read_grid",
    "iter_table_batches",
    "resolve_columns",
    "survey_from_csv",
    "survey_from_fits",
    "survey_from_folder",
    "survey_from_parquet",
    "survey_from_table",
    "write_series",
    "write_survey",
]
