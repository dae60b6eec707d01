//! The browser's static files (`web/static/`), embedded in the binary so `goalsmith serve` works
//! from any folder and after `cargo install`.
//!
//! For work on the scripts and styles, set `GOALSMITH_STATIC_DIR` to a folder (usually
//! `web/static`): files are then read from there on every request, so an edit shows on reload.
//! A test checks that every file under `web/static/` is in [`FILES`].

use axum::extract::Path;
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use sha2::{Digest, Sha256};
use std::sync::OnceLock;

/// Every embedded file: its name under `/static/` and its bytes.
pub const FILES: &[(&str, &[u8])] = &[
    ("compare.js", include_bytes!("../web/static/compare.js")),
    ("demo.js", include_bytes!("../web/static/demo.js")),
    ("editor.js", include_bytes!("../web/static/editor.js")),
    ("favicon.svg", include_bytes!("../web/static/favicon.svg")),
    ("fit.js", include_bytes!("../web/static/fit.js")),
    ("ops.js", include_bytes!("../web/static/ops.js")),
    ("site.css", include_bytes!("../web/static/site.css")),
    ("site.js", include_bytes!("../web/static/site.js")),
    ("view.js", include_bytes!("../web/static/view.js")),
];

/// The environment variable of the development override.
pub const DIR_VARIABLE: &str = "GOALSMITH_STATIC_DIR";

/// The media type of a static file, by its extension.
fn media_type(name: &str) -> &'static str {
    match name.rsplit_once('.').map(|(_, e)| e) {
        Some("js") => "text/javascript; charset=utf-8",
        Some("css") => "text/css; charset=utf-8",
        Some("png") => "image/png",
        Some("svg") => "image/svg+xml",
        _ => "application/octet-stream",
    }
}

/// Strong ETags of the embedded files, computed once.
fn etags() -> &'static Vec<String> {
    static TAGS: OnceLock<Vec<String>> = OnceLock::new();
    TAGS.get_or_init(|| {
        FILES
            .iter()
            .map(|(_, bytes)| format!("\"{}\"", hex::encode(Sha256::digest(bytes))))
            .collect()
    })
}

/// A file's bytes and ETag: from the override folder when it is set, else embedded.
fn lookup(name: &str) -> Option<(Vec<u8>, String)> {
    let k = FILES.iter().position(|(n, _)| *n == name)?;
    if let Some(dir) = std::env::var_os(DIR_VARIABLE) {
        let bytes = std::fs::read(std::path::Path::new(&dir).join(name)).ok()?;
        let etag = format!("\"{}\"", hex::encode(Sha256::digest(&bytes)));
        return Some((bytes, etag));
    }
    Some((FILES[k].1.to_vec(), etags()[k].clone()))
}

/// `GET /static/{name}`: an embedded file (only names in [`FILES`]; no paths), with its
/// SHA-256 as ETag and a 304 when the browser has it.
pub async fn serve(Path(name): Path<String>, headers: HeaderMap) -> Response {
    let Some((bytes, etag)) = lookup(&name) else {
        return StatusCode::NOT_FOUND.into_response();
    };
    let fresh = headers
        .get(header::IF_NONE_MATCH)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.split(',').any(|t| t.trim() == etag));
    let etag_value = HeaderValue::from_str(&etag).unwrap_or(HeaderValue::from_static("\"\""));
    if fresh {
        return (StatusCode::NOT_MODIFIED, [(header::ETAG, etag_value)]).into_response();
    }
    (
        [
            (
                header::CONTENT_TYPE,
                HeaderValue::from_static(media_type(&name)),
            ),
            (header::ETAG, etag_value),
            // Revalidated on every load: the names carry no version, and a new build must
            // reach the browser at once.
            (header::CACHE_CONTROL, HeaderValue::from_static("no-cache")),
        ],
        bytes,
    )
        .into_response()
}

#[cfg(test)]
mod tests {
    /// Every file of `web/static/` is embedded (a new file must be added to `FILES`), and the
    /// embedded bytes are the files' current bytes.
    #[test]
    fn every_static_file_is_embedded() {
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("web/static");
        let mut on_disk: Vec<String> = std::fs::read_dir(&dir)
            .expect("web/static")
            .filter_map(|e| e.ok())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .collect();
        on_disk.sort();
        let mut embedded: Vec<String> = super::FILES.iter().map(|(n, _)| n.to_string()).collect();
        embedded.sort();
        assert_eq!(on_disk, embedded);
        for (name, bytes) in super::FILES {
            assert_eq!(
                std::fs::read(dir.join(name)).expect("file").as_slice(),
                *bytes,
                "{name}"
            );
        }
    }
}
