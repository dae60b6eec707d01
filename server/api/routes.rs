//! The one table of API routes. [`super::router`] mounts it and [`super::openapi`] documents it,
//! so a route cannot be served without being documented, nor documented without being served.
//!
//! Each row names its handler and, for the document, the Rust types its request is parsed into
//! and its response is serialised from; the schemas are derived from those types.

use super::openapi::{Content, Header, Operation, Reply, SchemaFn};
use super::preview;
use super::{
    AppState, cameras, demos, export, frames, goal_sets, goals, openapi, operations, reward_fits,
    tracks,
};
use crate::service;
use axum::handler::Handler;
use axum::routing::{MethodFilter, MethodRouter, on};
use schemars::{JsonSchema, SchemaGenerator};

/// The HTTP methods the API uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Verb {
    /// GET (HEAD is answered by the same handler).
    Get,
    /// POST.
    Post,
    /// PUT.
    Put,
}

impl Verb {
    /// Upper-case method name.
    pub fn as_str(self) -> &'static str {
        match self {
            Verb::Get => "GET",
            Verb::Post => "POST",
            Verb::Put => "PUT",
        }
    }

    fn filter(self) -> MethodFilter {
        match self {
            Verb::Get => MethodFilter::GET,
            Verb::Post => MethodFilter::POST,
            Verb::Put => MethodFilter::PUT,
        }
    }
}

/// Which body limit of [`crate::config::Limits`] a route takes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BodyLimit {
    /// axum's default; for routes that read no body.
    Default,
    /// `json_body_bytes`.
    Json,
    /// `frame_upload_bytes`.
    Frame,
    /// `cost_body_bytes`.
    Cost,
    /// A fixed 16 MiB: the editor's preview sends a whole unsaved goal, masks included.
    Preview,
    /// `demo.max_archive_bytes`.
    Demo,
}

/// Largest preview body.
pub const PREVIEW_BODY_BYTES: usize = 16 << 20;

/// One route: what the router mounts and what the document says about it.
pub struct Route {
    /// Method.
    pub verb: Verb,
    /// Path in axum's (and OpenAPI's) `{param}` syntax.
    pub path: &'static str,
    /// Body limit.
    pub limit: BodyLimit,
    /// The handler, bound to `verb` when the row is made so the two cannot differ.
    pub handler: MethodRouter<AppState>,
    /// What the OpenAPI document says.
    pub doc: Operation,
}

fn schema<T: JsonSchema>() -> SchemaFn {
    SchemaGenerator::subschema_for::<T>
}

impl Route {
    fn new<H, T>(verb: Verb, path: &'static str, summary: &'static str, handler: H) -> Self
    where
        H: Handler<T, AppState>,
        T: 'static,
    {
        Route {
            verb,
            path,
            limit: BodyLimit::Json,
            handler: on(verb.filter(), handler),
            doc: Operation {
                summary,
                ..Operation::default()
            },
        }
    }

    fn get<H: Handler<T, AppState>, T: 'static>(p: &'static str, s: &'static str, h: H) -> Self {
        Self::new(Verb::Get, p, s, h)
    }
    fn post<H: Handler<T, AppState>, T: 'static>(p: &'static str, s: &'static str, h: H) -> Self {
        Self::new(Verb::Post, p, s, h)
    }
    fn put<H: Handler<T, AppState>, T: 'static>(p: &'static str, s: &'static str, h: H) -> Self {
        Self::new(Verb::Put, p, s, h)
    }

    fn limit(mut self, limit: BodyLimit) -> Self {
        self.limit = limit;
        self
    }

    /// No credentials needed.
    fn public(mut self) -> Self {
        self.doc.public = true;
        self
    }

    /// Takes a heavy-work permit (see [`crate::service::heavy`]): may answer 503 `busy`.
    fn heavy(mut self) -> Self {
        self.doc.heavy = true;
        self
    }

    /// Answers 304 to a matching `If-None-Match`.
    fn conditional(mut self) -> Self {
        self.doc.conditional = true;
        self
    }

    /// The query string is parsed into `T`.
    fn query<T: JsonSchema>(mut self) -> Self {
        // Inline, not a `$ref`: each property becomes a parameter of its own.
        self.doc.query = Some(<T as JsonSchema>::json_schema);
        self
    }

    /// The body is JSON parsed into `T`.
    fn json_body<T: JsonSchema>(mut self) -> Self {
        self.doc.request = Some(Content::Json(schema::<T>()));
        self
    }

    /// The body is raw bytes of one of these media types.
    fn binary_body(mut self, media: &'static [&'static str]) -> Self {
        self.doc.request = Some(Content::Binary(media));
        self
    }

    /// The body is JSON parsed into `T`, or raw bytes of one of these media types.
    fn json_or_binary_body<T: JsonSchema>(mut self, media: &'static [&'static str]) -> Self {
        self.doc.request = Some(Content::JsonOrBinary(schema::<T>(), media));
        self
    }

    /// A JSON success response serialised from `T`.
    fn ok<T: JsonSchema>(
        mut self,
        status: u16,
        description: &'static str,
        headers: &'static [Header],
    ) -> Self {
        self.doc.replies.push(Reply {
            status,
            description,
            content: Some(Content::Json(schema::<T>())),
            headers,
        });
        self
    }

    /// A binary success response of one of these media types.
    fn ok_binary(
        mut self,
        media: &'static [&'static str],
        description: &'static str,
        headers: &'static [Header],
    ) -> Self {
        self.doc.replies.push(Reply {
            status: 200,
            description,
            content: Some(Content::Binary(media)),
            headers,
        });
        self
    }
}

