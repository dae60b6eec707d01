//! Pure raster drawing: the goal overlay PNG and the demo scene.
//!
//! Everything here works on an [`Rgba8Image`] (row-major, straight-alpha RGBA, 8 bits per
//! channel) in frame pixel coordinates: x to the right, y down, the centre of the top-left
//! pixel at (0, 0), so pixel (i, j) covers the square [i − ½, i + ½] × [j − ½, j + ½].
//!
//! Anti-aliasing is by analytic coverage: a pixel takes the fraction of its square that the
//! shape covers, computed exactly for edges that run along a pixel axis and closely (from the
//! distance to the edge) otherwise. Colours are blended with the ordinary "source over"
//! operator directly on the sRGB-encoded values, not in linear light; for thin overlay strokes
//! the difference is invisible and it keeps the maths and tests simple.
//!
//! Primitives never panic on odd input: coordinates far outside the image are clipped, and a
//! shape with any NaN or infinite coordinate is skipped.
//!
//! No image codec lives here; turning an [`Rgba8Image`] into a PNG is the caller's business.

mod font;
mod image;
mod noise;
mod outline;
mod overlay;
pub mod palette;
mod raster;
pub mod scene;

pub use font::{
    ADVANCE, GLYPH_HEIGHT, GLYPH_WIDTH, LINE_HEIGHT, TextBox, TextStyle, has_glyph, text_size,
};
pub use image::{Color, DrawError, Rgba8Image};
pub use overlay::{OverlayItem, ZoneKind, render_overlay};
pub use raster::{FillRule, Pen};
