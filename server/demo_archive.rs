//! Reading an uploaded demonstration: a ZIP of PNG or JPEG frames (in name order, with an
//! optional `timestamps.csv`), or an animated GIF. Everything is read in memory under limits;
//! nothing is ever extracted to disk.
//!
//! A ZIP is refused before any frame is decoded when an entry's name could escape a folder
//! (`../`, an absolute path, a drive letter or a backslash), when an entry is an archive itself,
//! when an entry is neither a frame nor `timestamps.csv`, or when the sizes its directory
//! declares are over the limits. While an entry is read, at most its declared size (plus one
//! byte, to notice a lie) is taken, and its compression ratio is checked, so a zip bomb is
//! stopped after the first bytes past what it claims.

use crate::images::{self, ImageRejection};
use image::ImageFormat;
use std::io::{Cursor, Read};

/// The limits of one demonstration upload.
#[derive(Debug, Clone)]
pub struct DemoLimits {
    /// Most frames in one demo.
    pub max_frames: usize,
    /// Largest upload (the archive or GIF as sent), bytes.
    pub max_archive_bytes: usize,
    /// Most bytes of all frames decoded to 8-bit RGBA together (w · h · 4 per frame).
    pub max_decoded_bytes: u64,
    /// Largest one entry of a ZIP, uncompressed, bytes.
    pub max_entry_bytes: u64,
    /// Highest compression ratio (uncompressed ÷ compressed) of one ZIP entry. PNG and JPEG
    /// frames are compressed already and deflate by about 1×; a run of zeros deflates by about
    /// 1000× per layer, and a bomb is made of such runs.
    pub max_ratio: u64,
}

impl Default for DemoLimits {
    /// At least 900 frames of 1280 × 720 (30 s at 30 frames/s), archives up to 512 MiB.
    fn default() -> Self {
        Self {
            max_frames: 900,
            max_archive_bytes: 512 << 20,
            max_decoded_bytes: 900 * 1280 * 720 * 4,
            max_entry_bytes: 64 << 20,
            max_ratio: 100,
        }
    }
}

/// Why a demonstration was refused. `TooLarge` is a 413, `Invalid` a 422; both say which
/// limit or rule.
#[derive(Debug, thiserror::Error)]
pub enum DemoRejection {
    /// Over a size or count limit.
    #[error("{0}")]
    TooLarge(String),
    /// Breaks a rule of the format.
    #[error("{message}")]
    Invalid {
        /// snake_case code.
        code: &'static str,
        /// For a person, naming the entry where one applies.
        message: String,
    },
}

fn invalid(code: &'static str, message: impl Into<String>) -> DemoRejection {
    DemoRejection::Invalid {
        code,
        message: message.into(),
    }
}

/// One frame of a demo: the image bytes to store (the uploaded PNG or JPEG as it came; GIF
/// frames are stored as PNG), and its time.
#[derive(Debug, Clone)]
pub struct DemoFrame {
    /// `image/png` or `image/jpeg`.
    pub content_type: &'static str,
    /// The encoded image.
    pub bytes: Vec<u8>,
    /// Seconds from the first frame: from `timestamps.csv`, the GIF's delays, or `None`.
    pub time_s: Option<f64>,
}

/// A demonstration read and checked: every frame has the camera's size.
#[derive(Debug)]
pub struct Demo {
    /// The frames, in order.
    pub frames: Vec<DemoFrame>,
}

/// What the frames must be and how much may be decoded.
#[derive(Debug, Clone, Copy)]
pub struct FrameRules {
    /// The camera's width.
    pub width: u32,
    /// The camera's height.
    pub height: u32,
    /// Largest side a decoder accepts.
    pub max_side: u32,
    /// Most bytes one decode may allocate.
    pub max_alloc: u64,
}

