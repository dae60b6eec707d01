//! Building the application and running it: `app(state)` is separate from binding a port so tests
//! and the binary share it.

use crate::api;
use crate::config::ServeConfig;
use crate::service::AppState;
use crate::store::Store;
use axum::Router;
use axum::extract::MatchedPath;
use axum::http::{HeaderName, HeaderValue, Request};
use axum::response::{IntoResponse, Response};
use axum::serve::ListenerExt;
use std::sync::Arc;
use std::time::Duration;
use tokio::net::TcpListener;
use tower_http::set_header::SetResponseHeaderLayer;
use tower_http::trace::TraceLayer;

/// The whole application: API, pages and the layers around them.
pub fn app(state: AppState) -> Router {
    let router = api::router(state.clone())
        .merge(crate::pages::router())
        // One fallback for both edges, here where they are put together: API paths get the
        // contract's JSON 404, everything else the readable page.
        .fallback(|uri: axum::http::Uri| async move {
            if api::owns_path(uri.path()) {
                api::not_found()
            } else {
                crate::pages::not_found_page()
            }
        })
        .nest(
            "/static",
            // A missing file gets the contract's error body, not an empty 404.
            Router::new()
                // The marking code, generated from `draw::marks` so the browser and the overlay
                // draw from the same values.
                .route(
                    "/marks.js",
                    axum::routing::get(crate::draw::marks::serve_browser_module),
                )
                .route("/{name}", axum::routing::get(crate::assets::serve))
                .fallback(|| async { api::not_found() })
                .layer(axum::middleware::map_response(api::contract_errors)),
        )
        .with_state(state.clone());
    around(router, state)
}

/// The layers around both edges, innermost first: a panic becomes a 500; every answer is
/// counted for `/metrics`; each request gets a log span; security headers go on every
/// response; and the request id is chosen first, so the span, the response header and any
/// error body carry it.
pub fn around(router: Router, state: AppState) -> Router {
    let inner = router
        .layer(axum::middleware::from_fn(catch_panic))
        .layer(axum::middleware::from_fn_with_state(state.clone(), audit))
        .layer(axum::middleware::from_fn_with_state(state, count))
        .layer(
            TraceLayer::new_for_http().make_span_with(|req: &Request<_>| {
                let route = req
                    .extensions()
                    .get::<MatchedPath>()
                    .map(MatchedPath::as_str)
                    .unwrap_or("-");
                let id = req
                    .headers()
                    .get(REQUEST_ID)
                    .and_then(|v| v.to_str().ok())
                    .unwrap_or("-");
                tracing::info_span!("request", method = %req.method(), route, request_id = id)
            }),
        );
    security_headers(inner).layer(axum::middleware::from_fn(request_id))
}

/// Counts every answer of both edges for `/metrics`.
async fn count(
    axum::extract::State(state): axum::extract::State<AppState>,
    req: axum::extract::Request,
    next: axum::middleware::Next,
) -> Response {
    let started = std::time::Instant::now();
    let method = req.method().as_str().to_string();
    let route = req
        .extensions()
        .get::<MatchedPath>()
        .map_or("unmatched", MatchedPath::as_str)
        .to_string();
    let resp = next.run(req).await;
    state.metrics.observe(
        &method,
        &route,
        resp.status().as_u16(),
        started.elapsed().as_secs_f64(),
    );
    resp
}

/// Writes the audit log's entry of every change (see [`crate::service::audit`]).
async fn audit(
    axum::extract::State(state): axum::extract::State<AppState>,
    mut req: axum::extract::Request,
    next: axum::middleware::Next,
) -> Response {
    use crate::service::audit::{self, AuditSlot, Change};
    let method = req.method().as_str().to_string();
    let route = req
        .extensions()
        .get::<MatchedPath>()
        .map_or("unmatched", MatchedPath::as_str)
        .to_string();
    if !audit::may_change(&method, &route) {
        return next.run(req).await;
    }
    let slot = AuditSlot::default();
    req.extensions_mut().insert(slot.clone());
    // A path that carries a secret (an invitation's `/welcome/{token}`) is kept as its
    // pattern: the log is read by people, and a link's secret stays out of it.
    let path = if route.contains("{token}") {
        route.clone()
    } else {
        req.uri().path().to_string()
    };
    let address = req
        .extensions()
        .get::<axum::extract::ConnectInfo<std::net::SocketAddr>>()
        .map_or_else(|| "unknown".to_string(), |c| c.0.ip().to_string());
    let resp = next.run(req).await;
    let change = Change {
        method,
        route,
        path,
        status: resp.status().as_u16(),
        address,
    };
    audit::record(&state, &slot, change).await;
    resp
}

