//! Integration tests: the real server on a random port, over HTTP, on SQLite and PostgreSQL.
//! One test crate with modules keeps link time down.

mod support;

mod auth_matrix;
mod bad_input;
mod browser;
mod concurrency;
mod copy;
mod crash;
mod demo_scenario;
mod demos;
mod export;
mod fit_bundles;
mod goal_sets;
mod limits;
mod observability;
mod openapi;
mod operations;
mod pages;
mod probe;
// Reads the server's peak memory from /proc/<pid>/status.
#[cfg(target_os = "linux")]
mod resources;
mod restart;
mod review;
mod reward_fits;
mod routes;
mod scale_out;
mod security;
mod tracks;
