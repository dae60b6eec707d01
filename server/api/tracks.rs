//! Track routes: start a track on a demo, correct it, read it, export all of a demo's tracks.

use super::error::ServiceResult;
use super::extract::JsonBody;
use super::{Items, items};
use crate::service::AppState;
use crate::service::auth::Principal;
use crate::service::tracks::{self, Correction, NewTrack, Started, TrackView};
use axum::Json;
use axum::extract::{Path, State};
use axum::http::{StatusCode, header};
use axum::response::{IntoResponse, Response};

/// `POST /api/demos/{id}/tracks` → 202 with the track and its tracking operation.
pub async fn start(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    JsonBody(input): JsonBody<NewTrack>,
) -> ServiceResult<(StatusCode, Json<Started>)> {
    Ok((
        StatusCode::ACCEPTED,
        Json(tracks::start(&state, &who, &id, input).await?),
    ))
}

/// `GET /api/demos/{id}/tracks/{track_id}`.
pub async fn get_one(
    State(state): State<AppState>,
    who: Principal,
    Path((id, track)): Path<(String, String)>,
) -> ServiceResult<Json<TrackView>> {
    Ok(Json(tracks::view(&state, &who, &id, &track).await?))
}

/// `PUT /api/demos/{id}/tracks/{track_id}/samples/{frame}` → 202: the frames after it are
/// tracked again.
pub async fn correct(
    State(state): State<AppState>,
    who: Principal,
    Path((id, track, frame)): Path<(String, String, String)>,
    JsonBody(c): JsonBody<Correction>,
) -> ServiceResult<(StatusCode, Json<Started>)> {
    Ok((
        StatusCode::ACCEPTED,
        Json(tracks::correct(&state, &who, &id, &track, &frame, c).await?),
    ))
}

/// `GET /api/demos/{id}/tracks.json`: every track of the demo.
pub async fn export_json(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Json<Items<TrackView>>> {
    Ok(items(tracks::all(&state, &who, &id).await?))
}

/// `GET /api/demos/{id}/tracks.csv`: every sample of every track of the demo.
pub async fn export_csv(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Response> {
    let all = tracks::all(&state, &who, &id).await?;
    Ok((
        [
            (header::CONTENT_TYPE, "text/csv; charset=utf-8".to_string()),
            (
                header::CONTENT_DISPOSITION,
                format!("attachment; filename=\"demo-{id}-tracks.csv\""),
            ),
        ],
        tracks::csv(&all),
    )
        .into_response())
}
