//! Reward-fit routes: start a fit (a durable operation), read it, download its reward map.

use super::error::ServiceResult;
use super::extract::JsonBody;
use crate::service::AppState;
use crate::service::auth::Principal;
use crate::service::reward_fits::{self, NewRewardFit, RewardFitSummary, RewardFitView, Started};
use axum::Json;
use axum::extract::{Path, State};
use axum::http::{StatusCode, header};
use axum::response::{IntoResponse, Response};

/// `POST /api/reward-fits` → 202 with the fit and the operation that runs it.
pub async fn start(
    State(state): State<AppState>,
    who: Principal,
    JsonBody(input): JsonBody<NewRewardFit>,
) -> ServiceResult<(StatusCode, Json<Started>)> {
    Ok((
        StatusCode::ACCEPTED,
        Json(reward_fits::start(&state, &who, input).await?),
    ))
}

/// `GET /api/reward-fits`: the team's fits, newest first.
pub async fn list(
    State(state): State<AppState>,
    who: Principal,
) -> ServiceResult<Json<super::Items<RewardFitSummary>>> {
    Ok(Json(super::Items {
        items: reward_fits::list(&state, &who, reward_fits::LIST_LIMIT as usize).await?,
    }))
}

/// `GET /api/reward-fits/{id}`.
pub async fn get_one(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Json<RewardFitView>> {
    Ok(Json(reward_fits::view(&state, &who, &id).await?))
}

/// `GET /api/reward-fits/{id}/reward-map.npy`: float32 (rows, cols), 409 until the fit has run.
pub async fn reward_map_npy(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Response> {
    let bytes = reward_fits::reward_map_npy(&state, &who, &id).await?;
    Ok(([(header::CONTENT_TYPE, "application/x-npy")], bytes).into_response())
}

/// `GET /api/reward-fits/{id}/reward-map.png`: the reward heat on the fit's frame with the
/// demos drawn, 409 until the fit has run.
pub async fn reward_map_png(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Response> {
    let bytes = reward_fits::reward_map_png(&state, &who, &id).await?;
    Ok((
        [
            ("content-type", "image/png"),
            (super::CAUTION_HEADER, crate::SAFETY_CAUTION),
        ],
        bytes,
    )
        .into_response())
}
