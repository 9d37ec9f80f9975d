"""The API's response models and the typed result describe one shape: every field of the typed
result is in the schema with a compatible type and every property of the schema is a field, and
every example answer and every demo output validates against the models and reads back into
the typed result unchanged, byte for byte."""

from __future__ import annotations

import typing
from pathlib import Path

import orjson
import pytest

from service import results
from service.api import schemas
from service.api.openapi import load_examples
from service.core.registry import all_checks

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = [
    e
    for e in load_examples(ROOT / "openapi_examples")
    if e.get("status", 201) < 400 and "response_body" in e
]


def demo_documents(tmp: Path) -> list[dict]:
    """The demo's files assessed offline, each given an id and a time as the API would."""
    from service import demo
    from service.cli.assess import assess_offline
    from service.cli.inputs import Overrides, load_input

    # The CSV copy with the options the demo's README gives for it.
    csv = Overrides(model="wrenfield-pickups-weekday", version="demo-2026.12", season_length=7)
    out = []
    for path in demo.write_demo(str(tmp)):
        if not path.endswith((".json", ".csv")):
            continue
        doc = assess_offline(load_input(path, csv if path.endswith(".csv") else Overrides()))
        d = doc.to_dict()
        d.update(id="b0c1d2e3", created_at="2026-12-01T06:00:00+00:00", stored=True)
        out.append(d)
    return out


@pytest.fixture(scope="module")
def documents(tmp_path_factory) -> list[dict]:
    docs = [e["response_body"] for e in EXAMPLES]
    return docs + demo_documents(tmp_path_factory.mktemp("demo"))


def test_there_are_examples_and_demo_outputs(documents):
    assert len(EXAMPLES) >= 4 and len(documents) >= len(EXAMPLES) + 4


def test_every_document_validates_and_reads_back_byte_for_byte(documents):
    for d in documents:
        raw = orjson.dumps(d)
        schemas.AssessmentDocument.model_validate_json(raw, strict=True)
        doc = results.AssessmentDocument.from_dict(orjson.loads(raw))
        assert orjson.dumps(doc.to_dict()) == raw


def _json_type(schema: dict, defs: dict) -> set[str]:
    """The JSON types a property schema allows ("object" for a reference)."""
    if "$ref" in schema:
        return {"object"}
    if "anyOf" in schema:
        return set().union(*(_json_type(s, defs) for s in schema["anyOf"]))
    return {schema["type"]}


def _expected_types(hint) -> set[str]:
    base, nullable = results.optional(hint)
    if base is str or base is results.Status:
        out = {"string"}
    elif base is int:
        out = {"integer"}
    elif base is float:
        out = {"number"}
    elif base is bool:
        out = {"boolean"}
    elif base is results.SeriesTable or typing.get_origin(base) is tuple:
        out = {"array"}
    else:
        out = {"object"}
    return out | ({"null"} if nullable else set())


def _keys(cls) -> list[tuple[str, object]]:
    """The typed result's JSON keys of ``cls`` with their types, inline fields in place (the
    registry's sections and fleet statistics for the inline mappings)."""
    out: list[tuple[str, object]] = []
    for f in results.json_fields(cls):
        if f.inline and f.hint is results.AssessmentResult:
            out += _keys(results.AssessmentResult)
        elif f.inline and cls is results.SeriesResult:
            out += [(c.section.key, None) for c in all_checks() if c.section is not None]
        elif f.inline and cls is results.FleetSummary:
            out += [(c.fleet.key, None) for c in all_checks() if c.fleet is not None]
        elif not f.inline:
            out.append((f.name, f.hint))
    return out


@pytest.mark.parametrize(
    "cls",
    [
        results.AssessmentDocument,
        results.PolicyRef,
        results.Reason,
        results.CheckSummary,
        results.FleetSummary,
        results.SeriesResult,
        results.SeriesCheck,
    ],
    ids=lambda c: c.__name__,
)
def test_schema_properties_are_the_typed_fields_in_order(cls):
    doc = schemas.AssessmentDocument.model_json_schema()
    defs = doc.get("$defs", {})
    schema = doc if cls is results.AssessmentDocument else defs[cls.__name__]
    expected = _keys(cls)
    assert list(schema["properties"]) == [k for k, _ in expected]
    # A fleet statistic of a check that applies to some batches only (the baseline
    # comparison) is there only when it applies.
    sometimes = {c.fleet.key for c in all_checks() if c.fleet is not None and c.applies}
    optional = sometimes if cls is results.FleetSummary else set()
    assert schema["required"] == [k for k, _ in expected if k not in optional]
    for key, hint in expected:
        got = _json_type(schema["properties"][key], defs)
        if hint is None:  # a section (null when its check did not run) or a fleet statistic
            assert got <= {"object", "null"}, key
        elif (cls, key) == (results.AssessmentDocument, "created_at"):
            assert got == {"string"} and schema["properties"][key]["format"] == "date-time"
        else:
            assert got == _expected_types(hint), key
    # The document keeps further top-level fields; every nested object is closed.
    assert schema.get("additionalProperties", True) is (cls is results.AssessmentDocument)


def test_statuses_in_the_schema_are_the_typed_values():
    doc = schemas.AssessmentDocument.model_json_schema()
    defs = doc["$defs"]
    assert doc["properties"]["verdict"]["enum"] == list(results.VERDICTS)
    assert defs["SeriesResult"]["properties"]["verdict"]["enum"] == list(results.VERDICTS)
    every = [s.value for s in results.Status]
    assert defs["SeriesCheck"]["properties"]["status"]["enum"] == every
    assert defs["Reason"]["properties"]["status"]["enum"] == every


def test_a_field_the_typed_result_lacks_is_refused_by_the_schema(documents):
    d = orjson.loads(orjson.dumps(documents[0]))
    d["series"][0]["checks"][0]["note"] = "not a field"
    with pytest.raises(ValueError, match="note"):
        schemas.AssessmentDocument.model_validate(d)
    with pytest.raises(ValueError, match="note"):
        results.AssessmentDocument.from_dict(d)
