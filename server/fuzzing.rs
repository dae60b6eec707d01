//! The bodies of the server's fuzz targets (`fuzz/fuzz_targets/goal_document.rs` and
//! `demo_archive.rs` call them with libFuzzer's bytes); `cargo test` feeds every committed
//! corpus and regression file through the same bodies (see the tests below, and
//! `goalsmith_core::fuzzing` for the core's targets).
//!
//! A body never returns an error: it panics when a property that the code documents does not
//! hold, which libFuzzer reports as a crash.

use crate::api::extract::parse_json;
use crate::config::Limits;
use crate::demo_archive::{self, Demo, DemoLimits, FrameRules};
use crate::images;
use crate::scoring;
use crate::service::cameras::CameraDoc;
use crate::service::goals;
use goalsmith_core::cost::RewardGrid;
use goalsmith_core::goal::GoalDocument;
use goalsmith_core::npy;
use image::ImageFormat;
use std::collections::HashMap;
use std::sync::{Arc, OnceLock};

/// The id of the one finished reward fit the `goal_document` target knows (any other id of a
/// `learned` term is refused as not found, as on a server without it).
pub const FUZZ_REWARD_FIT_ID: &str = "00000000-0000-4000-8000-00000000f17a";

/// A camera with its reward grids, as `check_document` has them once loaded.
struct Camera {
    doc: CameraDoc,
    grids: HashMap<String, Arc<RewardGrid>>,
}

/// The cameras every goal document is checked against: the demo bench's (640 × 480, calibrated,
/// a safe zone and a no-go zone), and a small uncalibrated one without zones (64 × 48, so masks
/// in the corpus stay small).
fn cameras() -> &'static [Camera] {
    static CAMERAS: OnceLock<Vec<Camera>> = OnceLock::new();
    CAMERAS.get_or_init(|| {
        let bench: CameraDoc = serde_json::from_value(serde_json::json!({
            "name": "bench overhead", "width": 640, "height": 480,
            "intrinsics": {"fx": 560.0, "fy": 560.0, "cx": 319.5, "cy": 239.5,
                           "distortion": [-0.08, 0.02, 0.0, 0.0, 0.0]},
            "work_plane": {"normal": [0.0, 0.0, 1.0], "offset_m": 0.85},
            "pose_in_base": {"rotation": [[1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -1.0]],
                             "translation_m": [0.4, 0.0, 1.2]},
            "safe_zone": [[8, 8], [631, 8], [631, 471], [8, 471]],
            "no_go_zones": [[[560, 400], [630, 400], [630, 470], [560, 470]]],
        }))
        .expect("a valid camera document");
        let small: CameraDoc = serde_json::from_value(serde_json::json!({
            "name": "small", "width": 64, "height": 48, "no_go_zones": [],
        }))
        .expect("a valid camera document");
        let grid = |cell_px: u32, cols: usize, rows: usize| {
            let values = (0..cols * rows)
                .map(|k| ((k % cols) as f32 * 0.5) - (k / cols) as f32)
                .collect();
            let grid = RewardGrid::new(cell_px, cols, rows, values).expect("a valid grid");
            HashMap::from([(FUZZ_REWARD_FIT_ID.to_string(), Arc::new(grid))])
        };
        vec![
            Camera {
                doc: bench,
                grids: grid(10, 64, 48),
            },
            Camera {
                doc: small,
                grids: grid(8, 8, 6),
            },
        ]
    })
}

