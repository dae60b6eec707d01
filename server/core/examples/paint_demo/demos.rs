//! The demo clips: the seed tray and the small pot slid across the bench to the watering mat
//! along known paths, written as animated GIFs (`demos/<name>.gif`) with their ground truth
//! (`demos/<name>.json`: the pose of the moving thing and the paths of a few named points on
//! it, frame by frame, in frame pixels).

use std::error::Error;
use std::path::Path;

use serde_json::json;

use crate::gif_out::encode;
use crate::raster::Image;
use crate::scene::motion::{Mover, Pose, Stage};

/// Frames per second of every clip (GIF delays are in hundredths of a second).
const FPS: u16 = 10;

/// One clip: what moves and where it is in each frame.
pub struct Clip {
    pub name: &'static str,
    pub description: &'static str,
    pub mover: Mover,
    pub poses: Vec<Pose>,
}

/// A minimum-jerk profile: 0 → 1 with zero speed and acceleration at both ends, the way a
/// hand moves a thing from one place to another.
fn ease(t: f64) -> f64 {
    let t = t.clamp(0.0, 1.0);
    t * t * t * (10.0 + t * (-15.0 + 6.0 * t))
}

fn lerp(a: [f64; 2], b: [f64; 2], t: f64) -> [f64; 2] {
    [a[0] + (b[0] - a[0]) * t, a[1] + (b[1] - a[1]) * t]
}

/// A cubic Bézier curve through `p[0]` and `p[3]`.
fn bezier(p: [[f64; 2]; 4], t: f64) -> [f64; 2] {
    let u = 1.0 - t;
    let w = [u * u * u, 3.0 * u * u * t, 3.0 * u * t * t, t * t * t];
    let mut out = [0.0; 2];
    for k in 0..4 {
        out[0] += w[k] * p[k][0];
        out[1] += w[k] * p[k][1];
    }
    out
}

/// The times 0, 1/(n − 1), …, 1 of `n` frames.
fn steps(n: usize) -> impl Iterator<Item = f64> {
    (0..n).map(move |k| k as f64 / (n - 1) as f64)
}

/// The four clips, for trays and pots placed as on `tray` and `pot` stages.
pub fn clips(tray: &Stage, pot: &Stage) -> Vec<Clip> {
    let t0 = tray.home();
    let mat_angle = -1.5;
    let turn = |a: f64, s: f64| a + (mat_angle - a) * s;
    let straight_end = [362.0, 300.0];
    let straight = steps(30)
        .map(|t| {
            let s = ease(t);
            Pose {
                center: lerp(t0.center, straight_end, s),
                angle_deg: turn(t0.angle_deg, s),
            }
        })
        .collect();
    let curve = [t0.center, [250.0, 352.0], [352.0, 336.0], [360.0, 256.0]];
    let curved = steps(36)
        .map(|t| {
            let s = ease(t);
            Pose {
                center: bezier(curve, s),
                // Turned a little against the swing half-way, square to the mat at the end.
                angle_deg: turn(t0.angle_deg, s) - 5.0 * (std::f64::consts::PI * s).sin(),
            }
        })
        .collect();
    // Half-way, the hand stops for 8 frames, then goes on to a spot a little further left.
    let mid = [246.0, 318.0];
    let pause_end = [344.0, 288.0];
    let mut paused: Vec<Pose> = steps(13)
        .map(|t| Pose {
            center: lerp(t0.center, mid, ease(t)),
            angle_deg: turn(t0.angle_deg, 0.5 * ease(t)),
        })
        .collect();
    let hold = *paused.last().expect("frames");
    paused.extend(std::iter::repeat_n(hold, 8));
    paused.extend(steps(14).skip(1).map(|t| Pose {
        center: lerp(mid, pause_end, ease(t)),
        angle_deg: turn(hold.angle_deg, ease(t)),
    }));
    let p0 = pot.home();
    let spot = pot.spare_spot();
    let arc = [p0.center, [400.0, 392.0], [470.0, 340.0], spot];
    let pot_path = steps(24)
        .map(|t| Pose {
            center: bezier(arc, ease(t)),
            angle_deg: 0.0,
        })
        .collect();
    vec![
        Clip {
            name: "tray_straight",
            description: "Seed tray 2 slid in a straight line from its place on the bench onto \
                          the lower left of the watering mat, turning square to the mat; 30 \
                          frames at 10 frames/s. The small pot already stands on the mat.",
            mover: Mover::Tray2,
            poses: straight,
        },
        Clip {
            name: "tray_curved",
            description: "Seed tray 2 swung along a curve past the small pot's old place up to \
                          the left edge of the watering mat, turning a few degrees on the way; \
                          36 frames at 10 frames/s. The small pot already stands on the mat.",
            mover: Mover::Tray2,
            poses: curved,
        },
        Clip {
            name: "tray_pause",
            description: "Seed tray 2 slid half-way, held still for 8 frames, then slid on to \
                          the edge of the watering mat; 34 frames at 10 frames/s. The small \
                          pot already stands on the mat.",
            mover: Mover::Tray2,
            poses: paused,
        },
        Clip {
            name: "pot_to_mat",
            description: "The small pot slid along a gentle arc from its place on the bench to \
                          the free spot on the watering mat between the planted pots; 24 \
                          frames at 10 frames/s.",
            mover: Mover::PotSmall,
            poses: pot_path,
        },
    ]
}

