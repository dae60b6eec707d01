//! The demo scene (being written).
