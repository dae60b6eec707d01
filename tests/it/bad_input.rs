//! Bad input: one row per validation rule, each a 422 (or 413/415) naming the field, and the
//! server keeps serving after each.

use crate::on_both_databases;
use crate::support::*;
use reqwest::StatusCode;
use serde_json::{Value, json};

fn goal_with(frame: &str, terms: Value) -> Value {
    json!({"name": "bad", "frame_id": frame, "terms": terms})
}

async fn table_of_bad_goals(s: Server) {
    // 64×48 camera with a safe zone leaving out the right edge and a no-go square.
    let (editor, _cam, frame) = camera_and_frame(
        &s,
        "validation",
        json!({
            "safe_zone": [[0.0, 0.0], [56.0, 0.0], [56.0, 47.0], [0.0, 47.0]],
            "no_go_zones": [[[20.0, 30.0], [30.0, 30.0], [30.0, 40.0], [20.0, 40.0]]]
        }),
    )
    .await;
    let p = |src: Value, tgt: Value| json!([{"kind": "point", "source": src, "target": tgt}]);
    let region = |poly: Value| json!([{"kind": "region", "source": [5.0, 5.0], "polygon": poly}]);
    let rows: Vec<(&str, Value, &str)> = vec![
        (
            "target right of the frame",
            goal_with(&frame, p(json!([5.0, 5.0]), json!([63.6, 5.0]))),
            "terms[0].target",
        ),
        (
            "source above the frame",
            goal_with(&frame, p(json!([5.0, -0.6]), json!([5.0, 5.0]))),
            "terms[0].source",
        ),
        (
            "polygon vertex below the frame",
            goal_with(
                &frame,
                region(json!([[1.0, 1.0], [10.0, 1.0], [10.0, 48.0]])),
            ),
            "terms[0].polygon[2]",
        ),
        (
            "polygon with two vertices",
            goal_with(&frame, region(json!([[1.0, 1.0], [10.0, 1.0]]))),
            "terms[0].polygon",
        ),
        (
            "empty polygon",
            goal_with(&frame, region(json!([]))),
            "terms[0].polygon",
        ),
        (
            "self-intersecting polygon",
            goal_with(
                &frame,
                region(json!([[1.0, 1.0], [10.0, 10.0], [10.0, 1.0], [1.0, 10.0]])),
            ),
            "terms[0].polygon",
        ),
        (
            "collinear polygon",
            goal_with(&frame, region(json!([[1.0, 1.0], [5.0, 1.0], [9.0, 1.0]]))),
            "terms[0].polygon",
        ),
        (
            "negative weight",
            goal_with(
                &frame,
                json!([{"kind": "point", "source": [1.0, 1.0], "target": [2.0, 2.0], "weight": -1.0}]),
            ),
            "terms[0].weight",
        ),
        (
            "zero tolerance",
            goal_with(
                &frame,
                json!([{"kind": "point", "source": [1.0, 1.0], "target": [2.0, 2.0], "tolerance_px": 0.0}]),
            ),
            "terms[0].tolerance_px",
        ),
        (
            "target outside the safe zone",
            goal_with(&frame, p(json!([5.0, 5.0]), json!([60.0, 5.0]))),
            "terms[0].target",
        ),
        (
            "target in a no-go zone",
            goal_with(&frame, p(json!([5.0, 5.0]), json!([25.0, 35.0]))),
            "terms[0].target",
        ),
        (
            "region over a no-go zone",
            goal_with(
                &frame,
                region(json!([
                    [15.0, 25.0],
                    [35.0, 25.0],
                    [35.0, 45.0],
                    [15.0, 45.0]
                ])),
            ),
            "terms[0].polygon",
        ),
        (
            "rigid with collinear sources",
            goal_with(
                &frame,
                json!([{"kind": "rigid", "sources": [[1.0, 1.0], [2.0, 2.0], [3.0, 3.0]], "targets": [[5.0, 5.0], [6.0, 6.0], [7.0, 7.0]]}]),
            ),
            "terms[0].sources",
        ),
        (
            "rigid with coincident sources",
            goal_with(
                &frame,
                json!([{"kind": "rigid", "sources": [[1.0, 1.0], [1.0, 1.0]], "targets": [[5.0, 5.0], [6.0, 6.0]]}]),
            ),
            "terms[0].sources",
        ),
        (
            "rigid with one point",
            goal_with(
                &frame,
                json!([{"kind": "rigid", "sources": [[1.0, 1.0]], "targets": [[5.0, 5.0]]}]),
            ),
            "terms[0].sources",
        ),
        (
            "rigid with unequal lists",
            goal_with(
                &frame,
                json!([{"kind": "rigid", "sources": [[1.0, 1.0], [4.0, 1.0]], "targets": [[5.0, 5.0]]}]),
            ),
            "terms[0].targets",
        ),
        (
            "mask that is not base64",
            goal_with(
                &frame,
                json!([{"kind": "mask", "source": [1.0, 1.0], "mask_png_base64": "***"}]),
            ),
            "terms[0].mask_png_base64",
        ),
        (
            "learned term with an unknown fit",
            goal_with(
                &frame,
                json!([{"kind": "learned", "source": [1.0, 1.0], "reward_fit_id": "0f7c7b1e-0000-4000-8000-000000000000"}]),
            ),
            "terms[0].reward_fit_id",
        ),
        (
            "unknown term kind",
            goal_with(&frame, json!([{"kind": "spiral", "source": [1.0, 1.0]}])),
            "terms[0]",
        ),
        (
            "unknown field in a term",
            goal_with(
                &frame,
                json!([{"kind": "point", "source": [1.0, 1.0], "target": [2.0, 2.0], "colour": "red"}]),
            ),
            "terms[0]",
        ),
        (
            "unknown top-level field",
            json!({"name": "x", "frame_id": frame, "terms": [], "priority": 3}),
            "",
        ),
        ("no terms", goal_with(&frame, json!([])), "terms"),
        (
            "blank name",
            json!({"name": "  ", "frame_id": frame, "terms": p(json!([1.0, 1.0]), json!([2.0, 2.0]))}),
            "name",
        ),
        (
            "unknown frame",
            goal_with(
                "7d4f1c2a-1111-4222-8333-444455556666",
                p(json!([1.0, 1.0]), json!([2.0, 2.0])),
            ),
            "frame_id",
        ),
        (
            "huber without delta",
            json!({"name": "x", "frame_id": frame, "terms": p(json!([1.0, 1.0]), json!([2.0, 2.0])), "cost": {"metric": "huber", "steps": "final"}}),
            "cost.huber_delta_px",
        ),
        (
            "coordinate as a string",
            goal_with(
                &frame,
                json!([{"kind": "point", "source": ["1", 1.0], "target": [2.0, 2.0]}]),
            ),
            "terms[0]",
        ),
    ];
    for (what, body, field) in &rows {
        let (st, err) = s.post("/api/goals", Some(&editor), body).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{what}: {err}");
        assert!(err["error"]["code"].is_string(), "{what}: {err}");
        assert!(
            !err["error"]["message"].as_str().unwrap_or("").is_empty(),
            "{what}: {err}"
        );
        if !field.is_empty() {
            let got = err["error"]["field"].as_str().unwrap_or("");
            assert!(
                got.starts_with(field),
                "{what}: field {got:?}, expected {field:?}: {err}"
            );
        }
    }
    // Safety zones checked as whole shapes, with the code as well as the field. A second
    // camera of the same team has an L-shaped safe zone (reflex corner at (20, 20)).
    let (_, _, l_frame) = camera_and_frame(
        &s,
        "validation",
        json!({"safe_zone": [[0.0, 0.0], [40.0, 0.0], [40.0, 20.0], [20.0, 20.0], [20.0, 40.0], [0.0, 40.0]]}),
    )
    .await;
    let touching_mask = {
        use base64::Engine;
        let mut painted = vec![false; 64 * 48];
        // (30, 35) lies on the no-go square's right edge.
        painted[35 * 64 + 30] = true;
        painted[35 * 64 + 31] = true;
        let png = goalsmith::images::encode_mask(64, 48, &painted).unwrap();
        base64::engine::general_purpose::STANDARD.encode(png)
    };
    let zone_rows: Vec<(&str, Value, &str, &str)> = vec![
        (
            "thin band through the no-go square, no vertex inside either",
            goal_with(
                &frame,
                region(json!([
                    [10.0, 34.0],
                    [40.0, 34.0],
                    [40.0, 36.0],
                    [10.0, 36.0]
                ])),
            ),
            "terms[0].polygon",
            "inside_no_go_zone",
        ),
        (
            "thin region cutting the corner of the L-shaped safe zone",
            goal_with(
                &l_frame,
                region(json!([
                    [18.0, 21.0],
                    [21.0, 18.0],
                    [22.0, 19.0],
                    [19.0, 22.0]
                ])),
            ),
            "terms[0].polygon",
            "outside_safe_zone",
        ),
        (
            "mask touching the no-go square",
            goal_with(
                &frame,
                json!([{"kind": "mask", "source": [1.0, 1.0], "mask_png_base64": touching_mask}]),
            ),
            "terms[0].mask_png_base64",
            "inside_no_go_zone",
        ),
    ];
    for (what, body, field, code) in &zone_rows {
        let (st, err) = s.post("/api/goals", Some(&editor), body).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{what}: {err}");
        assert_eq!(err["error"]["field"], *field, "{what}: {err}");
        assert_eq!(err["error"]["code"], *code, "{what}: {err}");
    }
    // Numbers JSON cannot carry, and broken JSON.
    for (what, raw) in [
        (
            "NaN literal",
            r#"{"name":"x","frame_id":"f","terms":[{"kind":"point","source":[NaN,1],"target":[1,1]}]}"#,
        ),
        (
            "infinite number",
            r#"{"name":"x","frame_id":"f","terms":[{"kind":"point","source":[1e999,1],"target":[1,1]}]}"#,
        ),
        ("truncated JSON", r#"{"name":"x","frame_id":"#),
    ] {
        let resp = s
            .client
            .post(s.url("/api/goals"))
            .bearer_auth(&editor)
            .header("content-type", "application/json")
            .body(raw)
            .send()
            .await
            .unwrap();
        let (st, err) = into_json(resp).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{what}: {err}");
        assert_eq!(err["error"]["code"], "bad_json", "{what}: {err}");
    }
    // Wrong media type.
    let resp = s
        .client
        .post(s.url("/api/goals"))
        .bearer_auth(&editor)
        .header("content-type", "text/plain")
        .body("{}")
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::UNSUPPORTED_MEDIA_TYPE);
    // None of this wrote anything.
    let (_, goals) = s.get("/api/goals", Some(&editor)).await;
    assert_eq!(goals["items"].as_array().unwrap().len(), 0);
    let (st, _) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK);
}

