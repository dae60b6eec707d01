//! The overlay palette: goalsmith's own colours, picked to stay apart in lightness as well as
//! hue (amber sources, sky targets, rose fits, mint safe zones, brick no-go zones) so the marks
//! read for the common colour-vision deficiencies too, and always drawn over a dark halo so they
//! show on bright and dark frames alike. Shapes carry meaning as well: sources are rings with a
//! dot, targets diamonds with a cross, no-go zones are hatched.
//!
//! The web pages may use [`Color::to_hex`] on these for legends.

use super::image::Color;

/// Where a term's object is now (source markers, source outlines).
pub const SOURCE: Color = Color::rgb(247, 176, 58);
/// Where it should go (target markers, regions, masks).
pub const TARGET: Color = Color::rgb(74, 186, 240);
/// Arrows from source to target.
pub const ARROW: Color = Color::rgb(244, 240, 226);
/// Tolerance circles and bands.
pub const TOLERANCE: Color = Color::rgb(170, 224, 250);
/// Where a rigid fit puts the sources.
pub const FITTED: Color = Color::rgb(236, 124, 180);
/// Safe zones.
pub const SAFE: Color = Color::rgb(82, 204, 150);
/// No-go zones.
pub const NO_GO: Color = Color::rgb(226, 88, 64);
/// Label ink.
pub const LABEL: Color = Color::rgb(255, 253, 246);
/// The dark halo under every stroke and label.
pub const HALO: Color = Color::rgba(16, 14, 22, 225);

/// Opacity of region and mask fills.
pub const FILL_ALPHA: u8 = 72;
/// Opacity of zone fills.
pub const ZONE_ALPHA: u8 = 56;
