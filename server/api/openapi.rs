//! `GET /api/openapi.json` (OpenAPI 3.1) and `GET /api/schema/goal.json` (JSON Schema 2020-12).
//!
//! The goal schema is derived from the very types the server parses, so it cannot drift; the
//! OpenAPI paths are listed here beside [`super::ROUTES`], and a test checks both agree.

use axum::Json;
use goalsmith_core::goal::GoalDocument;
use serde_json::{Value, json};

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

/// (method, path, summary, request media type, success status)
const OPERATIONS: &[(&str, &str, &str, Option<&str>, &str)] = &[
    (
        "get",
        "/healthz",
        "200 while the database is reachable, 503 otherwise (no auth)",
        None,
        "200",
    ),
    ("get", "/api/openapi.json", "This document", None, "200"),
    (
        "get",
        "/api/schema/goal.json",
        "JSON Schema (draft 2020-12) of the goal document",
        None,
        "200",
    ),
    (
        "post",
        "/api/cameras",
        "Register a camera (size, intrinsics or CameraInfo K/D, work plane, pose, zones)",
        Some("application/json"),
        "201",
    ),
    (
        "get",
        "/api/cameras",
        "List the team's cameras",
        None,
        "200",
    ),
    (
        "get",
        "/api/cameras/{id}",
        "One camera, with its calibration also in CameraInfo form",
        None,
        "200",
    ),
    (
        "post",
        "/api/cameras/{id}/frames",
        "Upload a frame (raw image/png or image/jpeg body of the camera's size); 200 when the same bytes were already a frame of this camera",
        Some("image/png"),
        "201",
    ),
    (
        "get",
        "/api/cameras/{id}/frames",
        "List a camera's frames",
        None,
        "200",
    ),
    ("get", "/api/frames/{id}", "Frame metadata", None, "200"),
    (
        "get",
        "/api/frames/{id}/image",
        "The frame's stored image bytes",
        None,
        "200",
    ),
    (
        "post",
        "/api/goals",
        "Create a goal; the body becomes revision 1",
        Some("application/json"),
        "201",
    ),
    (
        "get",
        "/api/goals",
        "List goals, most recently changed first",
        None,
        "200",
    ),
    (
        "get",
        "/api/goals/{id}",
        "The latest revision document (ETag for If-Match)",
        None,
        "200",
    ),
    (
        "put",
        "/api/goals/{id}",
        "Save a new revision; needs If-Match with the latest ETag (428 without, 412 when stale)",
        Some("application/json"),
        "200",
    ),
    (
        "get",
        "/api/goals/{id}/revisions",
        "Metadata of every revision, oldest first",
        None,
        "200",
    ),
    (
        "get",
        "/api/goals/{id}/revisions/{n}",
        "One immutable revision document (strong ETag, 304 on If-None-Match)",
        None,
        "200",
    ),
    (
        "get",
        "/api/goals/{id}/revisions/{n}/cost-maps.npy",
        "Cost maps, float32 NPY of shape (P, H, W); ?width=&height= evaluates exactly at another size",
        None,
        "200",
    ),
    (
        "post",
        "/api/goals/{id}/revisions/{n}/cost",
        "Score candidates: JSON {points: [N][T][P][2]}, or an NPY body of float32/float16 maps (N, T, P, h, w) or points (N, T, P, 2)",
        Some("application/json"),
        "200",
    ),
    (
        "get",
        "/api/goals/{id}/revisions/{n}/overlay.png",
        "The frame with the goal drawn on it",
        None,
        "200",
    ),
    (
        "get",
        "/api/goals/{id}/revisions/{n}/bundle.zip",
        "Reproducible bundle: goal.json, cost-maps.npy, frame, camera.json, README.txt, manifest.json",
        None,
        "200",
    ),
    (
        "post",
        "/api/goals/{id}/revisions/{n}/outcomes",
        "Report final source positions of a trial; 201 with success, residuals and cost",
        Some("application/json"),
        "201",
    ),
    (
        "get",
        "/api/goals/{id}/outcomes",
        "All outcomes of a goal with a success summary",
        None,
        "200",
    ),
    (
        "post",
        "/api/goal-sets",
        "Create a goal set: {name, items: [{goal_id, revision}]}",
        Some("application/json"),
        "201",
    ),
    (
        "get",
        "/api/goal-sets",
        "List goal sets, most recently saved first",
        None,
        "200",
    ),
    (
        "get",
        "/api/goal-sets/{id}",
        "One goal set (ETag for If-Match)",
        None,
        "200",
    ),
    (
        "put",
        "/api/goal-sets/{id}",
        "Save a goal set; needs If-Match (428 without, 412 when stale)",
        Some("application/json"),
        "200",
    ),
    (
        "get",
        "/api/goal-sets/{id}/bundle.zip",
        "Every pinned revision's bundle in one reproducible ZIP, in set order",
        None,
        "200",
    ),
    (
        "post",
        "/api/preview/cost-map.png",
        "Cost map of one source point of an unsaved goal {goal, point, max_side?} as a translucent heat PNG (the editor's live preview); 422 with field when the goal would be refused",
        Some("application/json"),
        "200",
    ),
    (
        "get",
        "/api/cameras/{id}/intrinsics",
        "Intrinsics (both forms) for frames resized to ?width=&height= (fx, cx by the horizontal factor; fy, cy by the vertical)",
        None,
        "200",
    ),
];

