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
    /// Largest JSON cost body (`{"points": …}`): JSON is the slow path, parsed into nested
    /// vectors at many times its size, so it gets far less than NPY.
    pub cost_json_bytes: usize,
    /// Most values (P · h · w) in one stack of cost maps built for a request: `cost-maps.npy`,
    /// the maps of an NPY probability-map batch, each revision's maps in a bundle.
    pub max_map_values: usize,
    /// Most points (N · T · P) in an NPY points body; they are buffered and converted to f64.
    pub max_npy_points: usize,
    /// Heavy requests (scoring, map, bundle and overlay building, frame decoding) running at
    /// once.
    pub heavy_permits: usize,
    /// Heavy requests waiting for a permit; past that they are answered 503 `busy`.
    pub heavy_queue: usize,
    /// Bytes of checked goals and cost models kept in the model cache.
    pub model_cache_bytes: usize,
}

/// Cores available to this process (1 when unknown).
pub fn cores() -> usize {
    std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get)
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            json_body_bytes: 16 << 20,
            frame_upload_bytes: 64 << 20,
            cost_body_bytes: 1 << 30,
            max_image_side: 8192,
            max_decode_bytes: 512 << 20,
            cost_json_bytes: 8 << 20,
            max_map_values: 1 << 25,
            max_npy_points: 1 << 22,
            heavy_permits: cores(),
            heavy_queue: 4 * cores(),
            model_cache_bytes: 256 << 20,
        }
    }
}

impl Limits {
    /// The defaults with `GOALSMITH_HEAVY_PERMITS`, `GOALSMITH_HEAVY_QUEUE`,
    /// `GOALSMITH_MAX_MAP_VALUES`, `GOALSMITH_MAX_NPY_POINTS`, `GOALSMITH_COST_JSON_BYTES` and
    /// `GOALSMITH_MODEL_CACHE_BYTES` applied where set (whole numbers; permits at least 1; the
    /// queue defaults to 4 × permits). A value that does not parse is an error rather
    /// than silently the default, so a typo in a deployment is seen at start-up.
    pub fn from_env() -> Result<Self, String> {
        let mut l = Self::default();
        let read = |name: &str| -> Result<Option<usize>, String> {
            match std::env::var(name) {
                Ok(v) => v
                    .trim()
                    .parse::<usize>()
                    .map(Some)
                    .map_err(|_| format!("{name} must be a whole number, not {v:?}")),
                Err(_) => Ok(None),
            }
        };
        if let Some(p) = read("GOALSMITH_HEAVY_PERMITS")? {
            if p == 0 {
                return Err("GOALSMITH_HEAVY_PERMITS must be at least 1".into());
            }
            l.heavy_permits = p;
            l.heavy_queue = 4 * p;
        }
        if let Some(q) = read("GOALSMITH_HEAVY_QUEUE")? {
            l.heavy_queue = q;
        }
        // The per-request limits too, so a deployment can tighten them and tests can reach
        // them with small requests.
        for (name, slot) in [
            ("GOALSMITH_MAX_MAP_VALUES", &mut l.max_map_values),
            ("GOALSMITH_MAX_NPY_POINTS", &mut l.max_npy_points),
            ("GOALSMITH_COST_JSON_BYTES", &mut l.cost_json_bytes),
            ("GOALSMITH_MODEL_CACHE_BYTES", &mut l.model_cache_bytes),
        ] {
            if let Some(v) = read(name)? {
                *slot = v;
            }
        }
        Ok(l)
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
