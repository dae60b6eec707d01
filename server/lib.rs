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
pub mod images;
mod layers;
pub mod pages;
pub mod scoring;
pub mod security;
pub mod service;
pub mod store;
pub mod strict_json;

/// The caution carried by the README, every export and the editor.
pub const SAFETY_CAUTION: &str = "Goals move real robots. Check every new goal in simulation or at \
reduced speed first, keep an emergency stop within reach, respect the cell's safeguarding, and \
follow ISO 10218, ISO/TS 15066, local rules and licensed practice. goalsmith defers to the robot's \
safety-rated controller; it is not a safety function.";

#[cfg(test)]
mod tests {
    /// The caution travels as an HTTP header value and a PNG tEXt chunk (Latin-1): it must stay
    /// printable ASCII.
    #[test]
    fn caution_is_printable_ascii() {
        assert!(
            super::SAFETY_CAUTION
                .bytes()
                .all(|b| (0x20..0x7f).contains(&b))
        );
    }
}
