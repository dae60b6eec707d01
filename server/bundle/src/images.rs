//! Image decoding with limits: a hostile header cannot make the server allocate its claimed size.

use image::{ImageFormat, ImageReader, Limits};
use std::io::Cursor;

/// Why an upload was refused.
#[derive(Debug, thiserror::Error)]
pub enum ImageRejection {
    /// The declared size exceeds what the server decodes.
    #[error("the image is {width}×{height}; at most {max}×{max} pixels are accepted")]
    TooLarge {
        /// Declared width.
        width: u32,
        /// Declared height.
        height: u32,
        /// Largest side accepted.
        max: u32,
    },
    /// The decoder hit a memory limit.
    #[error("the image needs more memory to decode than the server allows")]
    OverMemoryLimit,
    /// Not a valid image of the declared type.
    #[error("the image cannot be decoded: {0}")]
    Corrupt(String),
}

fn limits(max_side: u32, max_alloc: u64) -> Limits {
    let mut l = Limits::default();
    l.max_image_width = Some(max_side);
    l.max_image_height = Some(max_side);
    l.max_alloc = Some(max_alloc);
    l
}

fn reader(bytes: &[u8], format: ImageFormat) -> ImageReader<Cursor<&[u8]>> {
    let mut r = ImageReader::new(Cursor::new(bytes));
    r.set_format(format);
    r
}

fn map_err(e: image::ImageError) -> ImageRejection {
    match e {
        image::ImageError::Limits(_) => ImageRejection::OverMemoryLimit,
        other => ImageRejection::Corrupt(other.to_string()),
    }
}

/// Reads the declared size from the header only, refusing oversized images before any pixel
/// buffer exists.
pub fn declared_size(
    bytes: &[u8],
    format: ImageFormat,
    max_side: u32,
) -> Result<(u32, u32), ImageRejection> {
    // PNG keeps its size at a fixed place in the first chunk; read it there so a header that is
    // all there is (no pixel data at all) is still judged by the size it claims.
    let (width, height) = match png_ihdr_size(bytes) {
        Some(size) if format == ImageFormat::Png => size,
        _ => reader(bytes, format).into_dimensions().map_err(map_err)?,
    };
    if width > max_side || height > max_side {
        return Err(ImageRejection::TooLarge {
            width,
            height,
            max: max_side,
        });
    }
    Ok((width, height))
}

fn png_ihdr_size(bytes: &[u8]) -> Option<(u32, u32)> {
    const SIGNATURE: [u8; 8] = [0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A];
    if bytes.len() < 24 || bytes[..8] != SIGNATURE || &bytes[12..16] != b"IHDR" {
        return None;
    }
    let w = u32::from_be_bytes([bytes[16], bytes[17], bytes[18], bytes[19]]);
    let h = u32::from_be_bytes([bytes[20], bytes[21], bytes[22], bytes[23]]);
    Some((w, h))
}

/// Fully decodes (under limits) to prove the image is whole; returns the pixels.
pub fn decode(
    bytes: &[u8],
    format: ImageFormat,
    max_side: u32,
    max_alloc: u64,
) -> Result<image::DynamicImage, ImageRejection> {
    declared_size(bytes, format, max_side)?;
    ends_whole(bytes, format)?;
    let mut r = reader(bytes, format);
    r.limits(limits(max_side, max_alloc));
    r.decode().map_err(map_err)
}

/// The decoders fill in what a cut-off file lacks (grey rows for a JPEG that stops early), so
/// a frame must also hold its format's end marker: a JPEG the EOI marker FF D9 after its last
/// start-of-scan FF DA (ITU-T T.81, B.2.1; an FF inside entropy-coded data is always followed
/// by 00, so an FF D9 after the last scan is the real end, not a thumbnail's), a PNG its IEND
/// chunk (PNG Specification, 11.2.5). Bytes after the marker, which some cameras append, are
/// allowed.
fn ends_whole(bytes: &[u8], format: ImageFormat) -> Result<(), ImageRejection> {
    let last = |pat: &[u8]| bytes.windows(pat.len()).rposition(|w| w == pat);
    let whole = match format {
        ImageFormat::Jpeg => match (last(&[0xFF, 0xDA]), last(&[0xFF, 0xD9])) {
            (Some(sos), Some(eoi)) => eoi > sos,
            _ => false,
        },
        ImageFormat::Png => last(b"IEND").is_some(),
        _ => true,
    };
    if whole {
        Ok(())
    } else {
        Err(ImageRejection::Corrupt(
            "the file ends before its end marker (cut off in transfer?)".into(),
        ))
    }
}

/// Decodes a base64 PNG mask: painted where luma ≥ 128 and alpha ≥ 128.
pub fn decode_mask(
    b64: &str,
    max_side: u32,
    max_alloc: u64,
) -> Result<(usize, usize, Vec<bool>), String> {
    use base64::Engine;
    let bytes = base64::engine::general_purpose::STANDARD
        .decode(b64.trim())
        .map_err(|e| format!("mask_png_base64 is not valid base64: {e}"))?;
    let img = decode(&bytes, ImageFormat::Png, max_side, max_alloc).map_err(|e| e.to_string())?;
    let la = img.to_luma_alpha8();
    let (w, h) = la.dimensions();
    let painted = la
        .pixels()
        .map(|p| p.0[0] >= 128 && p.0[1] >= 128)
        .collect();
    Ok((w as usize, h as usize, painted))
}

/// Encodes painted flags as a black-and-white PNG, the inverse of [`decode_mask`].
pub fn encode_mask(width: u32, height: u32, painted: &[bool]) -> Result<Vec<u8>, String> {
    let data: Vec<u8> = painted.iter().map(|&p| if p { 255 } else { 0 }).collect();
    let img = image::GrayImage::from_raw(width, height, data)
        .ok_or_else(|| "mask size does not match its data".to_string())?;
    let mut out = Cursor::new(Vec::new());
    img.write_to(&mut out, ImageFormat::Png)
        .map_err(|e| e.to_string())?;
    Ok(out.into_inner())
}
