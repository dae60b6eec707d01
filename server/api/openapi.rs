//! `GET /api/openapi.json` (OpenAPI 3.1) and `GET /api/schema/goal.json` (JSON Schema 2020-12).
//!
//! Both are derived from the Rust types the server parses requests into and serialises
//! responses from: each row of [`super::routes::table`] names those types, and `schemars` turns
//! them into schemas here. A type that changes changes the document; a route that is mounted is
//! documented, because the router is built from the same table.

use super::auth::CSRF_HEADER;
use super::error::ErrorBody;
use super::routes::{self, Route, Verb};
use crate::service::accounts::SESSION_COOKIE;
use axum::Json;
use goalsmith_core::goal::GoalDocument;
use schemars::generate::{Contract, SchemaSettings};
use schemars::{JsonSchema, Schema, SchemaGenerator};
use serde::{Deserialize, Serialize};
use serde_json::{Map, Value, json};
use std::collections::BTreeMap;
use std::sync::OnceLock;

/// Makes the schema of one Rust type (a `$ref` into `components/schemas` for named types).
pub type SchemaFn = fn(&mut SchemaGenerator) -> Schema;

/// What a request or response body is.
#[derive(Clone, Copy)]
pub enum Content {
    /// `application/json`, of this type.
    Json(SchemaFn),
    /// Raw bytes of one of these media types.
    Binary(&'static [&'static str]),
    /// Either JSON of this type or raw bytes of one of these media types.
    JsonOrBinary(SchemaFn, &'static [&'static str]),
}

/// A response header the server sets.
#[derive(Debug, Clone, Copy)]
pub enum Header {
    /// Strong ETag of the bytes served.
    ETag,
    /// Where the created revision lives.
    Location,
    /// The download's file name.
    ContentDisposition,
    /// The safety caution sent with every download.
    Caution,
    /// The preview's cost at full colour.
    CostMax,
}

impl Header {
    fn name(self) -> &'static str {
        match self {
            Header::ETag => "ETag",
            Header::Location => "Location",
            Header::ContentDisposition => "Content-Disposition",
            Header::Caution => "X-Goalsmith-Caution",
            Header::CostMax => "X-Cost-Max",
        }
    }

    fn description(self) -> &'static str {
        match self {
            Header::ETag => {
                "Strong ETag: the SHA-256 of the exact bytes served, quoted. Send it back in \
                 If-Match to save, or in If-None-Match to revalidate."
            }
            Header::Location => "Path of the new revision",
            Header::ContentDisposition => "attachment, with a file name naming goal and revision",
            Header::Caution => "The safety caution that goes with everything that moves a robot",
            Header::CostMax => "The cost drawn at the far end of the colour ramp",
        }
    }
}

/// A success response.
pub struct Reply {
    /// HTTP status.
    pub status: u16,
    /// For a person.
    pub description: &'static str,
    /// The body, if any.
    pub content: Option<Content>,
    /// Headers set on it.
    pub headers: &'static [Header],
}

/// What the document says about one route, besides its method and path.
#[derive(Default)]
pub struct Operation {
    /// One line for a person.
    pub summary: &'static str,
    /// Needs no credentials.
    pub public: bool,
    /// Answers 304 to a matching `If-None-Match`.
    pub conditional: bool,
    /// The query string's type (its inline schema, one parameter per property).
    pub query: Option<SchemaFn>,
    /// The request body.
    pub request: Option<Content>,
    /// The success responses.
    pub replies: Vec<Reply>,
    /// Takes a heavy-work permit, so may answer 503 `busy` with `Retry-After: 1`.
    pub heavy: bool,
}

/// The OpenAPI document as served.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
pub struct OpenApiDocument {
    /// The OpenAPI version, `3.1.0`.
    pub openapi: String,
    /// Title, version and description of the API.
    pub info: Info,
    /// Credentials accepted by default: a bearer token or the browser's session cookie.
    pub security: Vec<BTreeMap<String, Vec<String>>>,
    /// Security schemes and the schemas that operations refer to.
    pub components: Components,
    /// Operations by path and method.
    pub paths: BTreeMap<String, Value>,
}