/// The header that carries a request's id, in both directions.
pub const REQUEST_ID: &str = "x-request-id";

/// The page's policy: scripts, styles, fonts and connections only from this server (no inline
/// script anywhere, so none is allowed); images also from `data:` and `blob:` URLs (painted
/// masks travel as PNG data URLs); no plug-ins, no framing by other sites, forms post only
/// here.
pub const CONTENT_SECURITY_POLICY: &str = "default-src 'self'; script-src 'self'; \
     style-src 'self'; img-src 'self' data: blob:; font-src 'self'; connect-src 'self'; \
     object-src 'none'; base-uri 'none'; form-action 'self'; frame-ancestors 'none'";

/// Headers every response carries unless the handler set its own (the answers hyper writes by
/// itself get them too, see [`crate::wire`]).
pub const SECURITY_HEADERS: &[(&str, &str)] = &[
    // Browsers must take every response as the type it says it is (no sniffing a JSON error or
    // an uploaded image into something else).
    ("x-content-type-options", "nosniff"),
    ("content-security-policy", CONTENT_SECURITY_POLICY),
    // For browsers older than `frame-ancestors`.
    ("x-frame-options", "DENY"),
    // Ids in our URLs stay on this server.
    ("referrer-policy", "same-origin"),
    ("cross-origin-opener-policy", "same-origin"),
];

fn security_headers(router: Router) -> Router {
    SECURITY_HEADERS.iter().fold(router, |r, &(name, value)| {
        r.layer(SetResponseHeaderLayer::if_not_present(
            HeaderName::from_static(name),
            HeaderValue::from_static(value),
        ))
    })
}

/// Gives the request its id: the client's own `X-Request-Id` when it is a short token
/// (letters, digits, `.`, `_`, `-`; at most 64), otherwise a new UUID. The id goes back in the
/// response header and into the `error` object of every JSON error body, so a person can quote
/// it and an operator find the log lines.
async fn request_id(mut req: axum::extract::Request, next: axum::middleware::Next) -> Response {
    let given = req
        .headers()
        .get(REQUEST_ID)
        .and_then(|v| v.to_str().ok())
        .filter(|v| {
            !v.is_empty()
                && v.len() <= 64
                && v.bytes()
                    .all(|b| b.is_ascii_alphanumeric() || matches!(b, b'.' | b'_' | b'-'))
        })
        .map(str::to_owned);
    let id = given.unwrap_or_else(|| uuid::Uuid::new_v4().to_string());
    let Ok(value) = HeaderValue::from_str(&id) else {
        return next.run(req).await;
    };
    req.headers_mut().insert(REQUEST_ID, value.clone());
    let resp = next.run(req).await;
    let mut resp = stamp_error_body(resp, &id).await;
    resp.headers_mut().insert(REQUEST_ID, value);
    resp
}

/// Adds `request_id` to the `error` object of a JSON error body (bodies of errors are small;
/// anything else passes untouched).
async fn stamp_error_body(resp: Response, id: &str) -> Response {
    let status = resp.status();
    let json = resp
        .headers()
        .get(axum::http::header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.starts_with("application/json"));
    if !(status.is_client_error() || status.is_server_error()) || !json {
        return resp;
    }
    let (mut parts, body) = resp.into_parts();
    let Ok(bytes) = axum::body::to_bytes(body, 256 * 1024).await else {
        parts.headers.remove(axum::http::header::CONTENT_LENGTH);
        return Response::from_parts(parts, axum::body::Body::empty());
    };
    let stamped = serde_json::from_slice::<serde_json::Value>(&bytes)
        .ok()
        .and_then(|mut v| {
            v.get_mut("error")?
                .as_object_mut()?
                .insert("request_id".into(), id.into());
            serde_json::to_vec(&v).ok()
        });
    let body = stamped.map_or(bytes, bytes::Bytes::from);
    parts.headers.remove(axum::http::header::CONTENT_LENGTH);
    Response::from_parts(parts, axum::body::Body::from(body))
}