/// Reads a ZIP of frames.
pub fn read_zip(
    bytes: &[u8],
    rules: FrameRules,
    limits: &DemoLimits,
) -> Result<Demo, DemoRejection> {
    check_upload_size(bytes.len(), limits)?;
    let mut zip = zip::ZipArchive::new(Cursor::new(bytes)).map_err(|e| {
        invalid(
            "bad_archive",
            format!("the ZIP archive cannot be read: {e}"),
        )
    })?;
    // First pass: the directory only, so a bad archive is refused before anything is inflated.
    let mut frames: Vec<(String, usize, ImageFormat)> = Vec::new();
    let mut timestamps: Option<usize> = None;
    for k in 0..zip.len() {
        let entry = zip
            .by_index_raw(k)
            .map_err(|e| invalid("bad_archive", format!("entry {k} cannot be read: {e}")))?;
        let name = entry.name().to_string();
        if entry.is_dir() {
            continue;
        }
        if !is_plain_name(&name) {
            return Err(invalid(
                "unsafe_entry_name",
                format!("the entry name {name:?} could escape its folder; use plain file names"),
            ));
        }
        let base = name
            .rsplit('/')
            .next()
            .unwrap_or(&name)
            .to_ascii_lowercase();
        let declared = entry.size();
        if declared > limits.max_entry_bytes {
            return Err(DemoRejection::TooLarge(format!(
                "entry {name:?} is {declared} bytes uncompressed, over the limit of {} bytes \
                 per entry",
                limits.max_entry_bytes
            )));
        }
        let ratio_limit = entry
            .compressed_size()
            .max(1)
            .saturating_mul(limits.max_ratio);
        if declared > ratio_limit {
            return Err(DemoRejection::TooLarge(format!(
                "entry {name:?} would inflate more than {}-fold; that is not an image",
                limits.max_ratio
            )));
        }
        let format = match base.rsplit_once('.').map(|(_, e)| e) {
            Some("png") => ImageFormat::Png,
            Some("jpg" | "jpeg") => ImageFormat::Jpeg,
            Some("zip" | "gz" | "tgz" | "tar" | "7z" | "rar" | "bz2" | "xz" | "zst") => {
                return Err(invalid(
                    "nested_archive",
                    format!("entry {name:?} is an archive; put the frames in the ZIP itself"),
                ));
            }
            _ if base == "timestamps.csv" => {
                if timestamps.replace(k).is_some() {
                    return Err(invalid(
                        "bad_archive",
                        "the ZIP holds two timestamps.csv files",
                    ));
                }
                continue;
            }
            _ => {
                return Err(invalid(
                    "not_an_image",
                    format!(
                        "entry {name:?} is not a frame: a demo ZIP holds PNG or JPEG frames and \
                         an optional timestamps.csv"
                    ),
                ));
            }
        };
        frames.push((name, k, format));
        if frames.len() > limits.max_frames {
            return Err(DemoRejection::TooLarge(format!(
                "the ZIP holds more than {} frames, the limit per demo",
                limits.max_frames
            )));
        }
    }
    if frames.is_empty() {
        return Err(invalid("no_frames", "the ZIP holds no PNG or JPEG frames"));
    }
    check_decoded_total(frames.len(), rules, limits)?;
    frames.sort_by(|a, b| a.0.cmp(&b.0));
    let times = match timestamps {
        Some(k) => {
            let text = read_entry(&mut zip, k, limits)?;
            Some(parse_timestamps(&text, frames.len())?)
        }
        None => None,
    };
    let mut out = Vec::with_capacity(frames.len());
    for (i, (name, k, format)) in frames.iter().enumerate() {
        let data = read_entry(&mut zip, *k, limits)?;
        if is_archive_magic(&data) {
            return Err(invalid(
                "nested_archive",
                format!("entry {name:?} is an archive; put the frames in the ZIP itself"),
            ));
        }
        check_frame(&data, *format, rules).map_err(|e| match e {
            DemoRejection::Invalid { code, message } => DemoRejection::Invalid {
                code,
                message: format!("frame {name:?}: {message}"),
            },
            DemoRejection::TooLarge(m) => DemoRejection::TooLarge(format!("frame {name:?}: {m}")),
        })?;
        out.push(DemoFrame {
            content_type: if *format == ImageFormat::Png {
                "image/png"
            } else {
                "image/jpeg"
            },
            bytes: data,
            time_s: times.as_ref().map(|t| t[i]),
        });
    }
    Ok(Demo { frames: out })
}