/// Headers of a binary download (see [`export::binary`]).
const DOWNLOAD: &[Header] = &[Header::ETag, Header::ContentDisposition, Header::Caution];
/// Headers of a stored document served as its exact bytes.
const STORED: &[Header] = &[Header::ETag];

/// Every API route.
pub fn table() -> Vec<Route> {
    use goalsmith_core::goal::GoalDocument;
    vec![
        Route::get("/healthz", "200 while the database is reachable, 503 otherwise (no auth)", super::healthz)
            .limit(BodyLimit::Default)
            .public()
            .ok::<super::Health>(200, "the database is reachable", &[]),
        Route::get("/metrics", "Prometheus text exposition (0.0.4): requests and latency histograms per route, operations by kind and state, database pool use, heavy work, resident memory; for loopback clients, or with the metrics token (`--metrics-token`) as the bearer token", super::metrics::page)
            .limit(BodyLimit::Default)
            .ok_binary(&["text/plain; version=0.0.4; charset=utf-8"], "the metrics", &[]),
        Route::get("/api/openapi.json", "This document", openapi::document)
            .limit(BodyLimit::Default)
            .public()
            .ok::<openapi::OpenApiDocument>(200, "this OpenAPI 3.1 document", &[]),
        Route::get("/api/schema/goal.json", "JSON Schema (draft 2020-12) of the goal document", openapi::goal_schema)
            .limit(BodyLimit::Default)
            .public()
            .ok::<openapi::JsonSchemaDocument>(200, "the JSON Schema of the body of POST /api/goals and PUT /api/goals/{id}", &[]),
        Route::post("/api/cameras", "Register a camera (size, intrinsics or CameraInfo K/D, work plane, pose, zones)", cameras::create)
            .json_body::<service::cameras::CameraInput>()
            .ok::<service::cameras::CameraView>(201, "the camera as stored", &[]),
        Route::get("/api/cameras", "List the team's cameras", cameras::list)
            .ok::<super::Items<service::cameras::CameraView>>(200, "the team's cameras", &[]),
        Route::get("/api/cameras/{id}", "One camera, with its calibration also in CameraInfo form", cameras::get_one)
            .ok::<service::cameras::CameraView>(200, "the camera", &[]),
        Route::get("/api/cameras/{id}/intrinsics", "Intrinsics (both forms) for frames resized to ?width=&height= (fx, cx by the horizontal factor; fy, cy by the vertical)", cameras::intrinsics)
            .query::<cameras::ResizeQuery>()
            .ok::<service::cameras::ResizedIntrinsics>(200, "the intrinsics at that size", &[]),
        Route::post("/api/cameras/{id}/frames", "Upload a frame (raw image/png or image/jpeg body of the camera's size); 200 when the same bytes were already a frame of this camera", frames::upload)
            .heavy()
            .limit(BodyLimit::Frame)
            .binary_body(&["image/png", "image/jpeg"])
            .ok::<service::frames::FrameView>(201, "a new frame", &[])
            .ok::<service::frames::FrameView>(200, "the same bytes were already a frame of this camera", &[]),
        Route::get("/api/cameras/{id}/frames", "List a camera's frames", frames::list_for_camera)
            .limit(BodyLimit::Frame)
            .ok::<super::Items<service::frames::FrameView>>(200, "the camera's frames", &[]),
        Route::get("/api/frames/{id}", "Frame metadata", frames::get_one)
            .ok::<service::frames::FrameView>(200, "the frame", &[]),
        Route::get("/api/frames/{id}/image", "The frame's stored image bytes", frames::image)
            .conditional()
            .ok_binary(&["image/png", "image/jpeg"], "the image exactly as uploaded", STORED),
        Route::post("/api/cameras/{id}/demos", "Upload a demonstration: application/zip of PNG or JPEG frames of the camera's size in name order (optional timestamps.csv, one time in seconds per frame) or an animated image/gif; limits on frames, upload size and decoded bytes answer 413", demos::upload)
            .heavy()
            .limit(BodyLimit::Demo)
            .binary_body(&["application/zip", "image/gif"])
            .query::<demos::UploadQuery>()
            .ok::<service::demos::DemoView>(201, "the demo as stored", &[]),
        Route::get("/api/cameras/{id}/demos", "List a camera's demonstrations, newest first", demos::list_for_camera)
            .ok::<super::Items<service::demos::DemoSummary>>(200, "the camera's demos", &[]),
        Route::get("/api/demos/{id}", "A demonstration and its frames", demos::get_one)
            .ok::<service::demos::DemoView>(200, "the demo", &[]),
        Route::get("/api/demos/{id}/frames/{i}/image", "Frame i (from 0) of a demonstration", demos::frame_image)
            .conditional()
            .ok_binary(&["image/png", "image/jpeg"], "the frame's image (GIF frames are stored as PNG)", STORED),
        Route::post("/api/demos/{id}/tracks", "Start a track: a labelled point placed on one frame, followed through the demo (both ways) by a tracking operation", tracks::start)
            .json_body::<service::tracks::NewTrack>()
            .ok::<service::tracks::Started>(202, "the track, with the operation that tracks it", &[]),
        Route::get("/api/demos/{id}/tracks/{track_id}", "A track: one sample per frame, manual or tracked, with confidence and lost flag", tracks::get_one)
            .ok::<service::tracks::TrackView>(200, "the track", &[]),
        Route::put("/api/demos/{id}/tracks/{track_id}/samples/{frame}", "Correct a track at a frame: the sample becomes manual and the frames after it are tracked again, up to the next manual sample", tracks::correct)
            .json_body::<service::tracks::Correction>()
            .ok::<service::tracks::Started>(202, "the operation that tracks the frames after it", &[]),
        Route::get("/api/demos/{id}/tracks.json", "Every track of a demo", tracks::export_json)
            .ok::<super::Items<service::tracks::TrackView>>(200, "the demo's tracks", &[]),
        Route::get("/api/demos/{id}/tracks.csv", "Every sample of every track of a demo as CSV: track_id, label, frame, time_s, x, y, origin, confidence, lost", tracks::export_csv)
            .ok_binary(&["text/csv; charset=utf-8"], "the samples, one row each", &[]),
        Route::post("/api/demos/{id}/goal", "Make a goal from a demo: its start frame becomes a frame of the camera, each chosen track a point term from its position there to its position at the end frame (or one rigid term over them); checked like any goal, the revision records from_demo", demos::make_goal)
            .json_body::<service::tracks::DemoGoal>()
            .ok::<service::goals::RevisionDocument>(201, "revision 1, as stored", &[Header::ETag, Header::Location]),
        Route::get("/api/audit-log", "The team's audit log, newest first: every change answered with success (who, credential, role, method, route, path, status, client address); owners only", super::audit::list)
            .query::<super::audit::AuditQuery>()
            .ok::<super::audit::AuditPage>(200, "a page of the log", &[]),
        Route::post("/api/reward-fits", "Start a reward fit: maximum-entropy inverse RL over the frame's cells (cell_px) with linear features, from tracks of demos of the frame's camera or paths drawn by hand; everything is checked before the operation is queued", reward_fits::start)
            .json_body::<service::reward_fits::NewRewardFit>()
            .ok::<service::reward_fits::Started>(202, "the fit, with the operation that runs it", &[]),
        Route::get("/api/reward-fits", "The team's reward fits, newest first (at most 200), with their main figures once run", reward_fits::list)
            .ok::<super::Items<service::reward_fits::RewardFitSummary>>(200, "the fits", &[]),
        Route::get("/api/reward-fits/{id}", "A reward fit: its settings, and once it has run its weights, diagnostics (log-likelihood per move, held-out and uniform-walk figures) and the reward's argmax", reward_fits::get_one)
            .ok::<service::reward_fits::RewardFitView>(200, "the fit", &[]),
        Route::get("/api/reward-fits/{id}/reward-map.npy", "The fitted reward per cell, float32 NPY of shape (rows, cols); 409 until the fit has run", reward_fits::reward_map_npy)
            .ok_binary(&["application/x-npy"], "the reward map", &[]),
        Route::get("/api/reward-fits/{id}/reward-map.png", "The fitted reward as a heat over the fit's frame (the learned term's cost, in the editor's cost heat: sky where the reward is highest), with the demonstrations drawn and the best cell marked; 409 until the fit has run", reward_fits::reward_map_png)
            .ok_binary(&["image/png"], "the reward map on the frame", &[]),
        Route::get("/api/operations/{id}", "A long-running operation: kind, progress 0..1, done, error or result", operations::get_one)
            .ok::<service::operations::OperationView>(200, "the operation", &[]),
        Route::get("/api/operations/{id}/events", "The operation as server-sent events (event `operation`, data as GET), each time it changes, until it is done", operations::events)
            .ok_binary(&["text/event-stream"], "a stream of `operation` events", &[]),
        Route::post("/api/operations/{id}/cancel", "Cancel an operation: at once when queued, at its next heartbeat when running", operations::cancel)
            .limit(BodyLimit::Default)
            .ok::<service::operations::OperationView>(202, "the operation as it is now", &[]),
        Route::post("/api/goals", "Create a goal; the body becomes revision 1", goals::create)
            .json_body::<GoalDocument>()
            .ok::<service::goals::RevisionDocument>(201, "revision 1, as stored", &[Header::ETag, Header::Location]),
        Route::get("/api/goals", "List goals, most recently changed first", goals::list)
            .ok::<super::Items<service::goals::GoalListItem>>(200, "the team's goals", &[]),
        Route::get("/api/goals/{id}", "The latest revision document (ETag for If-Match)", goals::latest)
            .conditional()
            .ok::<service::goals::RevisionDocument>(200, "the latest revision, as stored", STORED),
        Route::put("/api/goals/{id}", "Save a new revision; needs If-Match with the latest ETag (428 without, 412 when stale)", goals::update)
            .json_body::<GoalDocument>()
            .ok::<service::goals::RevisionDocument>(200, "the new revision, as stored", STORED),
        Route::get("/api/goals/{id}/revisions", "Metadata of every revision, oldest first", goals::revisions)
            .ok::<super::Items<service::goals::RevisionSummary>>(200, "every revision's metadata", &[]),
        Route::get("/api/goals/{id}/revisions/{n}", "One immutable revision document (strong ETag, 304 on If-None-Match)", goals::revision)
            .conditional()
            .ok::<service::goals::RevisionDocument>(200, "the revision, as stored", STORED),
        Route::get("/api/goals/{id}/revisions/{n}/cost-maps.npy", "Cost maps, float32 NPY of shape (P, H, W); ?width=&height= evaluates exactly at another size", export::cost_maps)
            .heavy()
            .query::<export::MapSize>()
            .conditional()
            .ok_binary(&["application/x-npy"], "float32 cost maps of shape (P, h, w)", DOWNLOAD),
        Route::post("/api/goals/{id}/revisions/{n}/cost", "Score candidates: JSON {points: [N][T][P][2]}, or an NPY body of float32/float16 maps (N, T, P, h, w) or points (N, T, P, 2)", export::cost)
            .heavy()
            .limit(BodyLimit::Cost)
            .json_or_binary_body::<crate::scoring::PointsBody>(&["application/x-npy", "application/octet-stream"])
            .ok::<crate::scoring::CostResponse>(200, "the candidates' costs", &[]),
        Route::get("/api/goals/{id}/revisions/{n}/overlay.png", "The frame with the goal drawn on it", export::overlay)
            .heavy()
            .conditional()
            .ok_binary(&["image/png"], "the overlay", DOWNLOAD),
        Route::get("/api/goals/{id}/revisions/{n}/bundle.zip", "Reproducible bundle: goal.json, cost-maps.npy, frame, camera.json, for each reward fit a learned term uses reward_fits/<id>.json (weights, features, standardisation) and reward_fits/<id>.npy (its reward map), README.txt, manifest.json", export::bundle)
            .heavy()
            .conditional()
            .ok_binary(&["application/zip"], "the bundle; the same bytes for the same revision", DOWNLOAD),
        Route::post("/api/goals/{id}/revisions/{n}/outcomes", "Report final source positions of a trial; 201 with success, residuals and cost", export::report_outcome)
            .heavy()
            .json_body::<service::outcomes::OutcomeInput>()
            .ok::<service::outcomes::OutcomeView>(201, "the outcome as recorded", &[]),
        Route::get("/api/goals/{id}/outcomes", "All outcomes of a goal with a success summary", export::outcomes)
            .ok::<service::outcomes::OutcomesView>(200, "every outcome of the goal and their summary", &[]),
        Route::post("/api/goal-sets", "Create a goal set: {name, items: [{goal_id, revision}]}", goal_sets::create)
            .json_body::<service::goal_sets::GoalSetInput>()
            .ok::<service::goal_sets::GoalSetDocument>(201, "the goal set, as stored", STORED),
        Route::get("/api/goal-sets", "List goal sets, most recently saved first", goal_sets::list)
            .ok::<super::Items<service::goal_sets::GoalSetDocument>>(200, "the team's goal sets", &[]),
        Route::get("/api/goal-sets/{id}", "One goal set (ETag for If-Match)", goal_sets::get_one)
            .conditional()
            .ok::<service::goal_sets::GoalSetDocument>(200, "the goal set, as stored", STORED),
        Route::put("/api/goal-sets/{id}", "Save a goal set; needs If-Match (428 without, 412 when stale)", goal_sets::update)
            .json_body::<service::goal_sets::GoalSetInput>()
            .ok::<service::goal_sets::GoalSetDocument>(200, "the goal set, as stored", STORED),
        Route::get("/api/goal-sets/{id}/bundle.zip", "Every pinned revision's bundle in one reproducible ZIP, in set order", goal_sets::bundle)
            .heavy()
            .conditional()
            .ok_binary(&["application/zip"], "the bundle; the same bytes for the same set version", DOWNLOAD),
        Route::post(preview::ROUTE, "Cost map of one source point of an unsaved goal {goal, point, max_side?} as a translucent heat PNG (the editor's live preview); 422 with field when the goal would be refused", preview::cost_map_png)
            .heavy()
            .limit(BodyLimit::Preview)
            .json_body::<preview::PreviewInput>()
            .ok_binary(&["image/png"], "the heat map", &[Header::CostMax]),
    ]
}

