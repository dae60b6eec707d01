//! Camera routes.

use super::error::{ServiceError, ServiceResult};
use super::extract::JsonBody;
use super::{Items, items};
use crate::service::AppState;
use crate::service::auth::Principal;
use crate::service::cameras::{self, CameraInput, CameraView, ResizedIntrinsics, camera_view};
use axum::Json;
use axum::extract::{Path, State};
use axum::http::StatusCode;
use schemars::JsonSchema;
use serde::Deserialize;

/// Query of `GET /api/cameras/{id}/intrinsics`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ResizeQuery {
    /// Width of the resized frames (default: the camera's).
    #[schemars(range(min = 1, max = 16384))]
    pub width: Option<u32>,
    /// Height of the resized frames (default: the camera's).
    #[schemars(range(min = 1, max = 16384))]
    pub height: Option<u32>,
}

/// `GET /api/cameras/{id}/intrinsics[?width=w&height=h]`: the intrinsics for frames resized to
/// w × h (fx, cx scaled by w/W; fy, cy by h/H; pixel centres kept at integers), in both forms.
pub async fn intrinsics(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    query: Result<axum::extract::Query<ResizeQuery>, axum::extract::rejection::QueryRejection>,
) -> ServiceResult<Json<ResizedIntrinsics>> {
    let axum::extract::Query(q) =
        query.map_err(|e| ServiceError::invalid_body("bad_query", e.body_text()))?;
    Ok(Json(
        cameras::resized_intrinsics(&state, &who, &id, q.width, q.height).await?,
    ))
}

/// `POST /api/cameras`.
pub async fn create(
    State(state): State<AppState>,
    who: Principal,
    JsonBody(input): JsonBody<CameraInput>,
) -> ServiceResult<(StatusCode, Json<CameraView>)> {
    let row = cameras::create(&state, &who, input).await?;
    Ok((StatusCode::CREATED, Json(camera_view(&row)?)))
}

/// `GET /api/cameras`.
pub async fn list(
    State(state): State<AppState>,
    who: Principal,
) -> ServiceResult<Json<Items<CameraView>>> {
    Ok(items(cameras::list(&state, &who).await?))
}

/// `GET /api/cameras/{id}`.
pub async fn get_one(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Json<CameraView>> {
    let row = cameras::load(&state, &who, &id).await?;
    Ok(Json(camera_view(&row)?))
}