/// `info` of the OpenAPI document.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
pub struct Info {
    /// `goalsmith`.
    pub title: String,
    /// The server's package version.
    pub version: String,
    /// What the API is for, and the safety caution.
    pub description: String,
}

/// `components` of the OpenAPI document.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
pub struct Components {
    /// The ways to authenticate.
    #[serde(rename = "securitySchemes")]
    pub security_schemes: BTreeMap<String, Value>,
    /// Every named schema the operations refer to.
    pub schemas: BTreeMap<String, Value>,
}

/// A JSON Schema document (draft 2020-12), as served at `/api/schema/goal.json`. Only describes
/// the document: the server serves what `schemars` derives from [`GoalDocument`].
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
pub struct JsonSchemaDocument {
    /// The meta-schema, `https://json-schema.org/draft/2020-12/schema`.
    #[serde(rename = "$schema")]
    pub schema: String,
    /// `/api/schema/goal.json`.
    #[serde(rename = "$id")]
    pub id: String,
    /// `GoalDocument`.
    pub title: String,
    /// What a goal document is.
    pub description: String,
    /// `object`.
    #[serde(rename = "type")]
    pub kind: String,
    /// The goal's fields.
    pub properties: BTreeMap<String, Value>,
    /// The fields a goal must have.
    pub required: Vec<String>,
    /// `false`: unknown fields are refused.
    #[serde(rename = "additionalProperties")]
    pub additional_properties: bool,
    /// Schemas the properties refer to.
    #[serde(rename = "$defs")]
    pub defs: BTreeMap<String, Value>,
}

/// The JSON Schema of the goal document.
pub fn goal_schema_value() -> Value {
    let schema = schemars::schema_for!(GoalDocument);
    let mut v = serde_json::to_value(schema).unwrap_or_else(|_| json!({}));
    v["$id"] = json!("/api/schema/goal.json");
    v
}

/// `GET /api/schema/goal.json`.
pub async fn goal_schema() -> Json<Value> {
    Json(goal_schema_value())
}

/// Settings shared by both generators: draft 2020-12 (OpenAPI 3.1's dialect), definitions under
/// `components/schemas`, no `$schema` on each.
fn generator(contract: Contract) -> SchemaGenerator {
    SchemaSettings::draft2020_12()
        .with(|s| {
            s.definitions_path = "/components/schemas".into();
            s.meta_schema = None;
            s.contract = contract;
        })
        .into_generator()
}

/// Requests are described as they are parsed (a field with a default is optional) and responses
/// as they are serialised (a field always written is required), so a type used both ways can
/// need two schemas; the response's then gets this suffix.
const SERVED_SUFFIX: &str = "Served";

const REF_PREFIX: &str = "#/components/schemas/";

/// Rewrites `$ref`s to renamed response-side definitions.
fn rename_refs(v: &mut Value, renamed: &BTreeMap<String, String>) {
    match v {
        Value::Object(m) => {
            if let Some(Value::String(r)) = m.get_mut("$ref")
                && let Some(new) = r
                    .strip_prefix(REF_PREFIX)
                    .and_then(|name| renamed.get(name))
            {
                *r = format!("{REF_PREFIX}{new}");
            }
            for x in m.values_mut() {
                rename_refs(x, renamed);
            }
        }
        Value::Array(a) => a.iter_mut().for_each(|x| rename_refs(x, renamed)),
        _ => {}
    }
}

/// The two generators, and the renames that keep their definitions apart.
struct Schemas {
    request: SchemaGenerator,
    response: SchemaGenerator,
    renamed: BTreeMap<String, String>,
}

