//! goalsmith's marking code: how a goal looks wherever it is drawn.
//!
//! The overlay PNG, the goal editor and the revision comparison all draw from this one module.
//! The overlay reads it directly; the browser loads the same values from `/static/marks.js`,
//! which [`browser_module`] writes from the constants below, so a download looks like what was
//! edited.
//!
//! The code, in words:
//!
//! - **Colour says the term kind** ([`KIND_COLOURS`]): amber point moves, teal areas, violet
//!   painted areas, rose whole-object moves, slate learned terms. Zones have their own two
//!   colours: mint for the safe zone, brick for no-go zones.
//! - **Shape says the role**: a source is a filled disc ([`SOURCE`]), a target a ring with a
//!   cross in it ([`TARGET`]), and where a whole-object fit puts a source a small hollow square
//!   ([`FITTED`]).
//! - An **arrow** runs from each source to its target, stopping short of both marks; to the
//!   centre of an area or a painted area it is dashed ("somewhere in there"), and it is left out
//!   when the source already lies inside.
//! - **Tolerance** is the area within the term's tolerance of its target, tinted faintly in the
//!   kind colour; around a point target it is also ringed by a thin dashed circle. For an area it
//!   is the band outside the outline. A painted area's tolerance is not drawn.
//! - An **area** is its outline plus a light tint; a **painted area** its painted pixels tinted,
//!   with the pixels on its edge in full colour. The points of a **whole object** are joined by
//!   a thin dashed line, before and after.
//! - The **safe zone** is a dashed mint outline; a **no-go zone** is tinted, hatched at 45° and
//!   outlined in brick.
//! - Every stroke and mark sits on a dark **casing** so it reads on bright and dark frames
//!   alike, and every label on a dark box.
//!
//! Sizes are in mark units: one unit is one CSS pixel on the browser's canvas, whatever the
//! zoom, and `max(1, short side / 480)` frame pixels in the overlay, so the overlay of a frame of
//! up to 480 pixels on its short side matches the editor at 1:1. Geometry that belongs to the
//! goal (targets, outlines, tolerance radii) is in frame pixels and scales with the frame.
//!
//! The colours are goalsmith's own, picked to differ in lightness as well as hue; the shapes
//! carry the meaning too, so the marks also read in grey or for the common colour-vision
//! deficiencies.

use serde::Serialize;

/// An sRGB colour with straight (not premultiplied) alpha, 8 bits a channel: `[r, g, b, a]`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Rgba(pub [u8; 4]);

impl Rgba {
    /// An opaque colour.
    pub const fn rgb(r: u8, g: u8, b: u8) -> Self {
        Self([r, g, b, 255])
    }

    /// The same colour with another opacity.
    pub const fn with_alpha(self, a: u8) -> Self {
        let [r, g, b, _] = self.0;
        Self([r, g, b, a])
    }

    /// `#rrggbb`, the opacity left out.
    pub fn hex(self) -> String {
        let [r, g, b, _] = self.0;
        format!("#{r:02x}{g:02x}{b:02x}")
    }
}

/// Point moves (`point` terms).
pub const POINT: Rgba = Rgba::rgb(242, 176, 30);
/// Areas (`region` terms).
pub const REGION: Rgba = Rgba::rgb(43, 179, 185);
/// Painted areas (`mask` terms).
pub const MASK: Rgba = Rgba::rgb(162, 119, 224);
/// Whole-object moves (`rigid` terms).
pub const RIGID: Rgba = Rgba::rgb(236, 112, 160);
/// Learned terms (a source only).
pub const LEARNED: Rgba = Rgba::rgb(154, 168, 176);

/// The colour of each term kind, by the kind's name in the goal document.
pub const KIND_COLOURS: [(&str, Rgba); 5] = [
    ("point", POINT),
    ("region", REGION),
    ("mask", MASK),
    ("rigid", RIGID),
    ("learned", LEARNED),
];

/// The colour of a term kind by its name; a kind this code does not know gets the learned
/// terms' slate.
pub fn kind_colour(kind: &str) -> Rgba {
    KIND_COLOURS
        .iter()
        .find(|(k, _)| *k == kind)
        .map_or(LEARNED, |(_, c)| *c)
}