/// Reads an animated GIF; each frame (composited on the canvas) is stored as PNG, its time
/// the sum of the delays before it.
pub fn read_gif(
    bytes: &[u8],
    rules: FrameRules,
    limits: &DemoLimits,
) -> Result<Demo, DemoRejection> {
    use image::AnimationDecoder;
    check_upload_size(bytes.len(), limits)?;
    let (w, h) = images::declared_size(bytes, ImageFormat::Gif, rules.max_side).map_err(reject)?;
    if (w, h) != (rules.width, rules.height) {
        return Err(wrong_size(w, h, rules));
    }
    let mut decoder = image::codecs::gif::GifDecoder::new(Cursor::new(bytes))
        .map_err(|e| invalid("bad_image", format!("the GIF cannot be read: {e}")))?;
    let mut l = image::Limits::default();
    l.max_image_width = Some(rules.max_side);
    l.max_image_height = Some(rules.max_side);
    l.max_alloc = Some(rules.max_alloc);
    image::ImageDecoder::set_limits(&mut decoder, l)
        .map_err(|_| DemoRejection::TooLarge("the GIF needs more memory than allowed".into()))?;
    let mut out = Vec::new();
    let mut t_ms = 0.0f64;
    for frame in decoder.into_frames() {
        let frame = frame.map_err(|e| match e {
            image::ImageError::Limits(_) => {
                DemoRejection::TooLarge("a GIF frame needs more memory than allowed".into())
            }
            other => invalid(
                "bad_image",
                format!("a GIF frame cannot be decoded: {other}"),
            ),
        })?;
        if out.len() == limits.max_frames {
            return Err(DemoRejection::TooLarge(format!(
                "the GIF has more than {} frames, the limit per demo",
                limits.max_frames
            )));
        }
        check_decoded_total(out.len() + 1, rules, limits)?;
        let (num, den) = frame.delay().numer_denom_ms();
        let delay = f64::from(num) / f64::from(den.max(1));
        let mut png = Cursor::new(Vec::new());
        frame
            .into_buffer()
            .write_to(&mut png, ImageFormat::Png)
            .map_err(|e| invalid("bad_image", format!("a GIF frame cannot be stored: {e}")))?;
        out.push(DemoFrame {
            content_type: "image/png",
            bytes: png.into_inner(),
            time_s: Some(t_ms / 1000.0),
        });
        t_ms += delay;
    }
    if out.is_empty() {
        return Err(invalid("no_frames", "the GIF has no frames"));
    }
    Ok(Demo { frames: out })
}

fn check_upload_size(n: usize, limits: &DemoLimits) -> Result<(), DemoRejection> {
    if n > limits.max_archive_bytes {
        return Err(DemoRejection::TooLarge(format!(
            "the upload is {n} bytes, over the limit of {} bytes per demo",
            limits.max_archive_bytes
        )));
    }
    Ok(())
}

fn check_decoded_total(
    frames: usize,
    rules: FrameRules,
    limits: &DemoLimits,
) -> Result<(), DemoRejection> {
    let each = u64::from(rules.width) * u64::from(rules.height) * 4;
    let total = each.saturating_mul(frames as u64);
    if total > limits.max_decoded_bytes {
        return Err(DemoRejection::TooLarge(format!(
            "{frames} frames of {} × {} are {total} bytes decoded, over the limit of {} bytes \
             per demo",
            rules.width, rules.height, limits.max_decoded_bytes
        )));
    }
    Ok(())
}

/// A relative name of plain parts: no `..`, no absolute path, no drive letter, no backslash,
/// no empty part, no control character.
fn is_plain_name(name: &str) -> bool {
    !name.is_empty()
        && !name.starts_with('/')
        && !name.contains('\\')
        && !name.chars().any(char::is_control)
        && name
            .split('/')
            .all(|part| !part.is_empty() && part != "." && part != ".." && !part.contains(':'))
}