on_both_databases!(every_validation_rule_is_a_422, table_of_bad_goals);

async fn bad_cameras(s: Server) {
    let editor = s.token("cams", "editor");
    let rows: Vec<(Value, &str)> = vec![
        (json!({"name": "c", "width": 0, "height": 10}), "width"),
        (json!({"name": "c", "width": 10, "height": 20000}), "height"),
        (json!({"name": "", "width": 10, "height": 10}), "name"),
        (
            json!({"name": "c", "width": 10, "height": 10, "intrinsics": {"fx": -1.0, "fy": 1.0, "cx": 5.0, "cy": 5.0}}),
            "intrinsics",
        ),
        (
            json!({"name": "c", "width": 10, "height": 10, "intrinsics": {"K": [1.0, 0.0], "D": []}}),
            "intrinsics",
        ),
        (
            json!({"name": "c", "width": 10, "height": 10, "work_plane": {"normal": [0.0, 0.0, 0.0], "offset_m": 1.0}}),
            "work_plane",
        ),
        (
            json!({"name": "c", "width": 10, "height": 10, "pose_in_base": {"rotation": [[2.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]], "translation_m": [0.0, 0.0, 0.0]}}),
            "pose_in_base",
        ),
        (
            json!({"name": "c", "width": 10, "height": 10, "safe_zone": [[0.0, 0.0], [20.0, 0.0], [5.0, 5.0]]}),
            "safe_zone[1]",
        ),
        (
            json!({"name": "c", "width": 10, "height": 10, "no_go_zones": [[[0.0, 0.0], [5.0, 5.0], [5.0, 0.0], [0.0, 5.0]]]}),
            "no_go_zones[0]",
        ),
    ];
    for (body, field) in rows {
        let (st, err) = s.post("/api/cameras", Some(&editor), &body).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{body}: {err}");
        let got = err["error"]["field"].as_str().unwrap_or("");
        assert!(
            got.starts_with(field),
            "{body}: field {got:?}, expected {field}"
        );
    }
    let (_, list) = s.get("/api/cameras", Some(&editor)).await;
    assert_eq!(
        list["items"].as_array().unwrap().len(),
        0,
        "nothing half-written"
    );
}

