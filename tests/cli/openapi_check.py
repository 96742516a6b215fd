"""Checks service responses against docs/openapi.yaml with a general-purpose validator: Debian's
python3-jsonschema (Draft 4, which OpenAPI 3.0's schema objects extend) on the document's own
schemas, read with python3-yaml. OpenAPI's `nullable: true` becomes a JSON Schema type union with
"null"; `$ref`s resolve inside the document.

validate(path, method, status, body) returns None when the body matches the schema documented for
that route, method and status (any error status of a route, or of no route, falls back to
components/schemas/Error), else a message saying what does not match.
"""
import copy
import os

import jsonschema
import yaml

_here = os.path.dirname(os.path.abspath(__file__))
with open(os.path.join(_here, "..", "..", "docs", "openapi.yaml")) as f:
    _spec = yaml.safe_load(f)


def _nullable(node):
    if isinstance(node, dict):
        node = {k: _nullable(v) for k, v in node.items()}
        if node.pop("nullable", False) and "type" in node:
            node["type"] = [node["type"], "null"]
        return node
    if isinstance(node, list):
        return [_nullable(v) for v in node]
    return node


_document = _nullable(copy.deepcopy(_spec))
_resolver = jsonschema.RefResolver.from_schema(_document)


def schema_for(path, method, status):
    operation = _document.get("paths", {}).get(path, {}).get(method.lower(), {})
    response = operation.get("responses", {}).get(str(status))
    if response is not None:
        content = response.get("content", {}).get("application/json")
        return content["schema"] if content else None
    if status >= 400:
        return {"$ref": "#/components/schemas/Error"}
    raise KeyError(f"{method} {path} {status} is not documented in docs/openapi.yaml")


def validate(path, method, status, body):
    try:
        schema = schema_for(path.split("?")[0], method, status)
    except KeyError as e:
        return str(e)
    if schema is None:
        return None
    try:
        jsonschema.Draft4Validator(schema, resolver=_resolver).validate(body)
    except jsonschema.ValidationError as e:
        return f"{method} {path} {status}: {e.message} at {list(e.absolute_path)}"
    return None