/// ZIP, gzip, 7z, RAR, bzip2, xz and zstd signatures.
fn is_archive_magic(data: &[u8]) -> bool {
    const MAGICS: &[&[u8]] = &[
        b"PK\x03\x04",
        &[0x1F, 0x8B],
        b"7z\xBC\xAF\x27\x1C",
        b"Rar!",
        b"BZh",
        &[0xFD, b'7', b'z', b'X', b'Z', 0x00],
        &[0x28, 0xB5, 0x2F, 0xFD],
    ];
    MAGICS.iter().any(|m| data.starts_with(m))
}

/// Inflates entry `k`, taking at most its declared size plus one byte, so an entry that inflates
/// past what its directory says is caught at once.
fn read_entry(
    zip: &mut zip::ZipArchive<Cursor<&[u8]>>,
    k: usize,
    limits: &DemoLimits,
) -> Result<Vec<u8>, DemoRejection> {
    let entry = zip
        .by_index(k)
        .map_err(|e| invalid("bad_archive", format!("entry {k} cannot be read: {e}")))?;
    let name = entry.name().to_string();
    let declared = entry.size().min(limits.max_entry_bytes);
    let mut data = Vec::with_capacity(usize::try_from(declared).unwrap_or(0).min(1 << 24));
    entry
        .take(declared + 1)
        .read_to_end(&mut data)
        .map_err(|e| {
            invalid(
                "bad_archive",
                format!("entry {name:?} cannot be inflated: {e}"),
            )
        })?;
    if data.len() as u64 > declared {
        return Err(DemoRejection::TooLarge(format!(
            "entry {name:?} inflates past the {declared} bytes its directory declares"
        )));
    }
    Ok(data)
}

/// One time in seconds per frame, one per line (a first line that is not a number is taken as
/// a header); finite, not decreasing.
fn parse_timestamps(data: &[u8], frames: usize) -> Result<Vec<f64>, DemoRejection> {
    let text = std::str::from_utf8(data)
        .map_err(|_| invalid("bad_timestamps", "timestamps.csv is not UTF-8 text"))?;
    let mut out = Vec::with_capacity(frames);
    for (n, line) in text.lines().enumerate() {
        let field = line.split(',').next().unwrap_or("").trim();
        if field.is_empty() {
            continue;
        }
        match field.parse::<f64>() {
            Ok(t) if t.is_finite() => {
                if out.last().is_some_and(|&prev| t < prev) {
                    return Err(invalid(
                        "bad_timestamps",
                        format!("timestamps.csv line {}: times must not go backwards", n + 1),
                    ));
                }
                out.push(t);
            }
            _ if n == 0 && out.is_empty() => {} // a header
            _ => {
                return Err(invalid(
                    "bad_timestamps",
                    format!(
                        "timestamps.csv line {}: {field:?} is not a time in seconds",
                        n + 1
                    ),
                ));
            }
        }
    }
    if out.len() != frames {
        return Err(invalid(
            "bad_timestamps",
            format!("timestamps.csv has {} times for {frames} frames", out.len()),
        ));
    }
    Ok(out)
}

fn reject(e: ImageRejection) -> DemoRejection {
    match e {
        ImageRejection::TooLarge { .. } | ImageRejection::OverMemoryLimit => {
            DemoRejection::TooLarge(e.to_string())
        }
        ImageRejection::Corrupt(_) => invalid("bad_image", e.to_string()),
    }
}

fn wrong_size(w: u32, h: u32, rules: FrameRules) -> DemoRejection {
    invalid(
        "wrong_size",
        format!(
            "the frames are {w}×{h} but the camera takes {}×{} frames",
            rules.width, rules.height
        ),
    )
}

