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

/// Opacity of the cost heat where the cost is lowest (it fades as the cost rises).
pub const HEAT_NEAR_ALPHA: u8 = 200;
/// Opacity of the cost heat where the cost is highest.
pub const HEAT_FAR_ALPHA: u8 = 90;

/// The editor's cost-heat colour of a normalised cost `t` in [0, 1], as RGBA.
///
/// Built from this palette alone: the cost is lowest where a source should go, so low cost wears
/// the [`TARGET`] sky colour, and it sinks linearly into the [`HALO`] ink as the cost rises,
/// turning more transparent on the way so the frame shows through where nothing is wanted.
/// Pixels within the term's tolerance glow in the [`LABEL`] cream, so the accepted area reads
/// at a glance. Non-finite `t` counts as the highest cost.
pub fn heat(t: f64, within_tolerance: bool) -> [u8; 4] {
    if within_tolerance {
        return [LABEL.r, LABEL.g, LABEL.b, 210];
    }
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        1.0
    };
    let mix = |a: u8, b: u8| (f64::from(a) + (f64::from(b) - f64::from(a)) * t).round() as u8;
    [
        mix(TARGET.r, HALO.r),
        mix(TARGET.g, HALO.g),
        mix(TARGET.b, HALO.b),
        mix(HEAT_NEAR_ALPHA, HEAT_FAR_ALPHA),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn heat_runs_from_target_to_halo() {
        assert_eq!(
            heat(0.0, false),
            [TARGET.r, TARGET.g, TARGET.b, HEAT_NEAR_ALPHA]
        );
        assert_eq!(heat(1.0, false), [HALO.r, HALO.g, HALO.b, HEAT_FAR_ALPHA]);
        assert_eq!(heat(f64::NAN, false), heat(1.0, false));
        // Halfway is the rounded mean of the two ends, channel by channel.
        let mid = heat(0.5, false);
        assert_eq!(mid[0], ((74.0 + 16.0) / 2.0_f64).round() as u8);
        assert_eq!(heat(0.7, true), [LABEL.r, LABEL.g, LABEL.b, 210]);
    }
}
