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
//!
//! ```
//! use goalsmith_core::draw::{Color, OverlayItem, Pen, Rgba8Image, render_overlay};
//!
//! let mut img = Rgba8Image::new(64, 48, Color::rgb(20, 20, 20)).unwrap();
//! // Width 2 centred on y = 10 spans y 9..11: row 10 (y 9.5..10.5) is covered fully and
//! // rows 9 and 11 by half, because pixel centres sit on whole coordinates.
//! img.stroke_segment([4.0, 10.0], [60.0, 10.0], &Pen::new(2.0, Color::rgb(255, 255, 255)));
//! assert_eq!(img.pixel(30, 10), Some(Color::rgb(255, 255, 255)));
//! assert_eq!(img.pixel(30, 9).map(|c| c.r), Some(138)); // (255 + 20) / 2, rounded
//! assert_eq!(img.pixel(30, 8), Some(Color::rgb(20, 20, 20)));
//!
//! let goal = [OverlayItem::PointMove {
//!     source: [10.0, 30.0],
//!     target: [50.0, 30.0],
//!     tolerance_px: 5.0,
//!     label: "1".into(),
//! }];
//! let overlay = render_overlay(&img, &goal);
//! assert_eq!((overlay.width(), overlay.height()), (64, 48));
//! assert_ne!(overlay, img);
//! ```

mod font;
mod image;
mod noise;
mod outline;
mod overlay;
pub mod palette;
mod primitives;
mod raster;
pub mod scene;

pub use font::{
    ADVANCE, GLYPH_HEIGHT, GLYPH_WIDTH, LINE_HEIGHT, TextBox, TextStyle, has_glyph, text_size,
};
pub use image::{Color, DrawError, Rgba8Image};
pub use overlay::{OverlayItem, ZoneKind, render_overlay};
pub use primitives::Pen;
pub use raster::FillRule;