/// The camera's safe zone.
pub const SAFE: Rgba = Rgba::rgb(82, 204, 150);
/// The camera's no-go zones.
pub const NO_GO: Rgba = Rgba::rgb(226, 88, 64);

/// The dark casing under every stroke and mark.
pub const CASING: Rgba = Rgba([16, 14, 22, 225]);
/// Label text.
pub const LABEL_INK: Rgba = Rgba::rgb(255, 253, 246);
/// The box behind a label.
pub const LABEL_BOX: Rgba = Rgba([16, 14, 22, 200]);

/// Editor only: the selected point's mark.
pub const SELECTED: Rgba = Rgba::rgb(255, 246, 170);
/// Editor only: the ring around a point the server refused.
pub const REFUSED: Rgba = Rgba::rgb(255, 90, 54);

/// Opacity of an area's tint and of a painted area's inner pixels.
pub const AREA_ALPHA: u8 = 64;
/// Opacity of the tolerance tint.
pub const TOLERANCE_ALPHA: u8 = 40;
/// Opacity of a no-go zone's tint.
pub const NO_GO_ALPHA: u8 = 56;
/// Opacity of a no-go zone's hatching.
pub const HATCH_ALPHA: u8 = 190;
/// Comparison page only: the older revision is drawn dashed at this opacity.
pub const OLDER_ALPHA: u8 = 170;

/// Demo page only: the colours tracks take in turn, by the order they were started. They are
/// picked apart from the term kinds' colours so a track is not read as a goal term.
pub const TRACK_COLOURS: [Rgba; 6] = [
    Rgba::rgb(92, 172, 238),
    Rgba::rgb(176, 222, 74),
    Rgba::rgb(255, 138, 61),
    Rgba::rgb(214, 104, 226),
    Rgba::rgb(70, 214, 206),
    Rgba::rgb(250, 226, 92),
];
/// Demo page only: a sample the tracker lost, drawn as a cross in this colour.
pub const LOST: Rgba = Rgba::rgb(255, 72, 72);

/// Demo page: how a track is drawn, in mark units. The path joins the track's samples frame by
/// frame; the sample at the shown frame is a [`SOURCE`] disc in the track's colour; a sample a
/// person placed is a small filled square on the path; a lost sample a [`LOST`] cross; and a
/// stretch the tracker was unsure of is dashed.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct TrackSizes {
    /// Width of the path.
    pub path: f64,
    /// Half side of a manual sample's square.
    pub manual_half: f64,
    /// Half length of each arm of a lost sample's cross.
    pub lost_half: f64,
    /// How near (mark units) a press must land to the shown sample to drag it.
    pub grab: f64,
    /// Below this confidence a tracked sample counts as unsure and is listed for review.
    pub unsure_below: f64,
}

/// The track sizes the demo page uses.
pub const TRACK_SIZES: TrackSizes = TrackSizes {
    path: 1.5,
    manual_half: 3.0,
    lost_half: 4.0,
    grab: 12.0,
    unsure_below: 0.5,
};

/// Line widths and mark sizes, in mark units (see the module doc).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Sizes {
    /// Outlines and arrows.
    pub line: f64,
    /// Object outlines, tolerance rings, hatching, the fitted square.
    pub thin: f64,
    /// Width of the dark casing on each side of a stroke or around a filled mark.
    pub casing: f64,
    /// Radius of the source disc.
    pub source_radius: f64,
    /// Radius of the target ring.
    pub target_radius: f64,
    /// Half length of the target's cross.
    pub target_cross: f64,
    /// Half side of the fitted square.
    pub fitted_half: f64,
    /// Length of an arrow head, from its tip to its base.
    pub head_length: f64,
    /// Half width of an arrow head's base.
    pub head_half_width: f64,
    /// Room left between an arrow's ends and the marks it joins.
    pub arrow_gap: f64,
    /// Dash and gap lengths of dashed lines.
    pub dash: [f64; 2],
    /// Horizontal distance between hatch lines.
    pub hatch_spacing: f64,
    /// Label text size (the font's em).
    pub label_size: f64,
    /// Room between a label's text and the edge of its box.
    pub label_pad: f64,
    /// How far right of and above its anchor a label's box starts.
    pub label_offset: f64,
}