/// Decodes one frame under the limits (so a bad or cut-off image is refused) and checks its
/// size.
fn check_frame(data: &[u8], format: ImageFormat, rules: FrameRules) -> Result<(), DemoRejection> {
    let img = images::decode(data, format, rules.max_side, rules.max_alloc).map_err(reject)?;
    if (img.width(), img.height()) != (rules.width, rules.height) {
        return Err(wrong_size(img.width(), img.height(), rules));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Write;

    const RULES: FrameRules = FrameRules {
        width: 8,
        height: 6,
        max_side: 8192,
        max_alloc: 64 << 20,
    };

    fn png(w: u32, h: u32, shade: u8) -> Vec<u8> {
        let img = image::RgbaImage::from_pixel(w, h, image::Rgba([shade, 40, 200, 255]));
        let mut out = Cursor::new(Vec::new());
        img.write_to(&mut out, ImageFormat::Png).expect("png");
        out.into_inner()
    }

    fn zip_of(entries: &[(&str, &[u8])]) -> Vec<u8> {
        let mut z = zip::ZipWriter::new(Cursor::new(Vec::new()));
        let opts = zip::write::SimpleFileOptions::default()
            .compression_method(zip::CompressionMethod::Deflated);
        for (name, data) in entries {
            z.start_file(*name, opts).expect("entry");
            z.write_all(data).expect("write");
        }
        z.finish().expect("finish").into_inner()
    }

    fn code(r: Result<Demo, DemoRejection>) -> String {
        match r {
            Ok(_) => "ok".into(),
            Err(DemoRejection::TooLarge(m)) => format!("too_large: {m}"),
            Err(DemoRejection::Invalid { code, message }) => format!("{code}: {message}"),
        }
    }

    #[test]
    fn frames_in_name_order_with_their_times() {
        let (a, b, c) = (png(8, 6, 1), png(8, 6, 2), png(8, 6, 3));
        let z = zip_of(&[
            ("demo/0002.png", &b),
            ("demo/0010.png", &c),
            ("demo/0001.png", &a),
            ("demo/timestamps.csv", b"time_s\n0.0\n0.033\n0.1\n"),
        ]);
        let d = read_zip(&z, RULES, &DemoLimits::default()).expect("demo");
        let shades: Vec<Vec<u8>> = d.frames.iter().map(|f| f.bytes.clone()).collect();
        assert_eq!(shades, vec![a, b, c]);
        let times: Vec<Option<f64>> = d.frames.iter().map(|f| f.time_s).collect();
        assert_eq!(times, vec![Some(0.0), Some(0.033), Some(0.1)]);
    }

    #[test]
    fn unsafe_names_nested_archives_and_strangers_are_refused() {
        let f = png(8, 6, 1);
        for name in [
            "../x.png",
            "/abs.png",
            "a/../../x.png",
            "c:/x.png",
            "a\\x.png",
        ] {
            let got = code(read_zip(
                &zip_of(&[(name, &f)]),
                RULES,
                &DemoLimits::default(),
            ));
            assert!(got.starts_with("unsafe_entry_name"), "{name}: {got}");
        }
        let inner = zip_of(&[("a.png", &f)]);
        let got = code(read_zip(
            &zip_of(&[("inner.zip", &inner)]),
            RULES,
            &DemoLimits::default(),
        ));
        assert!(got.starts_with("nested_archive"), "{got}");
        // An archive named like a frame is found by its signature.
        let got = code(read_zip(
            &zip_of(&[("0001.png", &inner)]),
            RULES,
            &DemoLimits::default(),
        ));
        assert!(got.starts_with("nested_archive"), "{got}");
        let got = code(read_zip(
            &zip_of(&[("0001.png", &f), ("notes.txt", b"hi")]),
            RULES,
            &DemoLimits::default(),
        ));
        assert!(got.starts_with("not_an_image"), "{got}");
    }

    #[test]
    fn a_zip_bomb_is_stopped_by_its_ratio_and_limits_name_themselves() {
        let zeros = vec![0u8; 8 << 20];
        let got = code(read_zip(
            &zip_of(&[("0001.png", &zeros)]),
            RULES,
            &DemoLimits::default(),
        ));
        assert!(
            got.starts_with("too_large") && got.contains("inflate"),
            "{got}"
        );
        let f = png(8, 6, 1);
        let many: Vec<(String, Vec<u8>)> =
            (0..4).map(|k| (format!("{k:04}.png"), f.clone())).collect();
        let refs: Vec<(&str, &[u8])> = many
            .iter()
            .map(|(n, d)| (n.as_str(), d.as_slice()))
            .collect();
        let limits = DemoLimits {
            max_frames: 3,
            ..DemoLimits::default()
        };
        let got = code(read_zip(&zip_of(&refs), RULES, &limits));
        assert!(
            got.starts_with("too_large") && got.contains("3 frames"),
            "{got}"
        );
        let limits = DemoLimits {
            max_frames: 4,
            ..DemoLimits::default()
        };
        assert_eq!(
            code(read_zip(&zip_of(&refs), RULES, &limits)),
            "ok",
            "at the limit"
        );
        let limits = DemoLimits {
            max_decoded_bytes: 3 * 8 * 6 * 4,
            ..DemoLimits::default()
        };
        let got = code(read_zip(&zip_of(&refs), RULES, &limits));
        assert!(got.contains("bytes decoded"), "{got}");
        let limits = DemoLimits {
            max_archive_bytes: 100,
            ..DemoLimits::default()
        };
        let got = code(read_zip(&zip_of(&refs), RULES, &limits));
        assert!(got.contains("bytes per demo"), "{got}");
    }

    #[test]
    fn frames_of_another_size_and_bad_timestamps_are_refused() {
        let got = code(read_zip(
            &zip_of(&[("0001.png", &png(9, 6, 1))]),
            RULES,
            &DemoLimits::default(),
        ));
        assert!(got.starts_with("wrong_size"), "{got}");
        let f = png(8, 6, 1);
        for csv in [&b"0.0\n"[..], b"0.1\n0.0\n", b"0\nnan\n", b"0\nx\n"] {
            let got = code(read_zip(
                &zip_of(&[("0001.png", &f), ("0002.png", &f), ("timestamps.csv", csv)]),
                RULES,
                &DemoLimits::default(),
            ));
            assert!(got.starts_with("bad_timestamps"), "{csv:?}: {got}");
        }
        let mut cut = f.clone();
        cut.truncate(cut.len() - 12);
        let got = code(read_zip(
            &zip_of(&[("0001.png", &cut)]),
            RULES,
            &DemoLimits::default(),
        ));
        assert!(got.starts_with("bad_image"), "{got}");
    }

    #[test]
    fn an_animated_gif_gives_png_frames_with_times_from_its_delays() {
        use image::codecs::gif::GifEncoder;
        let mut bytes = Vec::new();
        {
            let mut enc = GifEncoder::new(&mut bytes);
            for shade in [10u8, 120, 250] {
                let buf = image::RgbaImage::from_pixel(8, 6, image::Rgba([shade, shade, 0, 255]));
                let frame =
                    image::Frame::from_parts(buf, 0, 0, image::Delay::from_numer_denom_ms(50, 1));
                enc.encode_frame(frame).expect("frame");
            }
        }
        let d = read_gif(&bytes, RULES, &DemoLimits::default()).expect("gif");
        assert_eq!(d.frames.len(), 3);
        let times: Vec<Option<f64>> = d.frames.iter().map(|f| f.time_s).collect();
        assert_eq!(times, vec![Some(0.0), Some(0.05), Some(0.1)]);
        assert!(d.frames.iter().all(|f| f.bytes.starts_with(b"\x89PNG")));
        let limits = DemoLimits {
            max_frames: 2,
            ..DemoLimits::default()
        };
        assert!(matches!(
            read_gif(&bytes, RULES, &limits),
            Err(DemoRejection::TooLarge(_))
        ));
        let small = FrameRules { width: 7, ..RULES };
        assert!(matches!(
            read_gif(&bytes, small, &DemoLimits::default()),
            Err(DemoRejection::Invalid {
                code: "wrong_size",
                ..
            })
        ));
    }
}