impl Schemas {
    fn request(&mut self, f: SchemaFn) -> Value {
        f(&mut self.request).to_value()
    }

    fn response(&mut self, f: SchemaFn) -> Value {
        let mut v = f(&mut self.response).to_value();
        rename_refs(&mut v, &self.renamed);
        v
    }
}

fn binary_schema(media: &str) -> Value {
    json!({"type": "string", "format": "binary", "contentMediaType": media})
}

fn content(c: Content, schema: impl FnOnce(SchemaFn) -> Value) -> Value {
    let mut out = Map::new();
    let media = match c {
        Content::Json(f) => {
            out.insert("application/json".into(), json!({"schema": schema(f)}));
            &[][..]
        }
        Content::Binary(media) => media,
        Content::JsonOrBinary(f, media) => {
            out.insert("application/json".into(), json!({"schema": schema(f)}));
            media
        }
    };
    for m in media {
        out.insert((*m).to_string(), json!({"schema": binary_schema(m)}));
    }
    Value::Object(out)
}

fn headers(list: &[Header]) -> Value {
    let mut out = Map::new();
    for h in list {
        out.insert(
            h.name().into(),
            json!({"description": h.description(), "schema": {"type": "string"}}),
        );
    }
    Value::Object(out)
}

/// A query parameter's schema without the `null` that an `Option` field adds: an absent
/// parameter is how a query says "none".
fn without_null(mut schema: Value) -> Value {
    if let Some(Value::Array(types)) = schema.get_mut("type") {
        types.retain(|t| t != "null");
        if types.len() == 1 {
            let only = types[0].clone();
            schema["type"] = only;
        }
    }
    schema
}

fn query_parameters(s: &mut Schemas, f: SchemaFn) -> Vec<Value> {
    let schema = s.request(f);
    let required: Vec<&str> = schema["required"]
        .as_array()
        .into_iter()
        .flatten()
        .filter_map(Value::as_str)
        .collect();
    let mut out = Vec::new();
    for (name, prop) in schema["properties"].as_object().into_iter().flatten() {
        let mut prop = without_null(prop.clone());
        let description = prop
            .as_object_mut()
            .and_then(|m| m.remove("description"))
            .unwrap_or_else(|| json!(""));
        out.push(json!({
            "name": name,
            "in": "query",
            "required": required.contains(&name.as_str()),
            "description": description,
            "schema": prop,
        }));
    }
    out
}

fn error_response(s: &mut Schemas, description: &str) -> Value {
    json!({
        "description": description,
        "content": {"application/json": {"schema": s.response(SchemaGenerator::subschema_for::<ErrorBody>)}}
    })
}