/// The sizes every drawing uses.
pub const SIZES: Sizes = Sizes {
    line: 2.0,
    thin: 1.25,
    casing: 1.5,
    source_radius: 5.0,
    target_radius: 8.0,
    target_cross: 4.0,
    fitted_half: 3.5,
    head_length: 11.0,
    head_half_width: 4.5,
    arrow_gap: 2.0,
    dash: [6.0, 4.0],
    hatch_spacing: 9.0,
    label_size: 13.0,
    label_pad: 3.0,
    label_offset: 9.0,
};

/// The outline of one part of a mark, in mark units around the mark's position.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Outline {
    /// A circle of radius `r` about the mark's position.
    Circle {
        /// Radius.
        r: f64,
    },
    /// Straight lines through `points`, back to the first when `closed`.
    Lines {
        /// Corner points.
        points: &'static [[f64; 2]],
        /// Whether the last point joins the first.
        closed: bool,
    },
}

/// One part of a mark: an outline filled, or stroked `width` units wide.
///
/// A mark is drawn in two passes: first the casing of every part (a filled part gets a stroke
/// `2 × casing` wide along its outline, a stroked part a stroke `2 × casing` wider than its
/// own), then every part in its colour. Strokes have round caps and joins.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(tag = "ink", rename_all = "snake_case")]
pub enum Part {
    /// The outline filled.
    Fill {
        /// What is filled.
        outline: Outline,
    },
    /// The outline stroked.
    Stroke {
        /// Stroke width, mark units.
        width: f64,
        /// What is stroked.
        outline: Outline,
    },
}

/// Where a thing is now: a filled disc.
pub const SOURCE: &[Part] = &[Part::Fill {
    outline: Outline::Circle {
        r: SIZES.source_radius,
    },
}];

const C: f64 = SIZES.target_cross;

/// Where it must go: a ring with a cross in it.
pub const TARGET: &[Part] = &[
    Part::Stroke {
        width: SIZES.line,
        outline: Outline::Circle {
            r: SIZES.target_radius,
        },
    },
    Part::Stroke {
        width: SIZES.line,
        outline: Outline::Lines {
            points: &[[-C, 0.0], [C, 0.0]],
            closed: false,
        },
    },
    Part::Stroke {
        width: SIZES.line,
        outline: Outline::Lines {
            points: &[[0.0, -C], [0.0, C]],
            closed: false,
        },
    },
];

const F: f64 = SIZES.fitted_half;

/// Where the fitted transform of a whole-object move puts a source: a small hollow square.
pub const FITTED: &[Part] = &[Part::Stroke {
    width: SIZES.thin,
    outline: Outline::Lines {
        points: &[[-F, -F], [F, -F], [F, F], [-F, F]],
        closed: true,
    },
}];

const HL: f64 = SIZES.head_length;
const HW: f64 = SIZES.head_half_width;

/// An arrow's head: a filled triangle with its tip at the mark's position, pointing along +x
/// (it is turned to the arrow's direction).
pub const ARROW_HEAD: &[Part] = &[Part::Fill {
    outline: Outline::Lines {
        points: &[[0.0, 0.0], [-HL, -HW], [-HL, HW]],
        closed: true,
    },
}];

/// Everything above, as the browser module carries it.
#[derive(Serialize)]
struct BrowserMarks {
    kinds: std::collections::BTreeMap<&'static str, Rgba>,
    zones: Zones,
    inks: Inks,
    alphas: Alphas,
    sizes: Sizes,
    shapes: Shapes,
    tracks: Tracks,
}

#[derive(Serialize)]
struct Tracks {
    colours: &'static [Rgba],
    lost: Rgba,
    sizes: TrackSizes,
}

#[derive(Serialize)]
struct Zones {
    safe: Rgba,
    no_go: Rgba,
}

#[derive(Serialize)]
struct Inks {
    casing: Rgba,
    label: Rgba,
    label_box: Rgba,
    selected: Rgba,
    refused: Rgba,
}

#[derive(Serialize)]
struct Alphas {
    area: u8,
    tolerance: u8,
    no_go: u8,
    hatch: u8,
    older: u8,
}

#[derive(Serialize)]
struct Shapes {
    source: &'static [Part],
    target: &'static [Part],
    fitted: &'static [Part],
    arrow_head: &'static [Part],
}

