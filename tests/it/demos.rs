//! Demonstration uploads: a ZIP of frames or an animated GIF of the camera's size, stored as
//! ordered frames; every limit answered at and past it, and the unsafe archives refused.

use crate::on_both_databases;
use crate::support::*;
use reqwest::StatusCode;
use serde_json::{Value, json};

fn frames(n: usize, w: u32, h: u32) -> Vec<(String, Vec<u8>)> {
    (0..n)
        .map(|k| (format!("clip/{k:04}.png"), png(w, h, k as u8 * 40)))
        .collect()
}

fn zip_frames(f: &[(String, Vec<u8>)], extra: &[(&str, &[u8])]) -> Vec<u8> {
    let mut entries: Vec<(&str, &[u8])> =
        f.iter().map(|(n, d)| (n.as_str(), d.as_slice())).collect();
    entries.extend_from_slice(extra);
    zip_of(&entries)
}

async fn demo_upload(
    s: &Server,
    cam: &str,
    token: &str,
    ct: &str,
    body: Vec<u8>,
) -> (StatusCode, Value) {
    s.post_bytes(&format!("/api/cameras/{cam}/demos"), Some(token), ct, body)
        .await
}

fn code(v: &Value) -> &str {
    v["error"]["code"].as_str().unwrap_or("")
}