fn operation(s: &mut Schemas, route: &Route) -> Value {
    let (method, path, doc) = (route.verb, route.path, &route.doc);
    let mut params = Vec::new();
    for (name, what) in [
        ("id", "The id of the object the path names"),
        ("n", "Revision number, from 1"),
        ("i", "Frame number of a demonstration, from 0"),
        ("track_id", "The id of a track of the demonstration"),
        ("frame", "Frame number of a demonstration, from 0"),
    ] {
        if path.contains(&format!("{{{name}}}")) {
            params.push(json!({"name": name, "in": "path", "required": true, "description": what, "schema": {"type": "string"}}));
        }
    }
    if let Some(q) = doc.query {
        params.extend(query_parameters(s, q));
    }
    if method == Verb::Put {
        params.push(json!({"name": "If-Match", "in": "header", "required": true,
            "description": "The ETag of the version this change was made to", "schema": {"type": "string"}}));
    }
    if doc.conditional {
        params.push(json!({"name": "If-None-Match", "in": "header", "required": false,
            "description": "ETags already held; a match answers 304 without a body", "schema": {"type": "string"}}));
    }

    let mut responses = Map::new();
    for r in &doc.replies {
        let mut v = json!({"description": r.description});
        if let Some(c) = r.content {
            v["content"] = content(c, |f| s.response(f));
        }
        let mut hs = r.headers.to_vec();
        if (200..300).contains(&r.status)
            && super::carries_caution(path)
            && !hs.iter().any(|h| matches!(h, Header::Caution))
        {
            hs.push(Header::Caution);
        }
        if !hs.is_empty() {
            v["headers"] = headers(&hs);
        }
        responses.insert(r.status.to_string(), v);
    }
    if doc.conditional {
        responses.insert(
            "304".into(),
            json!({"description": "not modified: the If-None-Match ETag is current", "headers": headers(&[Header::ETag])}),
        );
    }
    if !doc.public {
        responses.insert("401".into(), error_response(s, "no credentials"));
        responses.insert("403".into(), error_response(s, "role too low"));
        responses.insert(
            "404".into(),
            error_response(s, "unknown id, or an id of another team"),
        );
    }
    if doc.request.is_some() {
        responses.insert("413".into(), error_response(s, "body too large"));
        responses.insert("415".into(), error_response(s, "unsupported media type"));
    }
    if doc.request.is_some() || doc.query.is_some() {
        responses.insert(
            "422".into(),
            error_response(
                s,
                "invalid body or query; `field` names the offending field",
            ),
        );
    }
    if method == Verb::Put {
        responses.insert(
            "412".into(),
            error_response(s, "If-Match is stale; nothing was written"),
        );
        responses.insert("428".into(), error_response(s, "If-Match missing"));
    }
    if path == "/healthz" {
        responses.insert(
            "503".into(),
            error_response(s, "the database cannot be reached"),
        );
    }
    if doc.heavy {
        responses.insert(
            "503".into(),
            error_response(
                s,
                "`busy`: too many heavy requests at once; retry after the `Retry-After` seconds",
            ),
        );
    }

    let mut op = json!({
        "summary": doc.summary,
        "operationId": format!("{}{}", method.as_str().to_lowercase(), path.replace(['/', '{', '}', '.', '-'], "_")),
        "parameters": params,
        "responses": responses,
    });
    if doc.public {
        op["security"] = json!([]);
    }
    if let Some(c) = doc.request {
        op["requestBody"] = json!({"required": true, "content": content(c, |f| s.request(f))});
    }
    op
}

/// Builds the document from the route table.
fn build(table: &[Route]) -> OpenApiDocument {
    let mut s = Schemas {
        request: generator(Contract::Deserialize),
        response: generator(Contract::Serialize),
        renamed: BTreeMap::new(),
    };
    // First pass: collect every definition on both sides, to find the types that need two.
    for route in table {
        operation(&mut s, route);
    }
    // A response schema that only differs by referring to a renamed one differs too, so rename
    // until nothing changes.
    let request_defs = s.request.definitions().clone();
    loop {
        let mut more = Vec::new();
        for (name, schema) in s.response.definitions() {
            let mut schema = schema.clone();
            rename_refs(&mut schema, &s.renamed);
            if !s.renamed.contains_key(name) && request_defs.get(name).is_some_and(|r| *r != schema)
            {
                more.push(name.clone());
            }
        }
        if more.is_empty() {
            break;
        }
        for name in more {
            let new = format!("{name}{SERVED_SUFFIX}");
            s.renamed.insert(name, new);
        }
    }
    // Second pass: the operations with the renames applied (no new definitions appear).
    let mut paths: BTreeMap<String, Value> = BTreeMap::new();
    for route in table {
        let op = operation(&mut s, route);
        let item = paths
            .entry(route.path.to_string())
            .or_insert_with(|| json!({}));
        item[route.verb.as_str().to_lowercase()] = op;
    }
    let mut schemas: BTreeMap<String, Value> =
        s.request.take_definitions(true).into_iter().collect();
    for (name, mut schema) in s.response.take_definitions(true) {
        rename_refs(&mut schema, &s.renamed);
        let name = s.renamed.get(&name).cloned().unwrap_or(name);
        schemas.insert(name, schema);
    }

    let security_schemes = BTreeMap::from([
        (
            "bearer".to_string(),
            json!({"type": "http", "scheme": "bearer",
            "description": "An API token (`goalsmith token create`, or Members & tokens)"}),
        ),
        (
            "session".to_string(),
            json!({"type": "apiKey", "in": "cookie", "name": SESSION_COOKIE,
            "description": format!("The browser's session cookie, set at sign-in. Requests other \
                than GET that carry it must also send the session's CSRF token in {CSRF_HEADER}.")}),
        ),
    ]);
    OpenApiDocument {
        openapi: "3.1.0".into(),
        info: Info {
            title: "goalsmith".into(),
            version: env!("CARGO_PKG_VERSION").into(),
            description: "Revisioned goal specifications for robot planners. Goals move real robots: \
                check new goals in simulation or at reduced speed, keep an emergency stop within reach, \
                respect the cell's safeguarding, and follow ISO 10218 / ISO/TS 15066 and local rules."
                .into(),
        },
        security: vec![
            BTreeMap::from([("bearer".to_string(), Vec::new())]),
            BTreeMap::from([("session".to_string(), Vec::new())]),
        ],
        components: Components {
            security_schemes,
            schemas,
        },
        paths,
    }
}

