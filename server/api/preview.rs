//! `POST /api/preview/cost-map.png`: the cost map of one source point of an *unsaved* goal, as a
//! translucent heat image the editor lays over the frame while a person edits.
//!
//! Computed here with the same checked path a save takes (`check_document`, then the core's
//! `CostModel`), so the preview is the map a planner will get, not a browser approximation; a
//! goal the server would refuse answers 422 with the same message and field as a save.

use super::AppState;
use super::error::{ServiceError, ServiceResult};
use super::extract::JsonBody;
use crate::service::auth::Principal;
use crate::service::goals::check_document;
use axum::extract::State;
use axum::http::{HeaderValue, header};
use axum::response::{IntoResponse, Response};
use goalsmith_core::cost::CostModel;
use goalsmith_core::goal::GoalDocument;
use schemars::JsonSchema;
use serde::Deserialize;

/// The route path (a row of the API's route table, so also in the OpenAPI document).
pub const ROUTE: &str = "/api/preview/cost-map.png";

/// Longest side of the preview map; the browser scales it over the frame. Each map pixel holds
/// the exact cost at its centre (the cost maps' convention), so a coarse preview is exact where
/// it samples.
const DEFAULT_SIDE: u32 = 320;
const MAX_SIDE: u32 = 1024;

/// The request body.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PreviewInput {
    /// The goal as the editor holds it (same body as `POST /api/goals`).
    goal: GoalDocument,
    /// Index of the source point over all terms (a rigid term counts once per source).
    point: usize,
    /// Longest side of the returned map (default 320, clamped to 16..=1024).
    #[serde(default)]
    max_side: Option<u32>,
}

/// Map size (w, h) for a frame whose longest side is scaled to at most `side`.
pub fn preview_size(width: u32, height: u32, side: u32) -> (usize, usize) {
    let longest = width.max(height).max(1);
    if longest <= side {
        return (width as usize, height as usize);
    }
    let s = f64::from(side) / f64::from(longest);
    let w = (f64::from(width) * s).round().max(1.0) as usize;
    let h = (f64::from(height) * s).round().max(1.0) as usize;
    (w, h)
}

/// The handler.
pub async fn cost_map_png(
    State(state): State<AppState>,
    who: Principal,
    JsonBody(input): JsonBody<PreviewInput>,
) -> ServiceResult<Response> {
    let side = input.max_side.unwrap_or(DEFAULT_SIDE).clamp(16, MAX_SIDE);
    let (spec, _camera) = check_document(&state, &who, input.goal).await?;
    let points = spec.cost_points()?;
    let p = input.point;
    let Some(point) = points.get(p).cloned() else {
        return Err(ServiceError::invalid(
            "bad_point",
            "point",
            format!(
                "the goal has {} source points; {p} is not one",
                points.len()
            ),
        ));
    };
    let (fw, fh) = spec.frame_size();
    let settings = *spec.settings();
    let tolerance = point.tolerance_px;
    let permit = state.heavy_permits.acquire().await?;
    // The map is CPU work: keep it off the async workers.
    let png = crate::service::heavy::spawn(move || -> Result<(Vec<u8>, f64), String> {
        let _permit = permit;
        let model = CostModel::new(fw as usize, fh as usize, vec![point], settings)
            .map_err(|e| e.to_string())?;
        let (w, h) = preview_size(fw, fh, side);
        let d = model.distance_maps(w, h).map_err(|e| e.to_string())?;
        let metric = settings.metric();
        let cost: Vec<f64> = d.iter().map(|&v| metric.apply(v)).collect();
        let max = cost.iter().copied().fold(0.0f64, f64::max).max(1e-9);
        let mut rgba = Vec::with_capacity(w * h * 4);
        for (c, dv) in cost.iter().zip(&d) {
            // A square root spreads the near range, where a person decides.
            rgba.extend_from_slice(&crate::draw::palette::heat(
                (c / max).sqrt(),
                *dv <= tolerance,
            ));
        }
        let img = image::RgbaImage::from_raw(w as u32, h as u32, rgba)
            .ok_or_else(|| "preview buffer size".to_string())?;
        let mut out = std::io::Cursor::new(Vec::new());
        img.write_to(&mut out, image::ImageFormat::Png)
            .map_err(|e| e.to_string())?;
        Ok((out.into_inner(), max))
    })
    .await
    .map_err(|e| ServiceError::Internal(format!("preview task: {e}")))?
    .map_err(ServiceError::Internal)?;
    let mut resp = ([(header::CONTENT_TYPE, "image/png")], png.0).into_response();
    if let Ok(v) = HeaderValue::from_str(&format!("{:.6}", png.1)) {
        resp.headers_mut().insert("x-cost-max", v);
    }
    resp.headers_mut()
        .insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    Ok(resp)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes() {
        assert_eq!(preview_size(64, 48, 320), (64, 48));
        assert_eq!(preview_size(1280, 720, 320), (320, 180));
        assert_eq!(preview_size(1, 5000, 320), (1, 320));
    }
}