async fn uploads(s: Server) {
    let (editor, cam, _frame) = camera_and_frame(&s, "bench demos", json!({})).await;
    let viewer = s.token("bench demos", "viewer");
    let f = frames(3, 64, 48);
    let body = zip_frames(&f, &[("clip/timestamps.csv", b"t\n0\n0.04\n0.08\n")]);
    let (st, demo) = demo_upload(&s, &cam, &editor, "application/zip", body.clone()).await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    assert_eq!(demo["frame_count"], 3);
    assert_eq!(
        (demo["width"].as_i64(), demo["height"].as_i64()),
        (Some(64), Some(48))
    );
    let times: Vec<f64> = demo["frames"]
        .as_array()
        .expect("frames")
        .iter()
        .map(|f| f["time_s"].as_f64().expect("time"))
        .collect();
    assert_eq!(times, vec![0.0, 0.04, 0.08]);
    let id = demo["id"].as_str().expect("id").to_string();
    // Frames come back byte for byte, in name order; a viewer may read them.
    for (k, (_, bytes)) in f.iter().enumerate() {
        let (st, got) = get_bytes(&s, &format!("/api/demos/{id}/frames/{k}/image"), &viewer).await;
        assert_eq!(st, StatusCode::OK);
        assert_eq!(&got, bytes, "frame {k}");
    }
    for bad in ["3", "01", "-1", "x"] {
        let (st, _) = get_bytes(&s, &format!("/api/demos/{id}/frames/{bad}/image"), &viewer).await;
        assert_eq!(st, StatusCode::NOT_FOUND, "frame {bad}");
    }
    let (st, again) = s.get(&format!("/api/demos/{id}"), Some(&viewer)).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(again, demo);
    // Without a name, the upload time names it.
    let name = demo["name"].as_str().expect("name");
    assert!(
        name.starts_with("demo 20") && name.len() == "demo 2026-12-02 07:05:12".len(),
        "{name}"
    );

    // A name in the query: trimmed, up to 200 characters, no control or bidirectional-control
    // characters, nothing else in the query.
    let one_frame = zip_frames(&frames(1, 64, 48), &[]);
    let at_limit = "t".repeat(200);
    let past_limit = "t".repeat(201);
    let created = StatusCode::CREATED;
    let refused = StatusCode::UNPROCESSABLE_ENTITY;
    for (query, status, want) in [
        (
            "name=%20tray%20along%20the%20left%20edge%20".to_string(),
            created,
            "tray along the left edge",
        ),
        (format!("name={at_limit}"), created, at_limit.as_str()),
        (format!("name={past_limit}"), refused, "too_long"),
        ("name=".to_string(), refused, "required"),
        ("name=%20%20".to_string(), refused, "required"),
        (
            "name=tray%E2%80%AEgpj".to_string(),
            refused,
            "bad_character",
        ),
        ("name=a%0Ab".to_string(), refused, "bad_character"),
        ("title=tray".to_string(), refused, "bad_query"),
    ] {
        let (st, v) = s
            .post_bytes(
                &format!("/api/cameras/{cam}/demos?{query}"),
                Some(&editor),
                "application/zip",
                one_frame.clone(),
            )
            .await;
        let got = if st == created {
            v["name"].as_str().unwrap_or("")
        } else {
            code(&v)
        };
        assert_eq!((st, got), (status, want), "{query}: {v}");
    }

    // Who and what may upload.
    let (st, _) = demo_upload(&s, &cam, &viewer, "application/zip", body.clone()).await;
    assert_eq!(st, StatusCode::FORBIDDEN);
    let (st, err) = demo_upload(&s, &cam, &editor, "application/x-tar", body.clone()).await;
    assert_eq!(st, StatusCode::UNSUPPORTED_MEDIA_TYPE, "{err}");
    let other = s.token("another bench", "editor");
    let (st, _) = demo_upload(&s, &cam, &other, "application/zip", body.clone()).await;
    assert_eq!(st, StatusCode::NOT_FOUND, "another team's camera");
    let (st, _) = s.get(&format!("/api/demos/{id}"), Some(&other)).await;
    assert_eq!(st, StatusCode::NOT_FOUND, "another team's demo");

    // Archives that must not be opened, and frames that do not fit the camera.
    let one = png(64, 48, 7);
    let cases: Vec<(Vec<u8>, StatusCode, &str)> = vec![
        (
            zip_of(&[("../escape.png", &one)]),
            StatusCode::UNPROCESSABLE_ENTITY,
            "unsafe_entry_name",
        ),
        (
            zip_of(&[("../../x", &one)]),
            StatusCode::UNPROCESSABLE_ENTITY,
            "unsafe_entry_name",
        ),
        (
            zip_of(&[("0.png", &one), ("1.png", &one[..one.len() / 2])]),
            StatusCode::UNPROCESSABLE_ENTITY,
            "bad_image",
        ),
        (
            zip_of(&[("/abs/0.png", &one)]),
            StatusCode::UNPROCESSABLE_ENTITY,
            "unsafe_entry_name",
        ),
        (
            zip_of(&[("inner.zip", &zip_of(&[("0.png", &one)]))]),
            StatusCode::UNPROCESSABLE_ENTITY,
            "nested_archive",
        ),
        (
            zip_of(&[("0.png", &one), ("run.sh", b"echo")]),
            StatusCode::UNPROCESSABLE_ENTITY,
            "not_an_image",
        ),
        (
            zip_of(&[("0.png", &png(32, 48, 1))]),
            StatusCode::UNPROCESSABLE_ENTITY,
            "wrong_size",
        ),
        (
            zip_of(&[("0.png", &vec![0u8; 16 << 20])]),
            StatusCode::PAYLOAD_TOO_LARGE,
            "too_large",
        ),
        (
            b"not a zip".to_vec(),
            StatusCode::UNPROCESSABLE_ENTITY,
            "bad_archive",
        ),
        (zip_of(&[]), StatusCode::UNPROCESSABLE_ENTITY, "no_frames"),
    ];
    for (body, status, want) in cases {
        let (st, err) = demo_upload(&s, &cam, &editor, "application/zip", body).await;
        assert_eq!((st, code(&err)), (status, want), "{err}");
    }

    // An animated GIF: PNG frames, times from its delays.
    let mut gif = Vec::new();
    {
        let mut enc = image::codecs::gif::GifEncoder::new(&mut gif);
        for shade in [20u8, 200] {
            let buf = image::RgbaImage::from_pixel(64, 48, image::Rgba([shade, 90, 30, 255]));
            let frame =
                image::Frame::from_parts(buf, 0, 0, image::Delay::from_numer_denom_ms(100, 1));
            enc.encode_frame(frame).expect("gif frame");
        }
    }
    let (st, demo) = demo_upload(&s, &cam, &editor, "image/gif", gif).await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    assert_eq!(demo["frame_count"], 2);
    assert_eq!(demo["frames"][1]["time_s"], 0.1);
    let gid = demo["id"].as_str().expect("id");
    let (st, png1) = get_bytes(&s, &format!("/api/demos/{gid}/frames/1/image"), &editor).await;
    assert_eq!(st, StatusCode::OK);
    assert!(png1.starts_with(b"\x89PNG"));

    // A GIF of 10 000 frames (each one small) under the default limit of 900 frames a demo:
    // refused as too large, naming the limit, after reading no more than the limit's frames.
    let mut one = Vec::new();
    {
        let mut enc = image::codecs::gif::GifEncoder::new(&mut one);
        let buf = image::RgbaImage::from_pixel(64, 48, image::Rgba([120, 90, 30, 255]));
        let frame = image::Frame::from_parts(buf, 0, 0, image::Delay::from_numer_denom_ms(40, 1));
        enc.encode_frame(frame).expect("gif frame");
    }
    // The frame's own blocks run from its graphic control extension (21 F9 04) to the trailer.
    let at = one
        .windows(3)
        .position(|w| w == [0x21, 0xF9, 0x04])
        .expect("graphic control extension");
    assert_eq!(one.last(), Some(&0x3B), "GIF trailer");
    let block = &one[at..one.len() - 1];
    let mut many = one[..at].to_vec();
    for _ in 0..10_000 {
        many.extend_from_slice(block);
    }
    many.push(0x3B);
    let (st, err) = demo_upload(&s, &cam, &editor, "image/gif", many).await;
    assert_eq!(st, StatusCode::PAYLOAD_TOO_LARGE, "{err}");
    assert_eq!(code(&err), "too_large");
    let message = err["error"]["message"].as_str().unwrap_or("");
    assert!(message.contains("more than 900 frames"), "{err}");

    // Nothing refused was stored: the camera lists the ZIP, the two named and the GIF demo
    // only, newest first.
    let (st, list) = s
        .get(&format!("/api/cameras/{cam}/demos"), Some(&viewer))
        .await;
    assert_eq!(st, StatusCode::OK, "{list}");
    let ids: Vec<&str> = list["items"]
        .as_array()
        .expect("items")
        .iter()
        .map(|d| d["id"].as_str().expect("id"))
        .collect();
    assert_eq!(ids.len(), 4, "{list}");
    assert_eq!((ids[0], ids[3]), (gid, id.as_str()), "{list}");
    assert_eq!(list["items"][3]["frame_count"], 3);
    assert_eq!(list["items"][2]["name"], "tray along the left edge");
    assert!(
        list["items"][0].get("frames").is_none(),
        "a list leaves the frames out"
    );
    let (st, _) = s
        .get(&format!("/api/cameras/{cam}/demos"), Some(&other))
        .await;
    assert_eq!(st, StatusCode::NOT_FOUND, "another team's camera");
}

