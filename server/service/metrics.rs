//! What `GET /metrics` shows: what the server has answered and what it holds, in the Prometheus text
//! exposition format (version 0.0.4), written here rather than through a metrics crate: a few
//! counters and one histogram family need no registry.
//!
//! Request series are labelled by the route's pattern (`/api/goals/{id}`), never by the concrete
//! path, so the number of series is bounded by the route table whatever clients send; a request
//! that matched no route counts under `route="unmatched"`.
//!
//! The page is served to clients on the loopback interface, or to anyone presenting the metrics
//! token (`--metrics-token`); it shows counts and route names, never ids or people.

use super::AppState;
use crate::security::same_secret;
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::net::SocketAddr;
use std::sync::Mutex;

/// Upper bounds (seconds) of the latency histogram's buckets; `+Inf` follows.
pub const BUCKETS_S: [f64; 14] = [
    0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0,
];

#[derive(Debug, Default)]
struct Series {
    /// Answers by status code.
    by_status: BTreeMap<u16, u64>,
    /// Non-cumulative counts per bucket of [`BUCKETS_S`], the last one for `+Inf`.
    buckets: [u64; BUCKETS_S.len() + 1],
    sum_s: f64,
    count: u64,
}

/// Request counters and latency histograms, per (method, route).
#[derive(Debug, Default)]
pub struct Metrics {
    series: Mutex<BTreeMap<(String, String), Series>>,
    /// A bearer token that may read the page from anywhere (loopback needs none).
    token: Option<String>,
}

impl Metrics {
    /// With the token that lets non-loopback clients read the page.
    pub fn new(token: Option<String>) -> Self {
        Metrics {
            series: Mutex::default(),
            token: token.filter(|t| !t.is_empty()),
        }
    }

    /// Counts one answer.
    pub fn observe(&self, method: &str, route: &str, status: u16, seconds: f64) {
        let Ok(mut all) = self.series.lock() else {
            return;
        };
        let s = all
            .entry((method.to_string(), route.to_string()))
            .or_default();
        *s.by_status.entry(status).or_default() += 1;
        let i = BUCKETS_S
            .iter()
            .position(|&b| seconds <= b)
            .unwrap_or(BUCKETS_S.len());
        s.buckets[i] += 1;
        s.sum_s += seconds;
        s.count += 1;
    }

    fn write_requests(&self, out: &mut String) {
        let Ok(all) = self.series.lock() else {
            return;
        };
        out.push_str(
            "# HELP goalsmith_http_requests_total Requests answered, by method, route pattern and \
             status.\n# TYPE goalsmith_http_requests_total counter\n",
        );
        for ((method, route), s) in all.iter() {
            for (status, n) in &s.by_status {
                let _ = writeln!(
                    out,
                    "goalsmith_http_requests_total{{method=\"{}\",route=\"{}\",status=\"{status}\"}} {n}",
                    label(method),
                    label(route)
                );
            }
        }
        out.push_str(
            "# HELP goalsmith_http_request_duration_seconds Time from the request's arrival to \
             its response head, by method and route pattern.\n\
             # TYPE goalsmith_http_request_duration_seconds histogram\n",
        );
        for ((method, route), s) in all.iter() {
            let (m, r) = (label(method), label(route));
            let mut cumulative = 0;
            for (i, n) in s.buckets.iter().enumerate() {
                cumulative += n;
                let le = BUCKETS_S
                    .get(i)
                    .map_or_else(|| "+Inf".to_string(), |b| b.to_string());
                let _ = writeln!(
                    out,
                    "goalsmith_http_request_duration_seconds_bucket{{method=\"{m}\",route=\"{r}\",le=\"{le}\"}} {cumulative}"
                );
            }
            let _ = writeln!(
                out,
                "goalsmith_http_request_duration_seconds_sum{{method=\"{m}\",route=\"{r}\"}} {}",
                s.sum_s
            );
            let _ = writeln!(
                out,
                "goalsmith_http_request_duration_seconds_count{{method=\"{m}\",route=\"{r}\"}} {}",
                s.count
            );
        }
    }
}

/// A label value as the exposition format wants it: backslash, quote and newline escaped.
fn label(v: &str) -> String {
    v.replace('\\', "\\\\")
        .replace('"', "\\\"")
        .replace('\n', "\\n")
}

/// Whether a client may read the page: a loopback peer, or one presenting the metrics token
/// (the value of its `Authorization` header, any letter case of `Bearer`).
pub fn may_read(metrics: &Metrics, peer: Option<SocketAddr>, authorization: Option<&str>) -> bool {
    if peer.is_some_and(|p| p.ip().is_loopback()) {
        return true;
    }
    let Some(expected) = metrics.token.as_deref() else {
        return false;
    };
    authorization
        .and_then(|v| v.split_once(' '))
        .filter(|(scheme, _)| scheme.eq_ignore_ascii_case("bearer"))
        .is_some_and(|(_, t)| same_secret(t.trim(), expected))
}

