"""The assessment result: typed, frozen records and the one serializer of its JSON.

The gate (:mod:`service.core.gate`) returns an :class:`AssessmentResult`; the API answers an
:class:`AssessmentDocument` (the result inside its envelope: id, model, version...); the
client, the CLI and the report read documents back with ``from_dict``. The JSON shape is owned
here: the fields of each record, in order, are the keys of its JSON object, in order (a field
marked ``inline`` writes its entries into the parent object in its place), ``to_dict()`` is the
only serializer and ``from_dict()`` reads the same shape back, raising ``ValueError`` naming
the first field that is off.

Series rows are kept column by column (:class:`SeriesTable`): one column per field of
:class:`SeriesResult` and, per check, one per field of :class:`SeriesCheck`. A typed record of
one series is made only when it is read; serializing a fleet of thousands of series builds its
JSON rows column-wise and makes no record per series.

Only the standard library is imported, so the client and the CLI read results without numpy or
the core. A verdict is statistical evidence under the stated assumptions, not a guarantee.
"""

from ._shape import JsonField, json_fields, optional
from .records import (
    VERDICTS,
    AssessmentDocument,
    AssessmentResult,
    CheckColumns,
    CheckSummary,
    FleetSummary,
    PolicyRef,
    Reason,
    SeriesCheck,
    SeriesColumns,
    SeriesResult,
    SeriesTable,
    Status,
    verdict_blocks,
)
from .serialize import to_dicts

__all__ = [
    "VERDICTS",
    "AssessmentDocument",
    "AssessmentResult",
    "CheckColumns",
    "CheckSummary",
    "FleetSummary",
    "JsonField",
    "PolicyRef",
    "Reason",
    "SeriesCheck",
    "SeriesColumns",
    "SeriesResult",
    "SeriesTable",
    "Status",
    "json_fields",
    "optional",
    "to_dicts",
    "verdict_blocks",
]
