//! The heavy requests a probe once used to hold gigabytes, sent all at once, with the server's
//! peak memory and the answers of `/healthz` meanwhile.
//!
//! ```sh
//! cargo build --release && cargo run --release --example resource_probe
//! ```
//!
//! Starts `target/release/goalsmith serve` on a fresh SQLite database with its default limits,
//! then sends in parallel what `examples/support/probe.rs` lists: four cost-map requests at the
//! size limit (2 points × 4096 × 4096, 128 MiB each) and one past it (8192 × 8192), a 100 MB
//! JSON cost body, a 524 MB float64 NPY of points, two bundles of a goal at the vertex limit
//! (4 regions × 1024 vertices), the first scoring of a goal at the mask limit (4 masks of
//! 4096 × 4096), and eight uploads of distinct 16-bit 8192 × 8192 PNG frames. A thread asks
//! `/healthz` every 20 ms throughout. Prints one JSON line: the status codes per case, the
//! server's peak resident memory (VmHWM), the `/healthz` latencies and how many of them took
//! longer than the 100 ms a load balancer's health check may be given. It measures; it asserts
//! nothing (`tests/it/resources.rs` runs the same burst and asserts the envelope, the statuses
//! and that `/healthz` answers, without timings).

#[path = "support/probe.rs"]
mod probe;
use probe::http::{self, Error};
use std::time::Duration;

/// The latency README.md's figures are read against: a health check slower than this is a
/// server a load balancer may take out of rotation.
const HEALTHZ_TARGET_MS: f64 = 100.0;

fn main() -> Result<(), Error> {
    let served = http::Served::start()?;
    let cases = probe::prepare(&served.addr, &served.token)?;
    let report = probe::burst(
        &served.addr,
        &served.token,
        served.pid(),
        cases,
        Duration::from_secs(10),
        Duration::from_secs(600),
    );
    let mut summary = report.summary("resource_probe");
    summary["healthz"]["slower_than_100_ms"] = report
        .healthz
        .iter()
        .filter(|x| x.1 > HEALTHZ_TARGET_MS)
        .count()
        .into();
    summary["unexpected"] = report
        .outcomes
        .iter()
        .filter(|o| !o.allowed.contains(&o.status))
        .map(|o| {
            format!(
                "{}: {} {}",
                o.name,
                o.status,
                o.failure.as_deref().unwrap_or("")
            )
        })
        .collect::<Vec<_>>()
        .into();
    println!("{summary}");
    Ok(())
}
