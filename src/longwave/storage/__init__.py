"""HDF5 storage: survey files, long single series, prediction grids and result stores.

The only package that imports ``h5py``. Layouts are documented in
``docs/layouts.md``; every file carries ``longwave_format`` and
``format_version`` root attributes.
"""

from ._h5 import LayoutError
from .records import STATUSES, ObjectResult
from .results import ResultStore, ResultTable
from .survey import ObjectData, SurveyFile, SurveyWriter, write_survey

__all__ = [
    "STATUSES",
    "LayoutError",
    "ObjectData",
    "ObjectResult",
    "ResultStore",
    "ResultTable",
    "SurveyFile",
    "SurveyWriter",
    "write_survey",
]