/// The OpenAPI document, built once: it depends only on the binary.
pub fn document_ref() -> &'static OpenApiDocument {
    static DOC: OnceLock<OpenApiDocument> = OnceLock::new();
    DOC.get_or_init(|| build(&routes::table()))
}

/// The OpenAPI 3.1 document as a value.
pub fn document_value() -> Value {
    serde_json::to_value(document_ref()).unwrap_or_else(|_| json!({}))
}

/// The form the document is committed and hashed in (`tests/reference/openapi.json`): keys
/// sorted at every level and two-space indents, whatever order the build's `serde_json` keeps
/// map keys in (test builds keep insertion order through a dev-dependency's feature).
pub fn reference_form(doc: &Value) -> String {
    let sorted = goalsmith_core::canonical::to_string(doc);
    let reparsed: Value = serde_json::from_str(&sorted).unwrap_or(Value::Null);
    let mut out = serde_json::to_string_pretty(&reparsed).unwrap_or_default();
    out.push('\n');
    out
}

/// `GET /api/openapi.json`.
pub async fn document() -> Json<&'static OpenApiDocument> {
    Json(document_ref())
}

#[cfg(test)]
mod tests {
    use super::*;
    use sha2::{Digest, Sha256};

    #[test]
    fn every_route_is_documented_and_nothing_else() {
        let doc = document_value();
        let mut documented: Vec<(String, String)> = Vec::new();
        for (path, item) in doc["paths"].as_object().into_iter().flatten() {
            for method in item.as_object().into_iter().flatten().map(|(m, _)| m) {
                documented.push((method.to_uppercase(), path.clone()));
            }
        }
        // The table the router is built from (see `api::router`).
        let mut routes: Vec<(String, String)> = routes::list()
            .iter()
            .map(|(m, p)| ((*m).to_string(), (*p).to_string()))
            .collect();
        documented.sort();
        routes.sort();
        assert_eq!(documented, routes);
    }

    #[test]
    fn goal_schema_is_draft_2020_12_and_names_the_terms() {
        let s = goal_schema_value();
        assert_eq!(s["$schema"], "https://json-schema.org/draft/2020-12/schema");
        let text = s.to_string();
        for kind in ["point", "region", "mask", "rigid", "learned"] {
            assert!(text.contains(&format!("\"{kind}\"")), "{kind} missing");
        }
        let parsed: JsonSchemaDocument =
            serde_json::from_value(s).expect("the goal schema has the documented shape");
        assert_eq!(parsed.id, "/api/schema/goal.json");
    }

