//! `GET /metrics` at the API's edge: who may read it, and the text it serves (made by
//! [`crate::service::metrics`]).

use crate::service::{AppState, ServiceError, metrics};
use axum::extract::{ConnectInfo, State};
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{IntoResponse, Response};
use std::net::SocketAddr;

/// `GET /metrics`: for loopback clients, or with the metrics token as the bearer token.
pub async fn page(
    State(state): State<AppState>,
    peer: Option<axum::Extension<ConnectInfo<SocketAddr>>>,
    headers: HeaderMap,
) -> Response {
    let authorization = headers
        .get(header::AUTHORIZATION)
        .and_then(|v| v.to_str().ok());
    if !metrics::may_read(&state.metrics, peer.map(|c| c.0.0), authorization) {
        return ServiceError::Unauthorized.into_response();
    }
    (
        StatusCode::OK,
        [(
            header::CONTENT_TYPE,
            "text/plain; version=0.0.4; charset=utf-8",
        )],
        metrics::exposition(&state).await,
    )
        .into_response()
}
