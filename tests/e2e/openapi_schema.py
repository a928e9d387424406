"""The OpenAPI document as JSON Schema, for the e2e tests that validate live responses.

OpenAPI 3.0 schemas are JSON Schema with a few words of their own; the one used here is
"nullable", which becomes anyOf [schema, null]."""
import json

import jsonschema
import yaml


def to_json_schema(x):
    if isinstance(x, list):
        return [to_json_schema(v) for v in x]
    if not isinstance(x, dict):
        return x
    x = {k: to_json_schema(v) for k, v in x.items()}
    if x.pop("nullable", False):
        return {"anyOf": [x, {"type": "null"}]}
    return x


def load(spec_path):
    """(document, resolver) of the spec at spec_path, YAML read as JSON would be."""
    spec = json.loads(json.dumps(yaml.safe_load(open(spec_path)), default=str))
    doc = to_json_schema(spec)
    return doc, jsonschema.RefResolver.from_schema(doc)
