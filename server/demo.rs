//! The demo scenario: an invented greenhouse potting bench seen from above, loaded into an empty
//! database by `serve --demo`. The picture and its layout (`demo-data/`) are painted by the
//! project's own code: `cargo run -p goalsmith-core --example paint_demo -- demo-data`.

use crate::service::auth::{self, Principal, Role};
use crate::service::{AppState, cameras, frames, goals};
use crate::store;
use goalsmith_core::goal::GoalDocument;
use serde_json::{Value, json};

/// Name of the demo team.
pub const TEAM: &str = "greenhouse";

const BENCH_PNG: &[u8] = include_bytes!("../demo-data/bench.png");
const SCENE_JSON: &str = include_str!("../demo-data/scene.json");

fn camera_body() -> Value {
    json!({
        "name": "potting bench, overhead",
        "width": 640,
        "height": 480,
        // A 640×480 camera 0.85 m above the bench, looking straight down; invented values of a
        // plausible small lens.
        "intrinsics": {"fx": 560.0, "fy": 560.0, "cx": 319.5, "cy": 239.5,
                       "distortion": [-0.08, 0.02, 0.0005, -0.0003, 0.0]},
        "work_plane": {"normal": [0.0, 0.0, 1.0], "offset_m": 0.85},
        "pose_in_base": {"rotation": [[0.0, -1.0, 0.0], [-1.0, 0.0, 0.0], [0.0, 0.0, -1.0]],
                         "translation_m": [0.45, 0.0, 0.95]},
        "safe_zone": [[8.0, 8.0], [631.0, 8.0], [631.0, 471.0], [8.0, 471.0]],
        // The large pot holds a plant that must not be touched.
        "no_go_zones": [[[472.0, 44.0], [592.0, 44.0], [592.0, 164.0], [472.0, 164.0]]]
    })
}

fn goal_bodies(frame_id: &str, scene: &Value) -> Vec<Value> {
    let g = &scene["suggested_goals"];
    let pot = &g["move_small_pot_onto_mat"];
    let tray = &g["slide_tray_2_by_mat_edge"];
    let trowel = &g["trowel_to_new_pose"];
    vec![
        json!({
            "name": "Small pot onto the mat",
            "frame_id": frame_id,
            "terms": [{"kind": "point", "label": "small pot", "source": pot["source"],
                       "target": pot["target"], "tolerance_px": pot["tolerance_px"]}],
            "note": "demo: the empty spot between the two planted pots"
        }),
        json!({
            "name": "Seed tray beside the mat",
            "frame_id": frame_id,
            "terms": [{"kind": "region", "label": "seed tray 2", "source": tray["source"],
                       "polygon": tray["polygon"], "tolerance_px": 6.0}],
            "cost": {"metric": "huber", "huber_delta_px": 10.0, "steps": "final"},
            "note": "demo: anywhere along the left edge of the mat"
        }),
        json!({
            "name": "Trowel to the top of the bench",
            "frame_id": frame_id,
            "terms": [{"kind": "rigid", "label": "trowel", "sources": trowel["sources"],
                       "targets": trowel["targets"], "allow_scale": false, "tolerance_px": 6.0}],
            "note": "demo: tip, both blade shoulders and the handle end move together"
        }),
    ]
}

/// Loads the demo when the database is empty; returns the demo team's name when it did.
pub async fn load(state: &AppState) -> Result<Option<String>, Box<dyn std::error::Error>> {
    if store::teams::count_teams(&state.store).await? > 0 {
        tracing::info!("the database already holds teams; the demo is not loaded again");
        return Ok(None);
    }
    let team = store::teams::get_or_create_team(&state.store, TEAM).await?;
    let who = Principal {
        team_id: team.id.clone(),
        role: Role::Owner,
        author: "demo".into(),
    };
    let input: cameras::CameraInput = serde_json::from_value(camera_body())?;
    let camera = cameras::create(state, &who, input)
        .await
        .map_err(|e| e.to_string())?;
    let (frame, _) = frames::upload(state, &who, &camera.id, "image/png", BENCH_PNG.to_vec())
        .await
        .map_err(|e| e.to_string())?;
    let scene: Value = serde_json::from_str(SCENE_JSON)?;
    for body in goal_bodies(&frame.id, &scene) {
        let doc: GoalDocument = serde_json::from_value(body)?;
        goals::create(state, &who, doc)
            .await
            .map_err(|e| format!("demo goal does not check: {e}"))?;
    }
    let token = auth::create_team_token(&state.store, &team.id, Role::Editor, "demo planner")
        .await
        .map_err(|e| e.to_string())?
        .token;
    eprintln!(
        "demo loaded: team {TEAM:?} with a camera, a frame of the potting bench and 3 goals\n\
         an editor API token for scripts (shown once): {token}"
    );
    Ok(Some(TEAM.to_string()))
}
