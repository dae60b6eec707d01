"""Outside check of the OpenAPI document built by server/api/openapi.rs.

openapi-spec-validator 0.9.0 (openapi_spec_validator.validate with OpenAPIV31SpecValidator)
checks tests/reference/openapi.json against the OpenAPI 3.1 specification's schema and rules.
jsonschema (4.26.0, a dependency of the validator; Draft202012Validator with a `referencing`
registry holding the document) then checks real traffic of a running server,
tests/reference/openapi_responses.json, against the schemas the document gives for each
method, path and status:
  - every JSON response against its response schema, as written (open objects) and once more
    with every object schema closed (unevaluatedProperties: false), so that a field the server
    sends but the document does not list fails too;
  - every JSON request body the server accepted (a 2xx) against the request body schema;
  - the document itself as the response of GET /api/openapi.json;
  - every documented JSON success response has at least one real response here.

Both inputs are written by the Rust integration test that serves them (tests/it/openapi.rs):
  GOALSMITH_WRITE_REFERENCE=1 cargo test --test it openapi

Run:  python3 tests/reference/check_openapi.py
      (or tests/reference/.venv/bin/python, with requirements.txt installed)
Writes tests/reference/openapi_validated.json: the SHA-256 of the exact bytes of the document
validated, the validators' versions and what was checked. The Rust test
`api::openapi::tests::document_is_the_validated_one` fails until this is rerun and its verdict
committed whenever the document changes.
"""

import copy
import hashlib
import importlib.metadata
import json
import pathlib
import platform

import jsonschema
from openapi_spec_validator import OpenAPIV31SpecValidator, validate
from referencing import Registry, Resource
from referencing.jsonschema import DRAFT202012

HERE = pathlib.Path(__file__).parent
URI = "urn:goalsmith:openapi"


def pointer(*parts):
    """A JSON pointer (RFC 6901) into the document."""
    return "".join("/" + str(p).replace("~", "~0").replace("/", "~1") for p in parts)


def close(schema):
    """The schema with every object schema that lists properties refusing all others."""
    if isinstance(schema, list):
        return [close(s) for s in schema]
    if not isinstance(schema, dict):
        return schema
    out = dict(schema)
    if "properties" in out:
        out["properties"] = {k: close(v) for k, v in out["properties"].items()}
        if "additionalProperties" not in out and "unevaluatedProperties" not in out:
            out["unevaluatedProperties"] = False
    for key in ("items", "additionalProperties", "unevaluatedProperties", "not"):
        if key in out:
            out[key] = close(out[key])
    for key in ("prefixItems", "oneOf", "anyOf", "allOf"):
        if key in out:
            out[key] = [close(s) for s in out[key]]
    return out


def closed_document(doc):
    """The document with every schema closed: components and the operations' own schemas."""
    doc = copy.deepcopy(doc)
    schemas = doc["components"]["schemas"]
    for name in schemas:
        schemas[name] = close(schemas[name])
    for item in doc["paths"].values():
        for op in item.values():
            bodies = [op.get("requestBody", {})] + list(op["responses"].values())
            for body in bodies:
                for media in body.get("content", {}).values():
                    media["schema"] = close(media["schema"])
    return doc


def validator(doc, at):
    """A 2020-12 validator for the schema at pointer `at` of `doc`, its $refs resolved in it."""
    registry = Registry().with_resource(URI, Resource(contents=doc, specification=DRAFT202012))
    return jsonschema.Draft202012Validator({"$ref": URI + "#" + at}, registry=registry)


def main():
    raw = (HERE / "openapi.json").read_bytes()
    doc = json.loads(raw)
    assert doc["openapi"].startswith("3.1"), doc["openapi"]
    validate(doc, cls=OpenAPIV31SpecValidator)

    closed = closed_document(doc)
    samples = json.loads((HERE / "openapi_responses.json").read_text())
    # The document as its own response.
    samples.append({"method": "get", "path": "/api/openapi.json", "status": 200, "body": doc})

    seen = set()
    requests = 0
    for s in samples:
        method, path, status = s["method"], s["path"], str(s["status"])
        op = doc["paths"][path][method]
        assert status in op["responses"], f"{method} {path}: {status} is not documented"
        at = pointer("paths", path, method, "responses", status, "content", "application/json", "schema")
        for d in (doc, closed):
            errors = sorted(validator(d, at).iter_errors(s["body"]), key=lambda e: list(e.path))
            assert not errors, f"{method} {path} {status}: " + "; ".join(
                f"{list(e.absolute_path)}: {e.message}" for e in errors[:5])
        seen.add((method, path, status))
        if "request" in s and status.startswith("2"):
            at = pointer("paths", path, method, "requestBody", "content", "application/json", "schema")
            errors = list(validator(doc, at).iter_errors(s["request"]))
            assert not errors, f"{method} {path} request: " + "; ".join(e.message for e in errors[:5])
            requests += 1

    documented = {
        (method, path, status)
        for path, item in doc["paths"].items()
        for method, op in item.items()
        for status, r in op["responses"].items()
        if status.startswith("2") and "application/json" in r.get("content", {})
    }
    missing = sorted(documented - seen)
    assert not missing, f"no real response for {missing}"

    versions = {name: importlib.metadata.version(name)
                for name in ("openapi-spec-validator", "jsonschema", "referencing")}
    versions["python"] = platform.python_version()
    verdict = {
        "document": "tests/reference/openapi.json",
        "document_sha256": hashlib.sha256(raw).hexdigest(),
        "valid": True,
        "openapi": doc["openapi"],
        "validators": versions,
        "responses": "tests/reference/openapi_responses.json",
        "responses_sha256": hashlib.sha256((HERE / "openapi_responses.json").read_bytes()).hexdigest(),
        "checked": {
            "responses": len(samples),
            "request_bodies": requests,
            "json_success_responses_covered": len(documented),
        },
    }
    (HERE / "openapi_validated.json").write_text(json.dumps(verdict, indent=2, sort_keys=True) + "\n")
    print(f"valid OpenAPI {doc['openapi']}; {len(samples)} responses and {requests} request bodies "
          f"validated; sha256 {verdict['document_sha256']}")


if __name__ == "__main__":
    main()
