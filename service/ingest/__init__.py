"""Parse an assessment request (JSON body or CSV long format) into arrays for the core.

Framework-free: the REST service and the CLI's offline mode both use it. Every problem found is
reported with the field it concerns (``series[3].fitted``, ``series[0].holdout.level``), as many
as :data:`MAX_ERRORS` at a time, by raising :class:`RequestInvalid`; a body that is not JSON or
CSV at all raises its subclass :class:`RequestUnparseable`.

Numbers are checked per array, not per value in Python: a series' values are joined into one
flat list whose element types are collected in one pass, converted by numpy in one call, and
checked (non-finite values, lengths, interval bounds, timestamp order) with array operations.

Modules:

- :mod:`~service.ingest.shape`: the request's fields (names, kinds, bounds, descriptions),
  defined once for the parser, the OpenAPI document and the report;
- :mod:`~service.ingest.request`: limits, the error types, the error collector, the envelope
  and series columns both parsers read into, :class:`AssessmentRequest`;
- :mod:`~service.ingest.fields`: readers for scalar fields (names, integers, policy, labels);
- :mod:`~service.ingest.arrays`: the vectorised number and timestamp array checks;
- :mod:`~service.ingest.json_body`: :func:`load_json`, :func:`parse_json_request`;
- :mod:`~service.ingest.csv_body`: :func:`parse_csv_request`, with
  :mod:`~service.ingest.csv_rows` reading its rows;
- :mod:`~service.ingest.assemble`: the shared last steps (interval bounds, the core's batch)
  and :func:`core_error_loc`.

Everything other code uses is importable from ``service.ingest`` itself.
"""

from __future__ import annotations

from .assemble import core_error_loc
from .csv_body import CSV_OPTIONAL, CSV_PARAMS, CSV_REQUIRED, parse_csv_request
from .json_body import load_json, parse_json_request
from .request import (
    MAX_ABS_VALUE,
    MAX_ERRORS,
    MAX_NAME_LENGTH,
    NUL_MESSAGE,
    AssessmentRequest,
    RequestInvalid,
    RequestUnparseable,
)
from .shape import HOLDOUT_FIELDS, SERIES_FIELDS, TOP_LEVEL_FIELDS

__all__ = [
    "CSV_OPTIONAL",
    "CSV_PARAMS",
    "CSV_REQUIRED",
    "HOLDOUT_FIELDS",
    "MAX_ABS_VALUE",
    "MAX_ERRORS",
    "MAX_NAME_LENGTH",
    "NUL_MESSAGE",
    "SERIES_FIELDS",
    "TOP_LEVEL_FIELDS",
    "AssessmentRequest",
    "RequestInvalid",
    "RequestUnparseable",
    "core_error_loc",
    "load_json",
    "parse_csv_request",
    "parse_json_request",
]
