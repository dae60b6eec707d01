//! Configuration from flags and environment, in one place.

use std::path::PathBuf;

/// Limits on what clients may send.
#[derive(Debug, Clone)]
pub struct Limits {
    /// Largest JSON body.
    pub json_body_bytes: usize,
    /// Largest frame upload.
    pub frame_upload_bytes: usize,
    /// Largest cost-evaluation body (NPY probability maps).
    pub cost_body_bytes: usize,
    /// Largest image side decoded.
    pub max_image_side: u32,
    /// Most memory one image decode may allocate.
    pub max_decode_bytes: u64,
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            json_body_bytes: 16 << 20,
            frame_upload_bytes: 64 << 20,
            cost_body_bytes: 1 << 30,
            max_image_side: 8192,
            max_decode_bytes: 512 << 20,
        }
    }
}

/// Everything `serve` needs.
#[derive(Debug, Clone)]
pub struct ServeConfig {
    /// Address to bind; port 0 picks a free port.
    pub bind: String,
    /// Database URL (`sqlite://…` or `postgres://…`).
    pub database_url: String,
    /// Where the default SQLite file lives.
    pub data_dir: PathBuf,
    /// Load the demo scenario into an empty database.
    pub demo: bool,
    /// Request limits.
    pub limits: Limits,
}

/// The default database URL for a data directory.
pub fn default_database_url(data_dir: &std::path::Path) -> String {
    format!("sqlite://{}", data_dir.join("goalsmith.db").display())
}
