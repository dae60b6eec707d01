//! goalsmith: the team's shared place for robot goals.
//!
//! The server keeps goals as immutable revisions with an exact distance-based cost (computed in
//! the `goalsmith-core` crate), stores them in SQLite or PostgreSQL, and serves them to planners
//! over HTTP. See README.md for use and DEVELOPERS.md for the layout.

pub mod api;
pub mod app;
pub mod assets;
pub mod cli;
pub mod config;
pub mod cookies;
pub mod demo;
pub mod demo_archive;
pub mod draw;
pub mod fuzzing;
mod layers;
pub mod pages;
pub mod scoring;
pub mod security;
pub mod service;
pub mod store;
pub mod strict_json;
pub mod wire;

/// The caution carried by the README, every export and the editor (kept with the bundle
/// format, which carries it too).
pub use goalsmith_bundle::SAFETY_CAUTION;
/// Image decoding under limits (in the bundle crate, which decodes the masks of a revision).
pub use goalsmith_bundle::images;