fn round3(v: f64) -> f64 {
    (v * 1000.0).round() / 1000.0
}

/// The ground truth of a clip, as JSON.
pub fn truth(
    clip: &Clip,
    stage: &Stage,
    file: &str,
    width: usize,
    height: usize,
) -> serde_json::Value {
    let n = clip.poses.len();
    let mut points = serde_json::Map::new();
    for (name, local) in stage.landmarks() {
        let path: Vec<[f64; 2]> = clip
            .poses
            .iter()
            .map(|p| stage.to_frame(*p, local).map(round3))
            .collect();
        points.insert(
            name.into(),
            json!({"local": local.map(round3), "path": path}),
        );
    }
    json!({
        "name": clip.name,
        "description": clip.description,
        "file": file,
        "object": match clip.mover { Mover::Tray2 => "tray_2", Mover::PotSmall => "pot_small" },
        "width": width,
        "height": height,
        "frame_count": n,
        "times_s": (0..n).map(|k| round3(k as f64 / f64::from(FPS))).collect::<Vec<_>>(),
        "centers": clip.poses.iter().map(|p| p.center.map(round3)).collect::<Vec<_>>(),
        "angles_deg": clip.poses.iter().map(|p| round3(p.angle_deg)).collect::<Vec<_>>(),
        "points": points,
        "convention": "pixel coordinates [x, y], x right, y down, centre of the top-left pixel \
                       at (0, 0); angles clockwise on screen from the x axis; a point's `local` \
                       is along the object's turned x and y axes from its centre",
        "encoding": "animated GIF without dithering: the first frame whole with a palette of at \
                     most 255 colours, each later frame only the box of pixels that changed, \
                     with its own palette, the unchanged pixels in it transparent; the paths \
                     are exact for the painting before its colours were reduced",
    })
}

/// Paints every frame of a clip.
pub fn render(clip: &Clip, stage: &Stage) -> Vec<Image> {
    clip.poses.iter().map(|p| stage.frame(*p)).collect()
}

/// The clip as an animated GIF.
pub fn gif(frames: &[Image]) -> Result<Vec<u8>, Box<dyn Error>> {
    // The first frame's palette from the first, middle and last frames: the bench and the
    // moving thing.
    let n = frames.len();
    Ok(encode(frames, &[0, n / 2, n - 1], 100 / FPS)?)
}

