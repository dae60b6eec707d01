//! The demo scenario: an invented greenhouse potting bench seen from above, loaded into an empty
//! database by `serve --demo`. The picture, its layout and four short demonstrations with their
//! ground truth (`demo-data/`) are painted by the project's own code:
//! `cargo run -p goalsmith-core --example paint_demo -- demo-data`.

use crate::service::auth::{self, Principal, Role};
use crate::service::{AppState, cameras, demos, frames, goals, tracks};
use crate::store;
use goalsmith_core::goal::GoalDocument;
use serde_json::{Value, json};

/// Name of the demo team.
pub const TEAM: &str = "greenhouse";

const BENCH_PNG: &[u8] = include_bytes!("../demo-data/bench.png");
const SCENE_JSON: &str = include_str!("../demo-data/scene.json");

/// The demonstrations: (name, animated GIF, ground truth), uploaded in this order.
const DEMOS: [(&str, &[u8], &str); 4] = [
    (
        "tray_straight",
        include_bytes!("../demo-data/demos/tray_straight.gif"),
        include_str!("../demo-data/demos/tray_straight.json"),
    ),
    (
        "tray_curved",
        include_bytes!("../demo-data/demos/tray_curved.gif"),
        include_str!("../demo-data/demos/tray_curved.json"),
    ),
    (
        "tray_pause",
        include_bytes!("../demo-data/demos/tray_pause.gif"),
        include_str!("../demo-data/demos/tray_pause.json"),
    ),
    (
        "pot_to_mat",
        include_bytes!("../demo-data/demos/pot_to_mat.gif"),
        include_str!("../demo-data/demos/pot_to_mat.json"),
    ),
];

/// The point of the first demo a track is started on at load, and its label.
const TRACKED_POINT: &str = "walls_cross_top_left";
const TRACK_LABEL: &str = "tray 2, cell walls crossing (top left)";

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
    // The demonstrations, uploaded as any editor would (each is checked against the camera).
    let mut uploaded = Vec::new();
    for (name, gif, _) in DEMOS {
        let ticket = demos::begin_upload(
            state,
            &who,
            &camera.id,
            "image/gif",
            Some(&name.replace('_', " ")),
        )
        .await
        .map_err(|e| e.to_string())?;
        let demo = ticket
            .finish(state, gif.to_vec())
            .await
            .map_err(|e| format!("demo {name} does not load: {e}"))?;
        uploaded.push((name, demo.id, demo.frame_count));
    }
    // One track started on the first, at a point whose path is known; the operation workers
    // follow it once the server runs.
    let truth: Value = serde_json::from_str(DEMOS[0].2)?;
    let start = &truth["points"][TRACKED_POINT]["path"][0];
    let (x, y) = (
        start[0]
            .as_f64()
            .ok_or("the ground truth has no start point")?,
        start[1]
            .as_f64()
            .ok_or("the ground truth has no start point")?,
    );
    let input = tracks::NewTrack {
        label: TRACK_LABEL.into(),
        frame: 0,
        x,
        y,
    };
    tracks::start(state, &who, &uploaded[0].1, input)
        .await
        .map_err(|e| e.to_string())?;
    let token = auth::create_team_token(&state.store, &team.id, Role::Editor, "demo planner")
        .await
        .map_err(|e| e.to_string())?
        .token;
    let listing: Vec<String> = uploaded
        .iter()
        .map(|(name, id, n)| format!("  demo {name} ({n} frames): /api/demos/{id}"))
        .collect();
    eprintln!(
        "demo loaded: team {TEAM:?} with a camera, a frame of the potting bench, 3 goals and {} \
         demonstrations (a track started on the first)\n{}\n\
         an editor API token for scripts (shown once): {token}",
        uploaded.len(),
        listing.join("\n")
    );
    Ok(Some(TEAM.to_string()))
}