/// The ES module served at `/static/marks.js`: the constants of this module as JSON, exported
/// as `KINDS`, `ZONES`, `INKS`, `ALPHAS` (0–255), `SIZES`, `SHAPES` and `TRACKS`. Colours are `[r, g, b,
/// a]` arrays with a in 0–255.
pub fn browser_module() -> String {
    let marks = BrowserMarks {
        kinds: KIND_COLOURS.iter().copied().collect(),
        zones: Zones {
            safe: SAFE,
            no_go: NO_GO,
        },
        inks: Inks {
            casing: CASING,
            label: LABEL_INK,
            label_box: LABEL_BOX,
            selected: SELECTED,
            refused: REFUSED,
        },
        alphas: Alphas {
            area: AREA_ALPHA,
            tolerance: TOLERANCE_ALPHA,
            no_go: NO_GO_ALPHA,
            hatch: HATCH_ALPHA,
            older: OLDER_ALPHA,
        },
        sizes: SIZES,
        shapes: Shapes {
            source: SOURCE,
            target: TARGET,
            fitted: FITTED,
            arrow_head: ARROW_HEAD,
        },
        tracks: Tracks {
            colours: &TRACK_COLOURS,
            lost: LOST,
            sizes: TRACK_SIZES,
        },
    };
    // Plain data of our own types: serialising it cannot fail.
    let json = serde_json::to_string_pretty(&marks).unwrap_or_else(|_| "{}".into());
    format!(
        "// goalsmith's marking code, written by the server from server/draw/marks.rs.\n\
         // The overlay PNG draws from the same constants.\n\
         const MARKS = {json};\n\
         export const KINDS = MARKS.kinds;\n\
         export const ZONES = MARKS.zones;\n\
         export const INKS = MARKS.inks;\n\
         export const ALPHAS = MARKS.alphas;\n\
         export const SIZES = MARKS.sizes;\n\
         export const SHAPES = MARKS.shapes;\n\
         export const TRACKS = MARKS.tracks;\n\
         export default MARKS;\n"
    )
}

/// `GET /static/marks.js`.
pub async fn serve_browser_module() -> impl axum::response::IntoResponse {
    (
        [(
            axum::http::header::CONTENT_TYPE,
            "text/javascript; charset=utf-8",
        )],
        browser_module(),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_browser_module_carries_every_constant() {
        let js = browser_module();
        let json = js
            .split_once("const MARKS = ")
            .and_then(|(_, rest)| rest.split_once(";\nexport"))
            .map(|(json, _)| json)
            .expect("the module holds one JSON object");
        let v: serde_json::Value = serde_json::from_str(json).unwrap();
        for (kind, colour) in KIND_COLOURS {
            assert_eq!(v["kinds"][kind], serde_json::json!(colour.0), "{kind}");
        }
        assert_eq!(v["zones"]["no_go"], serde_json::json!(NO_GO.0));
        assert_eq!(v["sizes"]["source_radius"], SIZES.source_radius);
        assert_eq!(v["alphas"]["area"], AREA_ALPHA);
        assert_eq!(v["shapes"]["source"][0]["ink"], "fill");
        assert_eq!(v["shapes"]["source"][0]["outline"]["circle"]["r"], 5.0);
        assert_eq!(v["shapes"]["target"].as_array().map(Vec::len), Some(3));
        assert_eq!(
            v["shapes"]["arrow_head"][0]["outline"]["lines"]["points"][1],
            serde_json::json!([-SIZES.head_length, -SIZES.head_half_width])
        );
        for name in [
            "KINDS", "ZONES", "INKS", "ALPHAS", "SIZES", "SHAPES", "TRACKS",
        ] {
            assert!(js.contains(&format!("export const {name} = ")), "{name}");
        }
    }

    #[test]
    fn kinds_are_told_apart_and_unknown_ones_fall_back() {
        for (a, (ka, ca)) in KIND_COLOURS.iter().enumerate() {
            for (kb, cb) in &KIND_COLOURS[a + 1..] {
                assert_ne!(ca, cb, "{ka} and {kb}");
            }
            assert_ne!(*ca, SAFE);
            assert_ne!(*ca, NO_GO);
        }
        assert_eq!(kind_colour("region"), REGION);
        assert_eq!(kind_colour("something new"), LEARNED);
        assert_eq!(POINT.hex(), "#f2b01e");
    }
}