    /// Every `$ref` of the document points at a schema inside it.
    fn refs<'a>(v: &'a Value, out: &mut Vec<&'a str>) {
        match v {
            Value::Object(m) => {
                if let Some(Value::String(r)) = m.get("$ref") {
                    out.push(r);
                }
                m.values().for_each(|x| refs(x, out));
            }
            Value::Array(a) => a.iter().for_each(|x| refs(x, out)),
            _ => {}
        }
    }

    #[test]
    fn refs_resolve_inside_the_document() {
        let doc = document_value();
        let mut found = Vec::new();
        refs(&doc, &mut found);
        assert!(!found.is_empty());
        for r in found {
            let name = r
                .strip_prefix(REF_PREFIX)
                .unwrap_or_else(|| panic!("{r} points outside components/schemas"));
            assert!(
                doc["components"]["schemas"][name].is_object(),
                "{r} has no schema"
            );
        }
        // The goal schema is one of them, the same as the standalone one (less `$schema`/`$id`).
        let standalone = goal_schema_value();
        let inside = &doc["components"]["schemas"]["GoalDocument"];
        assert_eq!(
            inside["properties"].as_object().map(|m| m.len()),
            standalone["properties"].as_object().map(|m| m.len())
        );
        assert_eq!(inside["required"], standalone["required"]);
    }

    /// What the integration tests and the outside validator rely on.
    #[test]
    fn bodies_are_described() {
        let doc = document_value();
        for (path, item) in doc["paths"].as_object().into_iter().flatten() {
            for (method, op) in item.as_object().into_iter().flatten() {
                let bodies = op["responses"]
                    .as_object()
                    .into_iter()
                    .flatten()
                    .filter(|(st, _)| st.starts_with('2'))
                    .map(|(_, r)| &r["content"])
                    .chain(std::iter::once(&op["requestBody"]["content"]));
                for content in bodies {
                    for (media, m) in content.as_object().into_iter().flatten() {
                        let schema = &m["schema"];
                        assert!(
                            schema.get("$ref").is_some()
                                || schema.get("properties").is_some()
                                || schema.get("contentMediaType").is_some(),
                            "{method} {path} {media}: {schema}"
                        );
                    }
                }
                if op["responses"].get("304").is_some() {
                    let names: Vec<&str> = op["parameters"]
                        .as_array()
                        .into_iter()
                        .flatten()
                        .filter_map(|p| p["name"].as_str())
                        .collect();
                    assert!(names.contains(&"If-None-Match"), "{method} {path}");
                }
            }
        }
        assert_eq!(
            doc["components"]["securitySchemes"]["session"]["name"],
            SESSION_COOKIE
        );
    }

    /// The document served today is the one `tests/reference/check_openapi.py` validated last.
    #[test]
    fn document_is_the_validated_one() {
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference");
        let form = reference_form(&document_value());
        let sha = hex::encode(Sha256::digest(form.as_bytes()));
        let how = "the OpenAPI document changed since it was last validated. Regenerate with \
                   `GOALSMITH_WRITE_REFERENCE=1 cargo test --test it openapi` (writes \
                   tests/reference/openapi.json and openapi_responses.json), then \
                   `python3 tests/reference/check_openapi.py` (writes openapi_validated.json), \
                   and commit all three";
        let verdict: Value = std::fs::read_to_string(dir.join("openapi_validated.json"))
            .ok()
            .and_then(|t| serde_json::from_str(&t).ok())
            .unwrap_or(Value::Null);
        assert_eq!(
            verdict["document_sha256"].as_str(),
            Some(sha.as_str()),
            "{how}"
        );
        assert_eq!(verdict["valid"], true, "{how}");
        let committed = std::fs::read_to_string(dir.join("openapi.json")).unwrap_or_default();
        assert!(
            committed == form,
            "tests/reference/openapi.json differs: {how}"
        );
    }
}
