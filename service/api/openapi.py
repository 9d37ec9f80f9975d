"""The OpenAPI document: generated routes plus the bodies endpoints read themselves and the
worked examples in ``openapi_examples/`` (an invented scenario, see its README)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import orjson
from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi

from .schemas import BODY_SCHEMAS

DEFAULT_EXAMPLES_DIR = Path(__file__).resolve().parents[2] / "openapi_examples"


def examples_dir(configured: str | None) -> Path | None:
    path = Path(configured) if configured else DEFAULT_EXAMPLES_DIR
    return path if (path / "index.json").is_file() else None


def load_examples(directory: Path | None) -> list[dict[str, Any]]:
    """The examples listed in ``index.json``: each with its request (and response) loaded."""
    if directory is None:
        return []
    index = orjson.loads((directory / "index.json").read_bytes())
    out = []
    for item in index.get("examples", []):
        entry = dict(item)
        request_path = directory / item["request"]
        entry["request_body"] = (
            request_path.read_text()
            if item["request"].endswith(".csv")
            else orjson.loads(request_path.read_bytes())
        )
        if item.get("response"):
            entry["response_body"] = orjson.loads((directory / item["response"]).read_bytes())
        out.append(entry)
    return out


def _add_schemas(doc: dict[str, Any]) -> None:
    components = doc.setdefault("components", {}).setdefault("schemas", {})
    for model in BODY_SCHEMAS:
        schema = model.model_json_schema(ref_template="#/components/schemas/{model}")
        for name, sub in schema.pop("$defs", {}).items():
            components.setdefault(name, sub)
        components[model.__name__] = schema


def _add_examples(doc: dict[str, Any], examples: list[dict[str, Any]]) -> None:
    post = doc["paths"]["/v1/assessments"]["post"]
    json_examples: dict[str, Any] = {}
    csv_examples: dict[str, Any] = {}
    ok_examples: dict[str, Any] = {}
    problems: dict[str, dict[str, Any]] = {}
    for ex in examples:
        name = ex["name"]
        if ex.get("status", 201) >= 400:
            problems.setdefault(str(ex["status"]), {})[name] = {
                "summary": ex["summary"],
                "value": ex["response_body"],
            }
            target = csv_examples if ex["request"].endswith(".csv") else json_examples
            target[name] = {"summary": ex["summary"], "value": ex["request_body"]}
            continue
        target = csv_examples if ex["request"].endswith(".csv") else json_examples
        target[name] = {"summary": ex["summary"], "value": ex["request_body"]}
        if "response_body" in ex:
            ok_examples[name] = {"summary": ex["summary"], "value": ex["response_body"]}
    content = post["requestBody"]["content"]
    if json_examples:
        content["application/json"]["examples"] = json_examples
    if csv_examples:
        content["text/csv"]["examples"] = csv_examples
    responses = post["responses"]
    if ok_examples:
        responses["201"].setdefault("content", {}).setdefault("application/json", {})[
            "examples"
        ] = ok_examples
    for status, items in problems.items():
        entry = responses.setdefault(status, {"description": "problem"})
        entry.setdefault("content", {}).setdefault("application/problem+json", {})["examples"] = (
            items
        )


def _add_security(doc: dict[str, Any]) -> None:
    doc.setdefault("components", {})["securitySchemes"] = {
        "bearer": {
            "type": "http",
            "scheme": "bearer",
            "description": "A token with the scope the operation names (submit, read "
            "or admin); admin holds every scope.",
        }
    }
    for path, operations in doc.get("paths", {}).items():
        if path.startswith("/v1/"):
            for operation in operations.values():
                operation["security"] = [{"bearer": []}]


def install_openapi(app: FastAPI, examples: list[dict[str, Any]]) -> None:
    """Replace ``app.openapi`` with a builder that adds body schemas and examples (cached)."""

    def build() -> dict[str, Any]:
        if app.openapi_schema is None:
            doc = get_openapi(
                title=app.title, version=app.version, description=app.description, routes=app.routes
            )
            _add_schemas(doc)
            _add_security(doc)
            _add_examples(doc, examples)
            app.openapi_schema = doc
        return app.openapi_schema

    app.openapi = build  # type: ignore[method-assign]