/// Writes `dir/demos/<name>.gif` and `dir/demos/<name>.json` for every clip.
pub fn write_all(
    dir: &Path,
    width: usize,
    height: usize,
    seed: u64,
    pretty: impl Fn(&serde_json::Value) -> String,
) -> Result<(), Box<dyn Error>> {
    let out = dir.join("demos");
    std::fs::create_dir_all(&out)?;
    let tray = Stage::new(width, height, seed, Mover::Tray2)?;
    let pot = Stage::new(width, height, seed, Mover::PotSmall)?;
    for clip in clips(&tray, &pot) {
        let stage = match clip.mover {
            Mover::Tray2 => &tray,
            Mover::PotSmall => &pot,
        };
        let file = format!("{}.gif", clip.name);
        let bytes = gif(&render(&clip, stage))?;
        std::fs::write(out.join(&file), &bytes)?;
        let text = pretty(&truth(&clip, stage, &file, width, height));
        std::fs::write(out.join(format!("{}.json", clip.name)), text + "\n")?;
        println!(
            "demos/{file} {} bytes, {} frames",
            bytes.len(),
            clip.poses.len()
        );
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use goalsmith_core::track::{GrayFrame, LkParams, Pyramid, track_point};
    use image::AnimationDecoder;

    const W: usize = 640;
    const H: usize = 480;
    const SEED: u64 = 20_240_611;

    /// The frames of a GIF as the server decodes them (composited, RGBA).
    fn decode(bytes: &[u8]) -> Vec<image::RgbaImage> {
        let d = image::codecs::gif::GifDecoder::new(std::io::Cursor::new(bytes)).unwrap();
        d.into_frames().map(|f| f.unwrap().into_buffer()).collect()
    }

    fn gray(f: &image::RgbaImage) -> Pyramid {
        let l = image::DynamicImage::ImageRgba8(f.clone()).to_luma8();
        Pyramid::build(
            &GrayFrame::from_u8(l.width() as usize, l.height() as usize, l.as_raw()).unwrap(),
            4,
        )
    }

    fn stages() -> (Stage, Stage) {
        (
            Stage::new(W, H, SEED, Mover::Tray2).unwrap(),
            Stage::new(W, H, SEED, Mover::PotSmall).unwrap(),
        )
    }

    #[test]
    fn clips_stay_on_the_bench_and_clear_of_other_things() {
        let (tray, pot) = stages();
        let all = clips(&tray, &pot);
        assert_eq!(all.len(), 4);
        for clip in &all {
            let stage = if clip.mover == Mover::Tray2 {
                &tray
            } else {
                &pot
            };
            assert_eq!(clip.poses[0], stage.home(), "{}", clip.name);
            for (k, pose) in clip.poses.iter().enumerate() {
                let [cx, cy] = pose.center;
                for j in (cy as i64 - 130).max(0)..(cy as i64 + 130).min(H as i64) {
                    for i in (cx as i64 - 130).max(0)..(cx as i64 + 130).min(W as i64) {
                        let (x, y) = (i as f64, j as f64);
                        if stage.mover_sd(*pose, x, y) < 1.0 {
                            assert!(
                                stage.others_sd(x, y) > 1.0,
                                "{} frame {k} touches something at ({x}, {y})",
                                clip.name
                            );
                            assert!(x > 4.0 && y > 4.0 && x < W as f64 - 5.0 && y < H as f64 - 5.0);
                        }
                    }
                }
            }
        }
        // The pot ends on the spare spot.
        let last = all[3].poses.last().unwrap();
        assert_eq!(last.center, pot.spare_spot());
    }

    #[test]
    fn the_tray_is_painted_where_its_pose_says() {
        // The tray's plastic (dark, grey) is symmetric about its centre, so the centroid of its
        // pixels is the centre, also between pixels and turned.
        let (tray, pot) = stages();
        let clip = &clips(&tray, &pot)[1];
        for k in [0, 7, 18, 35] {
            let pose = clip.poses[k];
            let f = tray.frame(pose);
            let (mut n, mut sx, mut sy) = (0.0, 0.0, 0.0);
            for j in 0..H {
                for i in 0..W {
                    let p = &f.data[4 * (j * W + i)..4 * (j * W + i) + 3];
                    let (lo, hi) = (*p.iter().min().unwrap(), *p.iter().max().unwrap());
                    let near = (i as f64 - pose.center[0]).hypot(j as f64 - pose.center[1]) < 120.0;
                    if near && hi < 90 && lo > 20 && hi - lo < 10 {
                        n += 1.0;
                        sx += i as f64;
                        sy += j as f64;
                    }
                }
            }
            let c = [sx / n, sy / n];
            let e = (c[0] - pose.center[0]).hypot(c[1] - pose.center[1]);
            assert!(
                n > 3000.0 && e < 0.3,
                "frame {k}: {n} px around {c:?}, pose {pose:?}"
            );
        }
    }

    /// Follows each named point frame to frame through the GIF as decoded (the server's
    /// tracker does the same, both ways), and compares with the truth.
    #[test]
    fn tracking_the_gifs_follows_the_truth() {
        let (tray, pot) = stages();
        for clip in clips(&tray, &pot) {
            let stage = if clip.mover == Mover::Tray2 {
                &tray
            } else {
                &pot
            };
            let dec = decode(&gif(&render(&clip, stage)).unwrap());
            assert_eq!(dec.len(), clip.poses.len());
            let pyr: Vec<Pyramid> = dec.iter().map(gray).collect();
            for (name, local) in stage.landmarks() {
                let truth: Vec<[f64; 2]> = clip
                    .poses
                    .iter()
                    .map(|p| stage.to_frame(*p, local))
                    .collect();
                let mut p = truth[0];
                let mut errs = Vec::new();
                for k in 1..pyr.len() {
                    p = track_point(&pyr[k - 1], &pyr[k], p, &LkParams::default())
                        .unwrap()
                        .position;
                    errs.push((p[0] - truth[k][0]).hypot(p[1] - truth[k][1]));
                }
                errs.sort_by(f64::total_cmp);
                let (median, max) = (errs[errs.len() / 2], errs[errs.len() - 1]);
                // Measured: medians 0.05–0.2 px, largest 0.31 px.
                assert!(
                    median <= 0.3 && max <= 0.5,
                    "{} {name}: median {median:.3} px, max {max:.3} px",
                    clip.name
                );
            }
        }
    }

    /// The files in demo-data/demos are what the painter writes now, byte for byte.
    #[test]
    fn demo_data_is_up_to_date() {
        let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/demos");
        let (tray, pot) = stages();
        let clip = &clips(&tray, &pot)[3];
        let bytes = gif(&render(clip, &pot)).unwrap();
        let stored = std::fs::read(dir.join("pot_to_mat.gif")).unwrap();
        assert!(
            bytes == stored,
            "run the painter: demo-data/demos/pot_to_mat.gif is stale"
        );
        let truth: serde_json::Value =
            serde_json::from_slice(&std::fs::read(dir.join("pot_to_mat.json")).unwrap()).unwrap();
        assert_eq!(truth["frame_count"], 24);
        assert_eq!(
            truth["points"]["soil_centre"]["path"][23],
            json!(pot.spare_spot())
        );
    }
}