on_both_databases!(bad_cameras_are_refused, bad_cameras);

fn crc32(bytes: &[u8]) -> u32 {
    // CRC-32/ISO-HDLC as PNG uses it (PNG specification, annex D), bitwise.
    let mut crc = 0xFFFF_FFFFu32;
    for &b in bytes {
        crc ^= u32::from(b);
        for _ in 0..8 {
            crc = if crc & 1 != 0 {
                (crc >> 1) ^ 0xEDB8_8320
            } else {
                crc >> 1
            };
        }
    }
    !crc
}

/// A PNG that is only a header claiming `w`×`h` RGBA pixels.
fn png_header_only(w: u32, h: u32) -> Vec<u8> {
    let mut out = vec![0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A];
    let mut ihdr = b"IHDR".to_vec();
    ihdr.extend_from_slice(&w.to_be_bytes());
    ihdr.extend_from_slice(&h.to_be_bytes());
    ihdr.extend_from_slice(&[8, 6, 0, 0, 0]);
    out.extend_from_slice(&13u32.to_be_bytes());
    out.extend_from_slice(&ihdr);
    out.extend_from_slice(&crc32(&ihdr).to_be_bytes());
    out
}

async fn hostile_uploads(s: Server) {
    let (editor, cam, _frame) = camera_and_frame(&s, "uploads", json!({})).await;
    let path = format!("/api/cameras/{cam}/frames");

    // 30000×30000 claimed: refused from the header, before any pixel buffer (3.6 GB) exists.
    let (st, err) = s
        .post_bytes(
            &path,
            Some(&editor),
            "image/png",
            png_header_only(30000, 30000),
        )
        .await;
    assert_eq!(st, StatusCode::PAYLOAD_TOO_LARGE, "{err}");
    assert!(err["error"]["message"].as_str().unwrap().contains("30000"));

    // A JPEG cut in half.
    let mut jpeg = std::io::Cursor::new(Vec::new());
    image::RgbImage::from_fn(64, 48, |x, y| image::Rgb([x as u8 * 4, y as u8 * 5, 90]))
        .write_to(&mut jpeg, image::ImageFormat::Jpeg)
        .unwrap();
    let jpeg = jpeg.into_inner();
    let (st, err) = s
        .post_bytes(
            &path,
            Some(&editor),
            "image/jpeg",
            jpeg[..jpeg.len() / 2].to_vec(),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    assert_eq!(err["error"]["code"], "bad_image");
    // The whole JPEG is fine.
    let (st, _) = s.post_bytes(&path, Some(&editor), "image/jpeg", jpeg).await;
    assert_eq!(st, StatusCode::CREATED);

    // Wrong size for the camera, wrong media type, empty body.
    let (st, err) = s
        .post_bytes(&path, Some(&editor), "image/png", png(32, 32, 3))
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    assert_eq!(err["error"]["code"], "wrong_size");
    let (st, _) = s
        .post_bytes(&path, Some(&editor), "image/gif", png(64, 48, 3))
        .await;
    assert_eq!(st, StatusCode::UNSUPPORTED_MEDIA_TYPE);
    let (st, _) = s
        .post_bytes(&path, Some(&editor), "image/png", vec![])
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);

    // Bodies over the configured limits: 16 MiB for JSON, 64 MiB for frames. The server may
    // answer before the body is sent, so these go over a raw socket that reads the reply
    // whatever happens to the upload.
    let (st, body) = raw_upload(
        &s,
        "/api/goals",
        &editor,
        "application/json",
        (17 << 20) as usize,
        false,
    )
    .await;
    assert_eq!(st, 413, "{body}");
    assert!(body.contains("\"too_large\""), "{body}");
    let (st, _) = raw_upload(&s, &path, &editor, "image/png", (65 << 20) as usize, false).await;
    assert_eq!(st, 413);
    // Without a length up front (chunked), the limit still holds.
    let (st, body) = raw_upload(&s, &path, &editor, "image/png", (70 << 20) as usize, true).await;
    assert_eq!(st, 413, "{body}");

    let (st, _) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK, "the server keeps serving");
    let (_, frames) = s.get(&path, Some(&editor)).await;
    assert_eq!(
        frames["items"].as_array().unwrap().len(),
        2,
        "only the two good frames exist"
    );
}

