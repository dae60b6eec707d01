//! Operation routes: poll an operation, stream its progress as server-sent events, cancel it.

use super::error::ServiceResult;
use crate::service::AppState;
use crate::service::auth::Principal;
use crate::service::operations::{self, OperationView};
use axum::Json;
use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::response::sse::{Event, KeepAlive, Sse};
use std::time::Duration;

/// How often the event stream looks at the operation.
const EVENT_POLL: Duration = Duration::from_millis(250);

/// `GET /api/operations/{id}`.
pub async fn get_one(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Json<OperationView>> {
    Ok(Json(operations::get(&state, &who, &id).await?))
}

/// `POST /api/operations/{id}/cancel` → 202 with the operation as it is now.
pub async fn cancel(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<(StatusCode, Json<OperationView>)> {
    Ok((
        StatusCode::ACCEPTED,
        Json(operations::cancel(&state, &who, &id).await?),
    ))
}

/// `GET /api/operations/{id}/events`: `text/event-stream` of the operation, an `operation`
/// event each time it changes, the last one when it is done; then the stream ends.
pub async fn events(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Sse<impl futures_util::Stream<Item = Result<Event, std::convert::Infallible>>>> {
    let first = operations::get(&state, &who, &id).await?;
    let start = (state, who, id, None::<OperationView>, Some(first));
    let stream = futures_util::stream::unfold(start, |(state, who, id, last, next)| async move {
        let mut current = match next {
            Some(v) => v,
            None => {
                if last.as_ref().is_some_and(|l| l.done) {
                    return None;
                }
                loop {
                    tokio::time::sleep(EVENT_POLL).await;
                    match operations::get(&state, &who, &id).await {
                        Ok(v) if Some(&v) != last.as_ref() => break v,
                        Ok(_) => continue,
                        Err(_) => return None,
                    }
                }
            }
        };
        let event = Event::default()
            .event("operation")
            .json_data(&current)
            .unwrap_or_else(|_| Event::default().event("operation"));
        current.progress = current.progress.clamp(0.0, 1.0);
        Some((Ok(event), (state, who, id, Some(current), None)))
    });
    Ok(Sse::new(stream).keep_alive(KeepAlive::default()))
}