on_both_databases!(demo_uploads, uploads);

/// Demos with and without frame times, one after the other, as a lab uploads them: each is
/// stored with the times it came with (on PostgreSQL a frame without a time once broke the next
/// one with a time on the same connection: sqlx's Any driver sent the missing time as a 4-byte
/// float).
async fn with_and_without_times(s: Server) {
    let (editor, cam, _frame) = camera_and_frame(&s, "bench times", json!({})).await;
    let f = frames(2, 64, 48);
    for k in 0..12 {
        let timed = k % 3 != 0;
        let body = if timed {
            zip_frames(&f, &[("timestamps.csv", b"0\n0.5\n")])
        } else {
            zip_frames(&f, &[])
        };
        let (st, demo) = demo_upload(&s, &cam, &editor, "application/zip", body).await;
        assert_eq!(st, StatusCode::CREATED, "upload {k}: {demo}");
        let want = if timed { json!(0.5) } else { Value::Null };
        assert_eq!(demo["frames"][1]["time_s"], want, "upload {k}: {demo}");
    }
}

on_both_databases!(demo_times, with_and_without_times);

/// The frame-count and upload-size limits, at and past each, with small limits set through the
/// environment; each refusal names its limit.
async fn limits(kind: Db) {
    let Some(db) = fresh_db(kind, "demo_limits").await else {
        return;
    };
    let s = Server::start_with_env(
        &db.url,
        &db.data_dir,
        &[],
        &[("GOALSMITH_DEMO_MAX_FRAMES", "3")],
    );
    let (editor, cam, _) = camera_and_frame(&s, "limits", json!({})).await;
    let (st, demo) = demo_upload(
        &s,
        &cam,
        &editor,
        "application/zip",
        zip_frames(&frames(3, 64, 48), &[]),
    )
    .await;
    assert_eq!(st, StatusCode::CREATED, "at the frame limit: {demo}");
    let (st, err) = demo_upload(
        &s,
        &cam,
        &editor,
        "application/zip",
        zip_frames(&frames(4, 64, 48), &[]),
    )
    .await;
    assert_eq!(st, StatusCode::PAYLOAD_TOO_LARGE);
    assert!(
        err["error"]["message"]
            .as_str()
            .unwrap_or("")
            .contains("3 frames"),
        "{err}"
    );
    drop(s);
    // The upload size: a limit of exactly the two-frame archive's bytes.
    let small = zip_frames(&frames(2, 64, 48), &[]);
    let limit = small.len().to_string();
    let s = Server::start_with_env(
        &db.url,
        &db.data_dir,
        &[],
        &[("GOALSMITH_DEMO_MAX_BYTES", &limit)],
    );
    let (st, demo) = demo_upload(&s, &cam, &editor, "application/zip", small).await;
    assert_eq!(st, StatusCode::CREATED, "at the size limit: {demo}");
    let (st, err) = demo_upload(
        &s,
        &cam,
        &editor,
        "application/zip",
        zip_frames(&frames(3, 64, 48), &[]),
    )
    .await;
    assert_eq!(st, StatusCode::PAYLOAD_TOO_LARGE, "{err}");
    assert_eq!(code(&err), "too_large");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn demo_limits_sqlite() {
    limits(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn demo_limits_postgres() {
    limits(Db::Postgres).await;
}