/// Every (method, path) of [`table`], for tests that walk the API.
pub fn list() -> Vec<(&'static str, &'static str)> {
    table().iter().map(|r| (r.verb.as_str(), r.path)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use axum::body::Body;
    use axum::http::{Method, Request, StatusCode};
    use std::sync::Arc;
    use tower::ServiceExt;

    /// The router answers every row of the table, and nothing else on those paths: an
    /// unauthenticated request to a row is a 401 (200 for the public ones), never the router's
    /// 404 or 405, and every other method on the same path is a 405.
    #[tokio::test]
    async fn the_router_serves_exactly_the_table() {
        let dir = tempfile::tempdir().expect("temp dir");
        let url = format!("sqlite://{}?mode=rwc", dir.path().join("t.db").display());
        let store = crate::store::Store::connect(&url).await.expect("store");
        let app = crate::app::app(AppState {
            store,
            limits: Arc::default(),
            models: Arc::default(),
            security: Arc::new(crate::security::Security::new(
                &Default::default(),
                None,
                [7; 32],
            )),
            heavy_permits: Arc::default(),
            pyramids: Arc::default(),
            metrics: Arc::default(),
            revisions: Arc::default(),
        });
        let rows = table();
        let mut paths: Vec<&str> = rows.iter().map(|r| r.path).collect();
        paths.sort_unstable();
        paths.dedup();
        let id = "00000000-0000-4000-8000-000000000000";
        for path in paths {
            let concrete = path.replace("{id}", id).replace("{n}", "1");
            for method in [
                Method::GET,
                Method::POST,
                Method::PUT,
                Method::DELETE,
                Method::PATCH,
            ] {
                let row = rows
                    .iter()
                    .find(|r| r.path == path && r.verb.as_str() == method.as_str());
                let req = Request::builder()
                    .method(method.clone())
                    .uri(&concrete)
                    .body(Body::empty())
                    .expect("request");
                let status = app.clone().oneshot(req).await.expect("response").status();
                let expected = match row {
                    Some(r) if r.doc.public => StatusCode::OK,
                    Some(_) => StatusCode::UNAUTHORIZED,
                    None => StatusCode::METHOD_NOT_ALLOWED,
                };
                assert_eq!(status, expected, "{method} {concrete}");
            }
        }
    }
}
