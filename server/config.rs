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
    /// Bytes of demo frame pyramids kept for tracking, shared by every track of a demo.
    pub pyramid_cache_bytes: usize,
    /// Bytes of recently read revisions kept in memory (`GOALSMITH_REVISION_CACHE_BYTES`).
    pub revision_cache_bytes: usize,
    /// Sign-in throttle and password-hashing bounds.
    pub signin: SignInLimits,
    /// Demonstration uploads: frames, upload size, decoded bytes, ZIP entry bounds.
    pub demo: crate::demo_archive::DemoLimits,
    /// Durable operations (tracking) this process runs at once; 0 runs none (another process
    /// sharing the database does the work).
    pub operation_workers: usize,
}

/// How hard the sign-in form may be pushed. The defaults are documented in README.md
/// ("Sign-in limits"); the `serve` flags that change them are hidden because only tests need them.
#[derive(Debug, Clone)]
pub struct SignInLimits {
    /// The sliding window both counts below refer to, in seconds (default 900 = 15 minutes).
    pub window_s: u64,
    /// Failed sign-ins for one login within the window before that login is refused with 429
    /// (default 5). A success clears the count.
    pub failures_per_login: usize,
    /// Sign-in attempts (right or wrong) from one client address within the window before that
    /// address is refused with 429 (default 20).
    pub attempts_per_address: usize,
    /// Logins and addresses tracked at most; beyond that the oldest are forgotten, so a flood of
    /// invented logins cannot grow memory without bound (default 10 000 each).
    pub tracked_keys: usize,
    /// Password hashes (argon2, ~19 MB each) running at once (default 2, the cores we plan for).
    pub hashes_at_once: usize,
    /// Requests allowed to wait for a hashing slot; more are answered 503 at once (default 16).
    pub hash_queue: usize,
    /// How long a request waits for a hashing slot before it is answered 503, in milliseconds
    /// (default 2000).
    pub hash_wait_ms: u64,
}

impl Default for SignInLimits {
    fn default() -> Self {
        Self {
            window_s: 900,
            failures_per_login: 5,
            attempts_per_address: 20,
            tracked_keys: 10_000,
            hashes_at_once: 2,
            hash_queue: 16,
            hash_wait_ms: 2000,
        }
    }
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
            signin: SignInLimits::default(),
            demo: crate::demo_archive::DemoLimits::default(),
            pyramid_cache_bytes: 256 << 20,
            revision_cache_bytes: 32 << 20,
            operation_workers: cores().div_ceil(2),
        }
    }
}

impl Limits {
    /// The defaults with `GOALSMITH_HEAVY_PERMITS`, `GOALSMITH_HEAVY_QUEUE`,
    /// `GOALSMITH_MAX_MAP_VALUES`, `GOALSMITH_MAX_NPY_POINTS`, `GOALSMITH_COST_JSON_BYTES`, the
    /// body limits `GOALSMITH_JSON_BODY_BYTES`, `GOALSMITH_FRAME_UPLOAD_BYTES`,
    /// `GOALSMITH_COST_BODY_BYTES`, and
    /// `GOALSMITH_MODEL_CACHE_BYTES`, `GOALSMITH_PYRAMID_CACHE_BYTES`,
    /// `GOALSMITH_REVISION_CACHE_BYTES`, and for demos `GOALSMITH_DEMO_MAX_FRAMES`,
    /// `GOALSMITH_DEMO_MAX_BYTES`, `GOALSMITH_DEMO_MAX_DECODED_BYTES`, and
    /// `GOALSMITH_OPERATION_WORKERS`, applied where set (whole numbers; permits at least 1; the
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
            ("GOALSMITH_JSON_BODY_BYTES", &mut l.json_body_bytes),
            ("GOALSMITH_FRAME_UPLOAD_BYTES", &mut l.frame_upload_bytes),
            ("GOALSMITH_COST_BODY_BYTES", &mut l.cost_body_bytes),
            ("GOALSMITH_MODEL_CACHE_BYTES", &mut l.model_cache_bytes),
            ("GOALSMITH_PYRAMID_CACHE_BYTES", &mut l.pyramid_cache_bytes),
            (
                "GOALSMITH_REVISION_CACHE_BYTES",
                &mut l.revision_cache_bytes,
            ),
            ("GOALSMITH_DEMO_MAX_FRAMES", &mut l.demo.max_frames),
            ("GOALSMITH_DEMO_MAX_BYTES", &mut l.demo.max_archive_bytes),
            ("GOALSMITH_OPERATION_WORKERS", &mut l.operation_workers),
        ] {
            if let Some(v) = read(name)? {
                *slot = v;
            }
        }
        if let Some(v) = read("GOALSMITH_DEMO_MAX_DECODED_BYTES")? {
            l.demo.max_decoded_bytes = v as u64;
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
    /// The address people reach the server at (`https://goals.example.org`), for the links it
    /// hands out; `None` means the address it listens on.
    pub public_url: Option<String>,
    /// A bearer token that lets clients off the loopback interface read `/metrics`.
    pub metrics_token: Option<String>,
}

/// Checks a `--public-url`: an absolute `http` or `https` URL of a host, without query or
/// fragment; returned without a trailing `/` so paths can be appended.
pub fn check_public_url(raw: &str) -> Result<String, String> {
    let url = raw.trim().trim_end_matches('/');
    let rest = url
        .strip_prefix("https://")
        .or_else(|| url.strip_prefix("http://"))
        .ok_or_else(|| format!("--public-url {raw:?} must start with http:// or https://"))?;
    let host = rest.split('/').next().unwrap_or("");
    let fine = |c: char| c.is_ascii_alphanumeric() || matches!(c, '.' | '-' | ':' | '[' | ']');
    if host.is_empty() || !host.chars().all(fine) {
        return Err(format!("--public-url {raw:?} has no usable host"));
    }
    if rest
        .chars()
        .any(|c| matches!(c, '?' | '#' | '\\') || c.is_whitespace() || c.is_control())
    {
        return Err(format!(
            "--public-url {raw:?} may hold a host and a path only"
        ));
    }
    Ok(url.to_string())
}

/// The default database URL for a data directory.
pub fn default_database_url(data_dir: &std::path::Path) -> String {
    format!("sqlite://{}", data_dir.join("goalsmith.db").display())
}