/// A panic in a handler (a bug) answers 500 with the contract's body on API paths and the
/// error page elsewhere, is logged with the request's span, and leaves the process serving.
/// Work moved to the blocking pool is not covered here: its panics come back as join errors,
/// which the service turns into the same 500.
async fn catch_panic(req: axum::extract::Request, next: axum::middleware::Next) -> Response {
    use futures_util::FutureExt;
    let api = api::owns_path(req.uri().path());
    match std::panic::AssertUnwindSafe(next.run(req))
        .catch_unwind()
        .await
    {
        Ok(resp) => resp,
        Err(payload) => {
            let what = payload
                .downcast_ref::<&str>()
                .map(|s| (*s).to_string())
                .or_else(|| payload.downcast_ref::<String>().cloned())
                .unwrap_or_else(|| "a panic without a message".into());
            tracing::error!(panic = %what, "handler panicked");
            let e = crate::service::ServiceError::Internal(format!("handler panicked: {what}"));
            if api {
                e.into_response()
            } else {
                crate::pages::error_response(e)
            }
        }
    }
}

/// Connects to the database, runs migrations and (with `--demo`) loads the demo scenario.
pub async fn prepare(config: &ServeConfig) -> Result<AppState, Box<dyn std::error::Error>> {
    if config.database_url.starts_with("sqlite:") {
        std::fs::create_dir_all(&config.data_dir)?;
    }
    let store = Store::connect(&config.database_url).await?;
    let state = AppState {
        security: Arc::new(crate::security::Security::new(
            &config.limits.signin,
            config.public_url.clone(),
            crate::store::secrets::shared_key(&store, "form_token_key").await?,
        )),
        store,
        limits: Arc::new(config.limits.clone()),
        models: Arc::new(crate::service::export::ModelCache::with_budget(
            config.limits.model_cache_bytes,
        )),
        heavy_permits: Arc::new(crate::service::heavy::Heavy::new(
            config.limits.heavy_permits,
            config.limits.heavy_queue,
        )),
        pyramids: Arc::new(crate::service::tracks::PyramidCache::with_budget(
            config.limits.pyramid_cache_bytes,
        )),
        metrics: Arc::new(crate::service::metrics::Metrics::new(
            config.metrics_token.clone(),
        )),
        revisions: Arc::new(crate::service::revision_cache::RevisionCache::with_budget(
            config.limits.revision_cache_bytes,
        )),
    };
    Ok(state)
}

/// Runs until SIGTERM or Ctrl-C, then stops accepting, finishes in-flight requests (up to 30 s)
/// and returns.
pub async fn serve(config: ServeConfig) -> Result<(), Box<dyn std::error::Error>> {
    // The parallel parts of heavy work (scoring, map building) run on rayon's pool: at heavy
    // work's lower priority too, so they never crowd out the async workers. (Fails only when
    // something built the pool already, which then keeps its threads as they are.)
    let _ = rayon::ThreadPoolBuilder::new()
        .start_handler(|_| crate::service::heavy::lower_this_thread())
        .build_global();
    let state = prepare(&config).await?;
    let listener = TcpListener::bind(&config.bind).await?;
    let addr = listener.local_addr()?;
    state.security.set_bound(addr);
    let demo_team = if config.demo {
        crate::demo::load(&state).await?
    } else {
        None
    };
    let announce =
        crate::service::accounts::startup_link(&state, addr, demo_team.as_deref()).await?;
    // The one line on stdout that scripts wait for; everything else goes to stderr.
    println!("listening on http://{addr}");
    if let Some(lines) = announce {
        eprintln!("{lines}");
    }
    // Long work (tracking) runs in durable operations; the sweeper runs in every process, the
    // workers where configured (by default one for every two cores).
    crate::service::operations::start(state.clone(), config.limits.operation_workers);
    let store = state.store.clone();
    // With the peer address on each request: the sign-in throttle counts attempts per client.
    // Answers are written as soon as they are ready (no Nagle delay on keep-alive connections),
    // and hyper's own answers to unreadable requests get the contract's body.
    let listener = crate::wire::ContractListener::new(listener, SECURITY_HEADERS).tap_io(|io| {
        let _ = io.get_ref().set_nodelay(true);
    });
    let server = axum::serve(
        listener,
        app(state).into_make_service_with_connect_info::<std::net::SocketAddr>(),
    )
    .with_graceful_shutdown(shutdown_signal());
    server.await?;
    tracing::info!("stopped accepting; in-flight requests finished");
    tokio::time::timeout(Duration::from_secs(5), store.close())
        .await
        .ok();
    Ok(())
}