on_both_databases!(hostile_uploads_are_refused, hostile_uploads);

/// POSTs `len` bytes over a plain socket and returns the status and body of the reply, even when
/// the server answers (and closes) before the upload is complete. With `chunked`, the body goes
/// with `Transfer-Encoding: chunked`, so the server cannot know the size up front and must stop
/// reading at its limit.
async fn raw_upload(
    s: &Server,
    path: &str,
    token: &str,
    content_type: &str,
    len: usize,
    chunked: bool,
) -> (u16, String) {
    use std::io::{Read, Write};
    let addr = s.base.trim_start_matches("http://").to_string();
    let length = if chunked {
        "Transfer-Encoding: chunked".to_string()
    } else {
        format!("Content-Length: {len}")
    };
    let head = format!(
        "POST {path} HTTP/1.1\r\nHost: {addr}\r\nAuthorization: Bearer {token}\r\nContent-Type: {content_type}\r\n{length}\r\nConnection: close\r\n\r\n"
    );
    tokio::task::spawn_blocking(move || {
        let mut sock = std::net::TcpStream::connect(&addr).unwrap();
        sock.set_read_timeout(Some(std::time::Duration::from_secs(30)))
            .unwrap();
        sock.write_all(head.as_bytes()).unwrap();
        let chunk = vec![b' '; 1 << 20];
        let mut sent = 0;
        while sent < len {
            let n = chunk.len().min(len - sent);
            let piece = if chunked {
                [format!("{n:x}\r\n").as_bytes(), &chunk[..n], b"\r\n"].concat()
            } else {
                chunk[..n].to_vec()
            };
            if sock.write_all(&piece).is_err() {
                break;
            }
            sent += n;
        }
        if chunked {
            let _ = sock.write_all(b"0\r\n\r\n");
        }
        let mut reply = Vec::new();
        let _ = sock.read_to_end(&mut reply);
        let text = String::from_utf8_lossy(&reply).to_string();
        let status = text
            .split_whitespace()
            .nth(1)
            .and_then(|c| c.parse().ok())
            .unwrap_or(0);
        (status, text)
    })
    .await
    .unwrap()
}