fn error_response(description: &str) -> Value {
    json!({
        "description": description,
        "content": {"application/json": {"schema": {"$ref": "#/components/schemas/Error"}}}
    })
}

/// The OpenAPI 3.1 document as a value.
pub fn document_value() -> Value {
    let mut paths = serde_json::Map::new();
    for (method, path, summary, media, ok) in OPERATIONS {
        let mut params = Vec::new();
        for name in ["id", "n"] {
            if path.contains(&format!("{{{name}}}")) {
                params.push(json!({"name": name, "in": "path", "required": true, "schema": {"type": "string"}}));
            }
        }
        if *method == "put" {
            params.push(json!({"name": "If-Match", "in": "header", "required": true, "schema": {"type": "string"}}));
        }
        let mut responses = serde_json::Map::new();
        responses.insert((*ok).to_string(), json!({"description": "success"}));
        if path.starts_with("/api/")
            && !path.starts_with("/api/openapi")
            && !path.starts_with("/api/schema")
        {
            responses.insert("401".into(), error_response("no credentials"));
            responses.insert("403".into(), error_response("role too low"));
            responses.insert(
                "404".into(),
                error_response("unknown id, or an id of another team"),
            );
        }
        if media.is_some() {
            responses.insert("413".into(), error_response("body too large"));
            responses.insert("415".into(), error_response("unsupported media type"));
            responses.insert(
                "422".into(),
                error_response("invalid body; `field` names the offending field"),
            );
        }
        if *method == "put" {
            responses.insert(
                "412".into(),
                error_response("If-Match is stale; nothing was written"),
            );
            responses.insert("428".into(), error_response("If-Match missing"));
        }
        if path.contains("/revisions/{n}") {
            responses.insert("304".into(), json!({"description": "not modified"}));
        }
        let mut op = json!({
            "summary": summary,
            "operationId": format!("{method}{}", path.replace(['/', '{', '}', '.', '-'], "_")),
            "parameters": params,
            "responses": responses,
        });
        if let Some(m) = media {
            let schema = if *m == "application/json"
                && (*path == "/api/goals" || *path == "/api/goals/{id}")
            {
                json!({"$ref": "/api/schema/goal.json"})
            } else if *m == "application/json" {
                json!({"type": "object"})
            } else {
                json!({"type": "string", "format": "binary"})
            };
            let mut content = serde_json::Map::new();
            content.insert((*m).to_string(), json!({"schema": schema}));
            if *m == "image/png" {
                content.insert(
                    "image/jpeg".into(),
                    json!({"schema": {"type": "string", "format": "binary"}}),
                );
            }
            if path.ends_with("/cost") {
                content.insert(
                    "application/x-npy".into(),
                    json!({"schema": {"type": "string", "format": "binary"}}),
                );
            }
            op["requestBody"] = json!({"required": true, "content": content});
        }
        let entry = paths
            .entry((*path).to_string())
            .or_insert_with(|| json!({}));
        entry[*method] = op;
    }
    json!({
        "openapi": "3.1.0",
        "info": {
            "title": "goalsmith",
            "version": env!("CARGO_PKG_VERSION"),
            "description": "Revisioned goal specifications for robot planners. Goals move real robots: \
                check new goals in simulation or at reduced speed, keep an emergency stop within reach, \
                respect the cell's safeguarding, and follow ISO 10218 / ISO/TS 15066 and local rules."
        },
        "security": [{"bearer": []}, {"session": []}],
        "components": {
            "securitySchemes": {
                "bearer": {"type": "http", "scheme": "bearer"},
                "session": {"type": "apiKey", "in": "cookie", "name": "goalsmith_session"}
            },
            "schemas": {
                "Error": {
                    "type": "object",
                    "required": ["error"],
                    "properties": {"error": {
                        "type": "object",
                        "required": ["code", "message"],
                        "properties": {
                            "code": {"type": "string"},
                            "message": {"type": "string"},
                            "field": {"type": "string"}
                        }
                    }}
                }
            }
        },
        "paths": paths,
    })
}

/// `GET /api/openapi.json`.
pub async fn document() -> Json<Value> {
    Json(document_value())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_route_is_documented_and_nothing_else() {
        let doc = document_value();
        let mut documented: Vec<(String, String)> = Vec::new();
        for (path, item) in doc["paths"].as_object().into_iter().flatten() {
            for method in item.as_object().into_iter().flatten().map(|(m, _)| m) {
                documented.push((method.to_uppercase(), path.clone()));
            }
        }
        let mut routes: Vec<(String, String)> = super::super::ROUTES
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
    }
}