async fn shutdown_signal() {
    let ctrl_c = async {
        tokio::signal::ctrl_c().await.ok();
    };
    #[cfg(unix)]
    let term = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    #[cfg(not(unix))]
    let term = std::future::pending::<()>();
    tokio::select! {
        _ = ctrl_c => {},
        _ = term => {},
    }
    tracing::info!("shutdown signal received");
    // Bound the wait for in-flight requests.
    tokio::spawn(async {
        tokio::time::sleep(Duration::from_secs(30)).await;
        tracing::warn!("in-flight requests did not finish within 30 s; exiting");
        std::process::exit(0);
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use axum::body::Body;
    use tower::ServiceExt;

    async fn state() -> (AppState, tempfile::TempDir) {
        let dir = tempfile::tempdir().expect("temp dir");
        let url = format!("sqlite://{}?mode=rwc", dir.path().join("t.db").display());
        let store = Store::connect(&url).await.expect("store");
        let state = AppState {
            store,
            limits: Arc::default(),
            models: Arc::default(),
            security: Arc::new(crate::security::Security::new(
                &Default::default(),
                None,
                [7; 32],
            )),
            heavy_permits: Arc::default(),
            pyramids: Arc::default(),
            metrics: Arc::default(),
            revisions: Arc::default(),
        };
        (state, dir)
    }

    fn boom() -> &'static str {
        panic!("a bug in a handler")
    }

    /// A panicking handler answers 500 with the contract's body (API) or the error page, and
    /// the same router goes on serving.
    #[tokio::test]
    async fn a_panic_becomes_a_500_and_serving_goes_on() {
        let (state, _dir) = state().await;
        let router = Router::new()
            .route("/api/boom", axum::routing::get(|| async { boom() }))
            .route("/boom", axum::routing::get(|| async { boom() }))
            .route("/api/fine", axum::routing::get(|| async { "fine" }));
        let app = around(router, state);
        let call = |path: &'static str| {
            let app = app.clone();
            async move {
                let req = Request::builder()
                    .uri(path)
                    .body(Body::empty())
                    .expect("request");
                let resp = app.oneshot(req).await.expect("infallible");
                let status = resp.status();
                let headers = resp.headers().clone();
                let bytes = axum::body::to_bytes(resp.into_body(), 1 << 20)
                    .await
                    .expect("body");
                (status, headers, bytes)
            }
        };
        let (status, headers, bytes) = call("/api/boom").await;
        assert_eq!(status, axum::http::StatusCode::INTERNAL_SERVER_ERROR);
        let body: serde_json::Value = serde_json::from_slice(&bytes).expect("JSON body");
        assert_eq!(body["error"]["code"], "internal");
        let id = headers
            .get(REQUEST_ID)
            .and_then(|v| v.to_str().ok())
            .expect("request id");
        assert_eq!(body["error"]["request_id"], id);
        assert!(
            !body.to_string().contains("a bug in a handler"),
            "the panic's text stays in the log"
        );
        let (status, headers, bytes) = call("/boom").await;
        assert_eq!(status, axum::http::StatusCode::INTERNAL_SERVER_ERROR);
        assert!(
            headers
                .get(axum::http::header::CONTENT_TYPE)
                .and_then(|v| v.to_str().ok())
                .is_some_and(|v| v.starts_with("text/html"))
        );
        assert!(!bytes.is_empty());
        for _ in 0..3 {
            let (status, _, bytes) = call("/api/fine").await;
            assert_eq!(status, axum::http::StatusCode::OK);
            assert_eq!(&bytes[..], b"fine");
        }
        let (status, _, _) = call("/api/boom").await;
        assert_eq!(status, axum::http::StatusCode::INTERNAL_SERVER_ERROR);
    }
}
