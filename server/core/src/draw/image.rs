//! The RGBA image buffer, colours and the blending operator.

use thiserror::Error;

/// Largest width or height accepted, so a typo in a size cannot ask for gigabytes.
pub(crate) const MAX_SIDE: usize = 1 << 15;

/// What is wrong with an image buffer.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum DrawError {
    /// Width or height is zero or larger than 32768.
    #[error("image size {width}x{height} is not allowed (each side 1..=32768)")]
    BadSize {
        /// Requested width.
        width: usize,
        /// Requested height.
        height: usize,
    },
    /// The pixel buffer does not hold exactly width × height pixels.
    #[error("a {width}x{height} image with {channels} channels needs {expected} bytes, got {got}")]
    BufferLength {
        /// Image width.
        width: usize,
        /// Image height.
        height: usize,
        /// Channels per pixel in the given buffer (3 or 4).
        channels: usize,
        /// Bytes the size calls for.
        expected: usize,
        /// Bytes given.
        got: usize,
    },
}

/// An sRGB colour with straight (not premultiplied) alpha.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Color {
    /// Red.
    pub r: u8,
    /// Green.
    pub g: u8,
    /// Blue.
    pub b: u8,
    /// Opacity, 255 = opaque.
    pub a: u8,
}

impl Color {
    /// An opaque colour.
    pub const fn rgb(r: u8, g: u8, b: u8) -> Self {
        Self { r, g, b, a: 255 }
    }
    /// A colour with the given opacity.
    pub const fn rgba(r: u8, g: u8, b: u8, a: u8) -> Self {
        Self { r, g, b, a }
    }
    /// The same colour with another opacity.
    pub const fn with_alpha(self, a: u8) -> Self {
        Self { a, ..self }
    }
    /// `#rrggbb` (or `#rrggbbaa` when not opaque), for legends in the web pages.
    pub fn to_hex(self) -> String {
        if self.a == 255 {
            format!("#{:02x}{:02x}{:02x}", self.r, self.g, self.b)
        } else {
            format!("#{:02x}{:02x}{:02x}{:02x}", self.r, self.g, self.b, self.a)
        }
    }
    /// Linear mix in sRGB values: `t = 0` gives `self`, `t = 1` gives `other` (alpha mixed too).
    pub fn mix(self, other: Color, t: f64) -> Color {
        let t = if t.is_finite() {
            t.clamp(0.0, 1.0)
        } else {
            0.0
        };
        let m = |a: u8, b: u8| (f64::from(a) + (f64::from(b) - f64::from(a)) * t).round() as u8;
        Color::rgba(
            m(self.r, other.r),
            m(self.g, other.g),
            m(self.b, other.b),
            m(self.a, other.a),
        )
    }
}

/// "Source over" for one pixel, straight alpha, on sRGB values.
///
/// `coverage` (0..=1) scales the source opacity, which is how anti-aliased edges blend.
/// With `d_a` the destination opacity and `s_a` the effective source opacity:
/// `out_a = s_a + d_a (1 − s_a)`, `out_c = (s_c s_a + d_c d_a (1 − s_a)) / out_a`.
pub(crate) fn blend_over(dst: [u8; 4], src: Color, coverage: f32) -> [u8; 4] {
    let sa = f32::from(src.a) / 255.0 * coverage.clamp(0.0, 1.0);
    if sa <= 0.0 {
        return dst;
    }
    let da = f32::from(dst[3]) / 255.0;
    let out_a = sa + da * (1.0 - sa);
    let mix = |s: u8, d: u8| {
        let v = (f32::from(s) * sa + f32::from(d) * da * (1.0 - sa)) / out_a;
        v.round().clamp(0.0, 255.0) as u8
    };
    [
        mix(src.r, dst[0]),
        mix(src.g, dst[1]),
        mix(src.b, dst[2]),
        (out_a * 255.0).round().clamp(0.0, 255.0) as u8,
    ]
}

