//! Building the application and running it: `app(state)` is separate from binding a port so tests
//! and the binary share it.

use crate::api;
use crate::config::ServeConfig;
use crate::service::AppState;
use crate::store::Store;
use axum::Router;
use axum::extract::MatchedPath;
use axum::http::{HeaderName, Request};
use std::sync::Arc;
use std::time::Duration;
use tokio::net::TcpListener;
use tower_http::request_id::{MakeRequestUuid, PropagateRequestIdLayer, SetRequestIdLayer};
use tower_http::set_header::SetResponseHeaderLayer;
use tower_http::trace::TraceLayer;

/// The whole application: API, pages and the layers around them.
pub fn app(state: AppState) -> Router {
    let request_id = HeaderName::from_static("x-request-id");
    api::router(state.clone())
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
        .with_state(state)
        .layer(
            TraceLayer::new_for_http().make_span_with(|req: &Request<_>| {
                let route = req
                    .extensions()
                    .get::<MatchedPath>()
                    .map(MatchedPath::as_str)
                    .unwrap_or("-");
                let id = req
                    .headers()
                    .get("x-request-id")
                    .and_then(|v| v.to_str().ok())
                    .unwrap_or("-");
                tracing::info_span!("request", method = %req.method(), route, request_id = id)
            }),
        )
        // Browsers must take every response as the type it says it is (no sniffing a JSON
        // error or an uploaded image into something else).
        .layer(SetResponseHeaderLayer::if_not_present(
            axum::http::header::X_CONTENT_TYPE_OPTIONS,
            axum::http::HeaderValue::from_static("nosniff"),
        ))
        .layer(PropagateRequestIdLayer::new(request_id.clone()))
        .layer(SetRequestIdLayer::new(request_id, MakeRequestUuid))
}

/// Connects to the database, runs migrations and (with `--demo`) loads the demo scenario.
pub async fn prepare(config: &ServeConfig) -> Result<AppState, Box<dyn std::error::Error>> {
    if config.database_url.starts_with("sqlite:") {
        std::fs::create_dir_all(&config.data_dir)?;
    }
    let store = Store::connect(&config.database_url).await?;
    let state = AppState {
        store,
        limits: Arc::new(config.limits.clone()),
        security: Arc::new(crate::security::Security::new(
            &config.limits.signin,
            config.public_url.clone(),
        )?),
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
    };
    Ok(state)
}

/// Runs until SIGTERM or Ctrl-C, then stops accepting, finishes in-flight requests (up to 30 s)
/// and returns.
pub async fn serve(config: ServeConfig) -> Result<(), Box<dyn std::error::Error>> {
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