/// The `goal_document` target: `data` as the body of `POST /api/goals`.
///
/// The body is parsed as the route parses it ([`parse_json`], the strict JSON reader) and
/// checked against each camera of [`cameras`] as `service::goals::check_document` checks it
/// ([`goals::check_against_camera`]). An accepted goal must then go all the way: its revision
/// is built, the stored document re-checks (`scoring::spec_from_revision`, as the cost routes
/// do) to the same terms and cost, its cost model builds, its cost maps are a readable NPY of
/// shape (P, h, w), and a candidate standing on the sources has a finite cost.
pub fn goal_document(data: &[u8]) {
    let Ok(doc) = parse_json::<GoalDocument>(data) else {
        return;
    };
    let limits = Limits::default();
    for camera in cameras() {
        let Ok(spec) =
            goals::check_against_camera(doc.clone(), &camera.doc, &limits, &camera.grids)
        else {
            continue;
        };
        let row = goals::build_revision("goal", 1, &spec, &camera.doc, "fuzz", 0)
            .expect("a checked goal builds its revision");
        let stored: serde_json::Value =
            serde_json::from_str(&row.document).expect("a revision is JSON");
        let lookup = |id: &str| camera.grids.get(id).cloned();
        let (w, h) = (camera.doc.width, camera.doc.height);
        let again = scoring::spec_from_revision(&stored, w, h, &lookup)
            .unwrap_or_else(|e| panic!("a saved revision does not re-check: {e}"));
        let (first, second) = (spec.normalized_document(), again.normalized_document());
        assert_eq!(first.terms, second.terms, "the stored terms changed");
        assert_eq!(first.cost, second.cost, "the stored cost changed");

        let model = scoring::model(&again).expect("a checked goal has a cost model");
        let maps = scoring::cost_maps_npy(&model, 8, 6).expect("small cost maps build");
        let read = npy::read(&maps, maps.len()).expect("cost maps are a valid NPY");
        assert_eq!(read.header.shape, vec![model.len(), 6, 8]);
        let sources: Vec<f64> = again
            .source_points()
            .iter()
            .flat_map(|s| s.source.to_array())
            .collect();
        let cost = model
            .evaluate_points(&sources, 1, 1)
            .expect("the sources are a valid candidate");
        assert!(cost.costs[0].is_finite(), "cost {:?}", cost.costs);
    }
}

/// The frame rules of the `demo_archive` target: a camera of 8 × 6 pixels and decoder limits
/// small enough that one run stays fast.
pub const DEMO_RULES: FrameRules = FrameRules {
    width: 8,
    height: 6,
    max_side: 64,
    max_alloc: 1 << 20,
};

/// The upload limits of the `demo_archive` target: the server's rules ([`DemoLimits`]) with
/// small numbers, the compression ratio bound as the server's.
pub fn demo_limits() -> DemoLimits {
    DemoLimits {
        max_frames: 8,
        max_archive_bytes: 1 << 20,
        max_decoded_bytes: 8 * 6 * 4 * 8,
        max_entry_bytes: 1 << 16,
        max_ratio: DemoLimits::default().max_ratio,
    }
}

/// The `demo_archive` target: `data` as a demonstration upload, read both as a ZIP of frames
/// and as an animated GIF. An accepted demo has 1 to `max_frames` frames, each of which decodes
/// to the camera's size, and times (all or none) that are finite and never go back.
pub fn demo_archive(data: &[u8]) {
    let limits = demo_limits();
    if let Ok(demo) = demo_archive::read_zip(data, DEMO_RULES, &limits) {
        check_demo(&demo, &limits);
    }
    if let Ok(demo) = demo_archive::read_gif(data, DEMO_RULES, &limits) {
        check_demo(&demo, &limits);
    }
}

fn check_demo(demo: &Demo, limits: &DemoLimits) {
    assert!(!demo.frames.is_empty() && demo.frames.len() <= limits.max_frames);
    let timed = demo.frames[0].time_s.is_some();
    let mut last = f64::NEG_INFINITY;
    for frame in &demo.frames {
        let format = match frame.content_type {
            "image/png" => ImageFormat::Png,
            "image/jpeg" => ImageFormat::Jpeg,
            other => panic!("a frame of type {other}"),
        };
        let img = images::decode(
            &frame.bytes,
            format,
            DEMO_RULES.max_side,
            DEMO_RULES.max_alloc,
        )
        .expect("a stored frame decodes");
        assert_eq!(
            (img.width(), img.height()),
            (DEMO_RULES.width, DEMO_RULES.height)
        );
        assert_eq!(
            frame.time_s.is_some(),
            timed,
            "some frames have times, some not"
        );
        if let Some(t) = frame.time_s {
            assert!(t.is_finite() && t >= last, "time {t} after {last}");
            last = t;
        }
    }
}

#[cfg(test)]
mod tests {
    use goalsmith_core::fuzzing::run_inputs;
    use std::path::Path;

    fn fuzz_dir() -> std::path::PathBuf {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz")
    }

    /// The committed corpus and every crash found so far, through the fuzz target's body.
    #[test]
    fn goal_document_corpus_and_regressions() {
        run_inputs(&fuzz_dir(), "goal_document", super::goal_document);
    }

    /// The committed corpus and every crash found so far, through the fuzz target's body.
    #[test]
    fn demo_archive_corpus_and_regressions() {
        run_inputs(&fuzz_dir(), "demo_archive", super::demo_archive);
    }
}