/// A row-major RGBA image, 4 bytes per pixel; byte `4 (j W + i)` starts pixel (x = i, y = j).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Rgba8Image {
    width: usize,
    height: usize,
    data: Vec<u8>,
}

fn check_size(width: usize, height: usize) -> Result<usize, DrawError> {
    if width == 0 || height == 0 || width > MAX_SIDE || height > MAX_SIDE {
        return Err(DrawError::BadSize { width, height });
    }
    Ok(width * height)
}

impl Rgba8Image {
    /// An image filled with one colour.
    pub fn new(width: usize, height: usize, fill: Color) -> Result<Self, DrawError> {
        let n = check_size(width, height)?;
        let px = [fill.r, fill.g, fill.b, fill.a];
        let data = px.iter().copied().cycle().take(n * 4).collect();
        Ok(Self {
            width,
            height,
            data,
        })
    }

    /// Wraps a row-major RGBA buffer of exactly `width * height * 4` bytes.
    pub fn from_rgba(width: usize, height: usize, data: Vec<u8>) -> Result<Self, DrawError> {
        let n = check_size(width, height)?;
        if data.len() != n * 4 {
            return Err(DrawError::BufferLength {
                width,
                height,
                channels: 4,
                expected: n * 4,
                got: data.len(),
            });
        }
        Ok(Self {
            width,
            height,
            data,
        })
    }

    /// Copies a row-major RGB buffer of exactly `width * height * 3` bytes; alpha becomes 255.
    pub fn from_rgb(width: usize, height: usize, rgb: &[u8]) -> Result<Self, DrawError> {
        let n = check_size(width, height)?;
        if rgb.len() != n * 3 {
            return Err(DrawError::BufferLength {
                width,
                height,
                channels: 3,
                expected: n * 3,
                got: rgb.len(),
            });
        }
        let mut data = Vec::with_capacity(n * 4);
        for px in rgb.chunks_exact(3) {
            data.extend_from_slice(&[px[0], px[1], px[2], 255]);
        }
        Ok(Self {
            width,
            height,
            data,
        })
    }

    /// Width in pixels.
    pub fn width(&self) -> usize {
        self.width
    }
    /// Height in pixels.
    pub fn height(&self) -> usize {
        self.height
    }
    /// The RGBA bytes, row-major.
    pub fn data(&self) -> &[u8] {
        &self.data
    }
    /// Gives up the RGBA bytes.
    pub fn into_raw(self) -> Vec<u8> {
        self.data
    }
    /// The RGB bytes (alpha dropped), row-major, e.g. for a smaller PNG of an opaque frame.
    pub fn to_rgb(&self) -> Vec<u8> {
        self.data
            .chunks_exact(4)
            .flat_map(|p| [p[0], p[1], p[2]])
            .collect()
    }

    /// The pixel at column `i`, row `j`, or `None` outside the image.
    pub fn pixel(&self, i: usize, j: usize) -> Option<Color> {
        if i >= self.width || j >= self.height {
            return None;
        }
        let k = 4 * (j * self.width + i);
        let p = &self.data[k..k + 4];
        Some(Color::rgba(p[0], p[1], p[2], p[3]))
    }

    /// Overwrites one pixel; ignored outside the image.
    pub fn set_pixel(&mut self, i: usize, j: usize, c: Color) {
        if i < self.width && j < self.height {
            let k = 4 * (j * self.width + i);
            self.data[k..k + 4].copy_from_slice(&[c.r, c.g, c.b, c.a]);
        }
    }

    /// Blends `c` over one pixel with the given coverage (0..=1); ignored outside the image.
    pub fn blend_pixel(&mut self, i: usize, j: usize, c: Color, coverage: f32) {
        if i < self.width && j < self.height {
            let k = 4 * (j * self.width + i);
            let d = [
                self.data[k],
                self.data[k + 1],
                self.data[k + 2],
                self.data[k + 3],
            ];
            self.data[k..k + 4].copy_from_slice(&blend_over(d, c, coverage));
        }
    }