/// The whole page in the text exposition format.
pub async fn exposition(state: &AppState) -> String {
    let mut out = String::with_capacity(16 * 1024);
    state.metrics.write_requests(&mut out);

    out.push_str(
        "# HELP goalsmith_operations Durable operations in the database, by kind and state \
         (every process's, not only this one's).\n# TYPE goalsmith_operations gauge\n",
    );
    match crate::store::operations::counts(&state.store).await {
        Ok(rows) => {
            for (kind, st, n) in rows {
                let _ = writeln!(
                    out,
                    "goalsmith_operations{{kind=\"{}\",state=\"{}\"}} {n}",
                    label(&kind),
                    label(&st)
                );
            }
        }
        Err(e) => tracing::warn!(error = %e, "metrics: operations not counted"),
    }

    let pool = state.store.pool_use();
    let _ = write!(
        out,
        "# HELP goalsmith_db_pool_connections Database connections of this process, by state.\n\
         # TYPE goalsmith_db_pool_connections gauge\n\
         goalsmith_db_pool_connections{{state=\"in_use\"}} {}\n\
         goalsmith_db_pool_connections{{state=\"idle\"}} {}\n\
         # HELP goalsmith_db_pool_max_connections The pool's bound.\n\
         # TYPE goalsmith_db_pool_max_connections gauge\n\
         goalsmith_db_pool_max_connections {}\n",
        pool.in_use, pool.idle, pool.max
    );

    let heavy = state.heavy_permits.in_use();
    let _ = write!(
        out,
        "# HELP goalsmith_heavy_running Heavy computations (scoring, maps, bundles, decoding) \
         running now.\n# TYPE goalsmith_heavy_running gauge\ngoalsmith_heavy_running {}\n\
         # HELP goalsmith_heavy_waiting Heavy computations waiting for a permit.\n\
         # TYPE goalsmith_heavy_waiting gauge\ngoalsmith_heavy_waiting {}\n\
         # HELP goalsmith_heavy_stopped_total Heavy computations given up early because their \
         client hung up.\n# TYPE goalsmith_heavy_stopped_total counter\n\
         goalsmith_heavy_stopped_total {}\n",
        heavy.0,
        heavy.1,
        super::heavy::stopped_early()
    );

    if let Some(rss) = resident_bytes() {
        let _ = write!(
            out,
            "# HELP process_resident_memory_bytes Resident memory of this process.\n\
             # TYPE process_resident_memory_bytes gauge\nprocess_resident_memory_bytes {rss}\n"
        );
    }
    out
}

/// Resident set size from `/proc/self/statm` (Linux), in bytes.
fn resident_bytes() -> Option<u64> {
    let statm = std::fs::read_to_string("/proc/self/statm").ok()?;
    let pages: u64 = statm.split_whitespace().nth(1)?.parse().ok()?;
    Some(pages * 4096)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn buckets_are_cumulative_and_end_in_the_count() {
        let m = Metrics::new(None);
        for s in [0.0001, 0.003, 0.003, 0.2, 42.0] {
            m.observe("GET", "/api/goals/{id}", 200, s);
        }
        m.observe("GET", "/api/goals/{id}", 404, 0.0001);
        let mut out = String::new();
        m.write_requests(&mut out);
        let line = |le: &str| {
            out.lines()
                .find(|l| l.contains(&format!("le=\"{le}\"")))
                .and_then(|l| l.rsplit(' ').next())
                .and_then(|n| n.parse::<u64>().ok())
        };
        assert_eq!(line("0.0005"), Some(2));
        assert_eq!(line("0.005"), Some(4));
        assert_eq!(line("0.25"), Some(5));
        assert_eq!(line("10"), Some(5));
        assert_eq!(line("+Inf"), Some(6));
        assert!(out.contains(
            "goalsmith_http_requests_total{method=\"GET\",route=\"/api/goals/{id}\",status=\"404\"} 1"
        ));
        assert!(out.contains(
            "goalsmith_http_request_duration_seconds_count{method=\"GET\",route=\"/api/goals/{id}\"} 6"
        ));
    }

    #[test]
    fn label_values_are_escaped() {
        assert_eq!(label("a\"b\\c\nd"), "a\\\"b\\\\c\\nd");
    }

    #[test]
    fn only_loopback_or_the_token_may_read() {
        let open = Metrics::new(None);
        let guarded = Metrics::new(Some("s3cret".into()));
        let outside: SocketAddr = "192.0.2.7:4000".parse().expect("addr");
        let inside: SocketAddr = "127.0.0.1:4000".parse().expect("addr");
        let (with, wrong) = (Some("bearer s3cret"), Some("Bearer nope"));
        assert!(may_read(&open, Some(inside), None));
        assert!(!may_read(&open, Some(outside), with));
        assert!(!may_read(&open, None, None));
        assert!(may_read(&guarded, Some(outside), with));
        assert!(!may_read(&guarded, Some(outside), wrong));
    }
}
