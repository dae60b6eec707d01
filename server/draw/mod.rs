//! Drawing: the overlay PNG of a goal on its frame, the reward map of a fit on its frame, the
//! editor's cost-heat colours, and the marking code the browser draws with too.
//!
//! Paths, strokes, dashes and fills are tiny-skia's; text is DejaVu Sans (embedded, read with
//! ab_glyph). Everything is in frame pixel coordinates: x to the right, y down, the centre of
//! the top-left pixel at (0, 0), so pixel (i, j) covers [i − ½, i + ½] × [j − ½, j + ½].
//! Colours blend "source over" on the sRGB values, as a browser canvas does, so the overlay and
//! the editor mix a translucent tint the same way.
//!
//! ```
//! use goalsmith::draw::{OverlayItem, marks, render_overlay};
//!
//! let frame = image::RgbaImage::from_pixel(64, 48, image::Rgba([20, 20, 20, 255]));
//! let goal = [OverlayItem::PointMove {
//!     source: [10.0, 30.0],
//!     target: [50.0, 30.0],
//!     tolerance_px: 5.0,
//!     label: "1".into(),
//! }];
//! let overlay = render_overlay(&frame, &goal);
//! // The source disc is filled in the point colour, right to its centre pixel.
//! assert_eq!(overlay.get_pixel(10, 30).0, marks::POINT.0);
//! // A far corner keeps the frame.
//! assert_eq!(overlay.get_pixel(63, 0).0, [20, 20, 20, 255]);
//! ```

mod canvas;
pub mod marks;
mod overlay;
pub mod palette;
mod place;
mod reward;
mod text;

pub use overlay::{
    OverlayItem, ZoneKind, goal_items, render_overlay, render_overlay_until, unit_for_frame,
};
pub use reward::{DemoPath, render_reward_map};

#[cfg(test)]
mod tests;