    /// Blends a colour over the whole image (e.g. to dim a frame under an overlay).
    pub fn tint(&mut self, c: Color) {
        for p in self.data.chunks_exact_mut(4) {
            let out = blend_over([p[0], p[1], p[2], p[3]], c, 1.0);
            p.copy_from_slice(&out);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn constructors_check_lengths() {
        assert!(Rgba8Image::from_rgba(2, 2, vec![0; 16]).is_ok());
        assert_eq!(
            Rgba8Image::from_rgba(2, 2, vec![0; 15]),
            Err(DrawError::BufferLength {
                width: 2,
                height: 2,
                channels: 4,
                expected: 16,
                got: 15
            })
        );
        assert!(matches!(
            Rgba8Image::from_rgb(3, 1, &[0; 8]),
            Err(DrawError::BufferLength { expected: 9, .. })
        ));
        assert!(matches!(
            Rgba8Image::new(0, 5, Color::rgb(0, 0, 0)),
            Err(DrawError::BadSize { .. })
        ));
        assert!(matches!(
            Rgba8Image::new(MAX_SIDE + 1, 1, Color::rgb(0, 0, 0)),
            Err(DrawError::BadSize { .. })
        ));
        let img = Rgba8Image::from_rgb(2, 1, &[1, 2, 3, 4, 5, 6]).unwrap();
        assert_eq!(img.data(), &[1, 2, 3, 255, 4, 5, 6, 255]);
        assert_eq!(img.to_rgb(), vec![1, 2, 3, 4, 5, 6]);
        assert_eq!(img.pixel(1, 0), Some(Color::rgb(4, 5, 6)));
        assert_eq!(img.pixel(2, 0), None);
    }

    #[test]
    fn blending_maths() {
        // Half-opaque white over opaque black: 255 * 0.5 = 127.5, rounds to 128.
        let out = blend_over([0, 0, 0, 255], Color::rgba(255, 255, 255, 255), 0.5);
        assert_eq!(out, [128, 128, 128, 255]);
        // Opaque source replaces, zero coverage leaves alone.
        assert_eq!(
            blend_over([9, 9, 9, 255], Color::rgb(200, 100, 50), 1.0),
            [200, 100, 50, 255]
        );
        assert_eq!(
            blend_over([9, 9, 9, 255], Color::rgb(200, 100, 50), 0.0),
            [9, 9, 9, 255]
        );
        // Source alpha and coverage multiply: 0.5 * 0.5 = 0.25 of 200 over 0 = 50.
        assert_eq!(
            blend_over([0, 0, 0, 255], Color::rgba(200, 0, 0, 128), 0.5)[0],
            50
        );
        // Over a transparent pixel the colour is kept and alpha becomes the source's.
        assert_eq!(
            blend_over([0, 0, 0, 0], Color::rgba(10, 20, 30, 100), 1.0),
            [10, 20, 30, 100]
        );
        // Half over half: out_a = 0.5 + 0.5 * 0.5 = 0.75;
        // red = (255 * 0.5 + 0 * 0.5 * 0.5) / 0.75 = 170.
        let out = blend_over([0, 0, 255, 128], Color::rgba(255, 0, 0, 128), 1.0);
        assert_eq!(out[0], 170);
        assert_eq!(out[3], 192); // 0.752 * 255 = 191.75
    }

    #[test]
    fn colour_helpers() {
        assert_eq!(Color::rgb(255, 16, 1).to_hex(), "#ff1001");
        assert_eq!(Color::rgba(0, 0, 0, 128).to_hex(), "#00000080");
        let m = Color::rgb(0, 100, 200).mix(Color::rgb(100, 200, 0), 0.5);
        assert_eq!(m, Color::rgb(50, 150, 100));
        assert_eq!(
            Color::rgb(1, 2, 3).mix(Color::rgb(9, 9, 9), f64::NAN),
            Color::rgb(1, 2, 3)
        );
    }
}
