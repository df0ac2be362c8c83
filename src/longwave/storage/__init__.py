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
from .records import STATUSES, ObjectResult
from .results import ResultStore, ResultTable
from .survey import ObjectData, SurveyFile, SurveyWriter, write_survey
from .tables import iter_table, iter_table_batches, resolve_columns

__all__ = [
    "STATUSES",
    "LayoutError",
    "ObjectData",
    "ObjectResult",
    "ResultStore",
    "ResultTable",
    "SurveyFile",
    "SurveyWriter",
    "iter_table",
    "iter_table_batches",
    "resolve_columns",
    "survey_from_csv",
    "survey_from_fits",
    "survey_from_folder",
    "survey_from_parquet",
    "survey_from_table",
    "write_survey",
]