/// A 422 with the contract's error body for an array sent where an object belongs: code
/// `bad_field`, the field the path of the array, and a message naming that path.
fn assert_array_refused(what: &str, st: StatusCode, err: &Value, field: &str) {
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{what}: {err}");
    let Some(error) = err["error"].as_object() else {
        panic!("{what}: no error object in {err}");
    };
    let mut keys: Vec<&str> = error.keys().map(String::as_str).collect();
    keys.sort_unstable();
    assert_eq!(
        keys,
        ["code", "field", "message", "request_id"],
        "{what}: {err}"
    );
    assert_eq!(error["code"], "bad_field", "{what}: {err}");
    assert_eq!(error["field"], field, "{what}: {err}");
    let message = error["message"].as_str().unwrap_or("");
    assert!(
        message.starts_with(&format!("{field}: expected an object, got an array")),
        "{what}: {err}"
    );
}

/// serde takes a JSON array for a struct, field by field; the contract says objects. Every
/// body below would be accepted by position without `strict_json`.
async fn arrays_for_objects(s: Server) {
    let (editor, cam, frame) = camera_and_frame(&s, "positional", json!({})).await;
    let (st, rev) = s
        .post("/api/goals", Some(&editor), &point_goal(&frame, "pot"))
        .await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    let goal = rev["goal_id"].as_str().unwrap().to_string();
    let etag_1 = {
        let resp = s
            .client
            .get(s.url(&format!("/api/goals/{goal}")))
            .bearer_auth(&editor)
            .send()
            .await
            .unwrap();
        etag(&resp).unwrap()
    };

    // Goals: a term (internally tagged, `kind` first by position) and the cost settings.
    let goals: Vec<(&str, Value, &str)> = vec![
        (
            "term as an array",
            json!({"name": "x", "frame_id": frame, "terms": [["point", null, [1.0, 1.0], [2.0, 2.0]]]}),
            "terms[0]",
        ),
        (
            "second term as an array",
            json!({"name": "x", "frame_id": frame, "terms": [
                {"kind": "point", "source": [1.0, 1.0], "target": [2.0, 2.0]},
                ["region", null, [5.0, 5.0], [[1.0, 1.0], [10.0, 1.0], [10.0, 10.0]]]]}),
            "terms[1]",
        ),
        (
            "cost as an array",
            json!({"name": "x", "frame_id": frame,
                   "terms": [{"kind": "point", "source": [1.0, 1.0], "target": [2.0, 2.0]}],
                   "cost": ["squared", null, "all", "expected"]}),
            "cost",
        ),
    ];
    for (what, body, field) in &goals {
        let (st, err) = s.post("/api/goals", Some(&editor), body).await;
        assert_array_refused(what, st, &err, field);
        let (st, err, _) = s.put_goal(&goal, &editor, Some(&etag_1), body).await;
        assert_array_refused(&format!("PUT, {what}"), st, &err, field);
    }

    // Cameras: the work plane and the pose are objects.
    let cameras: Vec<(&str, Value, &str)> = vec![
        (
            "work plane as [normal, offset]",
            json!({"name": "c", "width": 64, "height": 48, "work_plane": [[0.0, 0.0, 1.0], 0.85]}),
            "work_plane",
        ),
        (
            "pose as [rotation, translation]",
            json!({"name": "c", "width": 64, "height": 48, "pose_in_base": [
                [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]], [0.0, 0.0, 0.5]]}),
            "pose_in_base",
        ),
    ];
    for (what, body, field) in &cameras {
        let (st, err) = s.post("/api/cameras", Some(&editor), body).await;
        assert_array_refused(what, st, &err, field);
    }

    // Goal sets: each pinned item is an object.
    let (st, err) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": "tidy-up", "items": [{"goal_id": goal, "revision": 1}, [goal, 1]]}),
        )
        .await;
    assert_array_refused("goal-set item as [goal_id, revision]", st, &err, "items[1]");

    // Whole bodies as arrays: the camera as [name, width, height], an outcome as
    // [final_points, note], a goal set as [name, items]. Refused before any field is read.
    let outcomes = format!("/api/goals/{goal}/revisions/1/outcomes");
    for (what, path, body) in [
        ("camera", "/api/cameras", json!(["c", 640, 480])),
        (
            "outcome",
            outcomes.as_str(),
            json!([[[41.0, 31.0]], "trial 1"]),
        ),
        (
            "goal set",
            "/api/goal-sets",
            json!(["tidy-up", [{"goal_id": goal, "revision": 1}]]),
        ),
        ("goal", "/api/goals", json!(["x", frame, []])),
    ] {
        let (st, err) = s.post(path, Some(&editor), &body).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{what}: {err}");
        assert_eq!(err["error"]["code"], "bad_json", "{what}: {err}");
        assert!(err["error"]["field"].is_null(), "{what}: {err}");
        assert!(err["error"]["message"].is_string(), "{what}: {err}");
    }

    // Nothing of it was written: one camera, one goal at revision 1, no outcome, no set.
    let (_, list) = s.get("/api/cameras", Some(&editor)).await;
    assert_eq!(list["items"].as_array().map(Vec::len), Some(1), "{list}");
    assert_eq!(list["items"][0]["id"], cam.as_str());
    let (_, list) = s.get("/api/goals", Some(&editor)).await;
    assert_eq!(list["items"].as_array().map(Vec::len), Some(1), "{list}");
    let (_, latest) = s.get(&format!("/api/goals/{goal}"), Some(&editor)).await;
    assert_eq!(latest["revision"], 1, "{latest}");
    let (_, o) = s
        .get(&format!("/api/goals/{goal}/outcomes"), Some(&editor))
        .await;
    assert_eq!(o["summary"]["trials"], 0, "{o}");
    let (_, sets) = s.get("/api/goal-sets", Some(&editor)).await;
    assert_eq!(sets["items"].as_array().map(Vec::len), Some(0), "{sets}");

    // The same bodies as objects are taken: the refusal is about the shape, not the values.
    let (st, c) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "c", "width": 64, "height": 48,
                    "work_plane": {"normal": [0.0, 0.0, 1.0], "offset_m": 0.85},
                    "pose_in_base": {"rotation": [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]],
                                     "translation_m": [0.0, 0.0, 0.5]}}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{c}");
    let (st, set) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": "tidy-up", "items": [{"goal_id": goal, "revision": 1}]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{set}");
    let (st, o) = s
        .post(
            &outcomes,
            Some(&editor),
            &json!({"final_points": [[41.0, 31.0]], "note": "trial 1"}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{o}");
    let (st, rev) = s
        .post(
            "/api/goals",
            Some(&editor),
            &json!({"name": "x", "frame_id": frame,
                    "terms": [{"kind": "point", "source": [1.0, 1.0], "target": [2.0, 2.0]}],
                    "cost": {"metric": "squared", "steps": "all", "mode": "expected"}}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");

    // Deep nesting ends in a 422 (serde_json's recursion limit), not a crashed server.
    let deep = format!(
        r#"{{"name": "x", "frame_id": "{frame}", "terms": [{{"kind": "point", "source": {}1{}, "target": [1, 1]}}]}}"#,
        "[".repeat(100_000),
        "]".repeat(100_000)
    );
    let (st, err) = s
        .post_bytes(
            "/api/goals",
            Some(&editor),
            "application/json",
            deep.into_bytes(),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    let (st, _) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK);
}

on_both_databases!(arrays_for_objects_are_refused, arrays_for_objects);

/// `intrinsics` is kept as a `serde_json::Value` by the request type and typed later (direct
/// form or CameraInfo form) by `parse_intrinsics` in server/service/cameras.rs, through
/// `strict_json::from_value`, so `[K, D]` is not taken by position as a CameraInfo.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn camera_intrinsics_as_an_array_are_refused() {
    let Some((s, _db)) = server(Db::Sqlite, "camera_intrinsics_as_an_array").await else {
        return;
    };
    let editor = s.token("positional", "editor");
    let (st, err) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "c", "width": 640, "height": 480, "intrinsics": [
                [560.0, 0.0, 319.5, 0.0, 560.0, 239.5, 0.0, 0.0, 1.0], []]}),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    assert_eq!(err["error"]["field"], "intrinsics", "{err}");
}
