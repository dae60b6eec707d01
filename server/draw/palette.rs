//! The editor's cost heat: the colour of a normalised cost, for the preview PNG laid over the
//! frame while a person edits.

use super::marks::{CASING, LABEL_INK, Rgba};

/// Where the cost is lowest, where a source should go: a sky blue that no mark uses, so the
/// heat never reads as a mark.
pub const HEAT_LOW: Rgba = Rgba::rgb(74, 186, 240);
/// Opacity of the cost heat where the cost is lowest (it fades as the cost rises).
pub const HEAT_NEAR_ALPHA: u8 = 200;
/// Opacity of the cost heat where the cost is highest.
pub const HEAT_FAR_ALPHA: u8 = 90;
/// Opacity of the glow over pixels within the term's tolerance.
pub const HEAT_WITHIN_ALPHA: u8 = 210;

/// The heat colour of a normalised cost `t` in [0, 1], as RGBA.
///
/// Low cost wears [`HEAT_LOW`] and sinks linearly into the marks' dark casing colour as the cost
/// rises, turning more transparent on the way so the frame shows through where nothing is
/// wanted. Pixels within the term's tolerance glow in the label cream, so the accepted area
/// reads at a glance. A `t` that is not finite counts as the highest cost.
pub fn heat(t: f64, within_tolerance: bool) -> [u8; 4] {
    let [lr, lg, lb, _] = LABEL_INK.0;
    if within_tolerance {
        return [lr, lg, lb, HEAT_WITHIN_ALPHA];
    }
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        1.0
    };
    let mix = |a: u8, b: u8| (f64::from(a) + (f64::from(b) - f64::from(a)) * t).round() as u8;
    let ([r0, g0, b0, _], [r1, g1, b1, _]) = (HEAT_LOW.0, CASING.0);
    [
        mix(r0, r1),
        mix(g0, g1),
        mix(b0, b1),
        mix(HEAT_NEAR_ALPHA, HEAT_FAR_ALPHA),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn heat_runs_from_sky_to_the_casing_colour() {
        assert_eq!(heat(0.0, false), [74, 186, 240, HEAT_NEAR_ALPHA]);
        assert_eq!(heat(1.0, false), [16, 14, 22, HEAT_FAR_ALPHA]);
        assert_eq!(heat(f64::NAN, false), heat(1.0, false));
        // Halfway is the rounded mean of the two ends, channel by channel.
        let mid = heat(0.5, false);
        assert_eq!(mid[0], ((74.0 + 16.0) / 2.0_f64).round() as u8);
        assert_eq!(heat(0.7, true), [255, 253, 246, 210]);
    }
}
