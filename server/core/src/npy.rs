//! The NPY array format (NumPy's `.npy`, format versions 1.0, 2.0 and 3.0), for the float arrays
//! goalsmith exchanges: little-endian `<f2`, `<f4` and `<f8`, C order.
//!
//! Reading is defensive because bodies come from the network: the header's claims (element
//! count × item size) are checked for overflow, against a caller's byte limit and against the
//! bytes actually present *before* anything is allocated, so a header claiming 2 GB in a small
//! body fails at once. Fortran-order arrays and big-endian data are refused with a clear error
//! rather than converted.
//!
//! Writing produces exactly what `numpy.save` writes for a C-order little-endian array
//! (version 1.0 header, padded with spaces so the data starts at a multiple of 64 bytes).

use half::f16;
use std::borrow::Cow;
use thiserror::Error;

/// The six magic bytes every NPY file starts with.
pub const MAGIC: &[u8; 6] = b"\x93NUMPY";
/// Longest header (the dictionary text) accepted, in bytes.
pub const MAX_HEADER_LEN: usize = 65_536;
/// Most dimensions accepted.
pub const MAX_NDIM: usize = 32;
/// Header data (the dict text) starts here and is padded so data starts on this alignment.
const ARRAY_ALIGN: usize = 64;
/// numpy leaves room for this many digits of the first axis so files can grow in place.
const GROWTH_AXIS_MAX_DIGITS: usize = 21;

/// Why bytes are not an acceptable NPY array.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum NpyError {
    /// The bytes do not start with the NPY magic string.
    #[error("not an NPY file (it must start with \\x93NUMPY)")]
    NotNpy,
    /// A format version other than 1.0, 2.0 or 3.0.
    #[error("NPY format version {major}.{minor} is not supported (use 1.0, 2.0 or 3.0)")]
    UnsupportedVersion {
        /// Major version byte.
        major: u8,
        /// Minor version byte.
        minor: u8,
    },
    /// The file ends inside the preamble or header.
    #[error("the NPY header is cut short: {needed} bytes needed, {got} present")]
    TruncatedHeader {
        /// Bytes needed to read the header.
        needed: usize,
        /// Bytes present.
        got: usize,
    },
    /// The header is longer than [`MAX_HEADER_LEN`].
    #[error("the NPY header is {len} bytes long; at most {MAX_HEADER_LEN} are accepted")]
    HeaderTooLong {
        /// Header length claimed.
        len: usize,
    },
    /// The header dictionary cannot be parsed.
    #[error("malformed NPY header: {0}")]
    BadHeader(String),
    /// A dtype other than `<f2`, `<f4`, `<f8`.
    #[error(
        "dtype {0:?} is not supported; send little-endian float16, float32 or float64 ('<f2', '<f4', '<f8')"
    )]
    UnsupportedDtype(String),
    /// Big-endian data.
    #[error("dtype {0:?} is big-endian; send little-endian data (e.g. numpy's arr.astype('<f4'))")]
    BigEndian(String),
    /// Fortran (column-major) order.
    #[error(
        "Fortran-order arrays are not accepted; send a C-order array (numpy.ascontiguousarray)"
    )]
    FortranOrder,
    /// More dimensions than [`MAX_NDIM`].
    #[error("the array has {0} dimensions; at most {MAX_NDIM} are accepted")]
    TooManyDimensions(usize),
    /// The shape's byte size does not fit in memory addresses or exceeds the caller's limit.
    #[error("the array claims {claimed} of data; at most {max_bytes} bytes are accepted")]
    TooLarge {
        /// Claimed size, in words ("more than 2^64 bytes" on overflow).
        claimed: String,
        /// The limit.
        max_bytes: usize,
    },
    /// The data is shorter or longer than the header says.
    #[error("the header describes {expected} bytes of data but {got} are present")]
    DataLength {
        /// Bytes the shape and dtype call for.
        expected: usize,
        /// Bytes present after the header.
        got: usize,
    },
    /// The array of a different dtype was requested.
    #[error("expected {expected} data, the array holds {found}")]
    WrongDtype {
        /// What the caller wanted.
        expected: &'static str,
        /// What the header says.
        found: &'static str,
    },
    /// For writing: the shape's element count differs from the data's.
    #[error("the shape holds {shape_elements} elements but {data_elements} were given")]
    ShapeMismatch {
        /// Product of the shape.
        shape_elements: usize,
        /// Number of values.
        data_elements: usize,
    },
}

/// Element type of an array.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dtype {
    /// IEEE binary16, `<f2`.
    F16,
    /// IEEE binary32, `<f4`.
    F32,
    /// IEEE binary64, `<f8`.
    F64,
}

impl Dtype {
    /// Bytes per element.
    pub fn itemsize(self) -> usize {
        match self {
            Dtype::F16 => 2,
            Dtype::F32 => 4,
            Dtype::F64 => 8,
        }
    }
    /// numpy's `descr` string.
    pub fn descr(self) -> &'static str {
        match self {
            Dtype::F16 => "<f2",
            Dtype::F32 => "<f4",
            Dtype::F64 => "<f8",
        }
    }
    /// A short name: `float16`, `float32`, `float64`.
    pub fn name(self) -> &'static str {
        match self {
            Dtype::F16 => "float16",
            Dtype::F32 => "float32",
            Dtype::F64 => "float64",
        }
    }
}

/// A checked NPY header: the data it describes is present in full and within the limit.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NpyHeader {
    /// Format version (major, minor).
    pub version: (u8, u8),
    /// Element type.
    pub dtype: Dtype,
    /// Array shape (empty for a scalar), C order.
    pub shape: Vec<usize>,
    /// Offset of the first data byte.
    pub data_offset: usize,
    /// Number of data bytes (element count × item size).
    pub data_len: usize,
}

impl NpyHeader {
    /// Number of elements (the product of the shape; 1 for a scalar).
    pub fn element_count(&self) -> usize {
        self.data_len / self.dtype.itemsize()
    }
}

/// Parses and checks the header of an NPY file held in `bytes`, refusing arrays whose data is
/// larger than `max_bytes`, and checking the data that follows has exactly the claimed length.
/// Nothing proportional to the claimed size is allocated.
pub fn parse_header(bytes: &[u8], max_bytes: usize) -> Result<NpyHeader, NpyError> {
    let header = parse_header_prefix(bytes, max_bytes)?;
    let present = bytes.len() - header.data_offset;
    if present != header.data_len {
        return Err(NpyError::DataLength {
            expected: header.data_len,
            got: present,
        });
    }
    Ok(header)
}

/// [`parse_header`] for the start of a file whose data is still arriving: `bytes` must hold
/// the whole header (the magic, the version, the length and the dictionary), and may hold any
/// part of the data after it. The caller checks the data length once all of it has arrived.
/// Nothing proportional to the claimed size is allocated.
pub fn parse_header_prefix(bytes: &[u8], max_bytes: usize) -> Result<NpyHeader, NpyError> {
    if bytes.len() < 8 {
        return Err(if bytes.starts_with(&MAGIC[..bytes.len().min(6)]) {
            NpyError::TruncatedHeader {
                needed: 10,
                got: bytes.len(),
            }
        } else {
            NpyError::NotNpy
        });
    }
    if &bytes[..6] != MAGIC {
        return Err(NpyError::NotNpy);
    }
    let (major, minor) = (bytes[6], bytes[7]);
    let len_size = match (major, minor) {
        (1, 0) => 2,
        (2, 0) | (3, 0) => 4,
        _ => return Err(NpyError::UnsupportedVersion { major, minor }),
    };
    let prefix = 8 + len_size;
    if bytes.len() < prefix {
        return Err(NpyError::TruncatedHeader {
            needed: prefix,
            got: bytes.len(),
        });
    }
    let header_len = if len_size == 2 {
        usize::from(u16::from_le_bytes([bytes[8], bytes[9]]))
    } else {
        let n = u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]);
        usize::try_from(n).map_err(|_| NpyError::HeaderTooLong { len: usize::MAX })?
    };
    if header_len > MAX_HEADER_LEN {
        return Err(NpyError::HeaderTooLong { len: header_len });
    }
    let data_offset = prefix + header_len;
    if bytes.len() < data_offset {
        return Err(NpyError::TruncatedHeader {
            needed: data_offset,
            got: bytes.len(),
        });
    }
    let text = std::str::from_utf8(&bytes[prefix..data_offset])
        .map_err(|_| NpyError::BadHeader("the header is not valid text".into()))?;
    if (major, minor) != (3, 0) && !text.is_ascii() {
        return Err(NpyError::BadHeader(
            "the header of a version 1.0/2.0 file must be ASCII".into(),
        ));
    }
    let dict = parse_dict(text)?;
    let dtype = match dict.descr.as_str() {
        "<f2" => Dtype::F16,
        "<f4" => Dtype::F32,
        "<f8" => Dtype::F64,
        d if d.starts_with('>') => return Err(NpyError::BigEndian(d.to_string())),
        d => return Err(NpyError::UnsupportedDtype(d.to_string())),
    };
    if dict.fortran_order {
        return Err(NpyError::FortranOrder);
    }
    let too_large = |claimed: String| NpyError::TooLarge { claimed, max_bytes };
    let mut count: usize = 1;
    for &dim in &dict.shape {
        count = count
            .checked_mul(dim)
            .ok_or_else(|| too_large("more than 2^64 bytes".into()))?;
    }
    let data_len = count
        .checked_mul(dtype.itemsize())
        .ok_or_else(|| too_large("more than 2^64 bytes".into()))?;
    if data_len > max_bytes {
        return Err(too_large(format!("{data_len} bytes")));
    }
    Ok(NpyHeader {
        version: (major, minor),
        dtype,
        shape: dict.shape,
        data_offset,
        data_len,
    })
}

/// The values of an array: borrowed from the input when its alignment allows, else copied.
#[derive(Debug, Clone, PartialEq)]
pub enum NpyData<'a> {
    /// float16 values.
    F16(Cow<'a, [f16]>),
    /// float32 values.
    F32(Cow<'a, [f32]>),
    /// float64 values.
    F64(Cow<'a, [f64]>),
}

/// A parsed array: its header and its values in C order.
#[derive(Debug, Clone, PartialEq)]
pub struct NpyArray<'a> {
    /// The checked header.
    pub header: NpyHeader,
    /// The values.
    pub data: NpyData<'a>,
}

impl<'a> NpyArray<'a> {
    /// The float32 values, or [`NpyError::WrongDtype`].
    pub fn as_f32(&self) -> Result<&[f32], NpyError> {
        match &self.data {
            NpyData::F32(v) => Ok(v),
            _ => Err(self.wrong("float32")),
        }
    }
    /// The float16 values, or [`NpyError::WrongDtype`].
    pub fn as_f16(&self) -> Result<&[f16], NpyError> {
        match &self.data {
            NpyData::F16(v) => Ok(v),
            _ => Err(self.wrong("float16")),
        }
    }
    /// The float64 values, or [`NpyError::WrongDtype`].
    pub fn as_f64(&self) -> Result<&[f64], NpyError> {
        match &self.data {
            NpyData::F64(v) => Ok(v),
            _ => Err(self.wrong("float64")),
        }
    }
    fn wrong(&self, expected: &'static str) -> NpyError {
        NpyError::WrongDtype {
            expected,
            found: self.header.dtype.name(),
        }
    }
}

/// Parses a whole NPY file (see [`parse_header`] for the checks) and gives its values.
pub fn read(bytes: &[u8], max_bytes: usize) -> Result<NpyArray<'_>, NpyError> {
    let header = parse_header(bytes, max_bytes)?;
    let raw = &bytes[header.data_offset..header.data_offset + header.data_len];
    let data = data(header.dtype, raw)?;
    Ok(NpyArray { header, data })
}

/// Marker for the plain float types whose every bit pattern is a valid value.
trait PlainFloat: Copy {}
impl PlainFloat for f16 {}
impl PlainFloat for f32 {}
impl PlainFloat for f64 {}

/// The values held in `raw`, little-endian data of `dtype` (a whole number of items): borrowed
/// when the alignment allows, else decoded into a copy. For data that arrives in pieces, after
/// [`parse_header_prefix`].
pub fn data(dtype: Dtype, raw: &[u8]) -> Result<NpyData<'_>, NpyError> {
    if !raw.len().is_multiple_of(dtype.itemsize()) {
        return Err(NpyError::DataLength {
            expected: raw.len() - raw.len() % dtype.itemsize(),
            got: raw.len(),
        });
    }
    Ok(match dtype {
        Dtype::F16 => NpyData::F16(view_or_copy(raw, |b| {
            f16::from_bits(u16::from_le_bytes([b[0], b[1]]))
        })),
        Dtype::F32 => NpyData::F32(view_or_copy(raw, |b| {
            f32::from_le_bytes([b[0], b[1], b[2], b[3]])
        })),
        Dtype::F64 => NpyData::F64(view_or_copy(raw, |b| {
            f64::from_le_bytes([b[0], b[1], b[2], b[3], b[4], b[5], b[6], b[7]])
        })),
    })
}

/// Reinterprets little-endian bytes as `T` without copying when the bytes are aligned for `T`
/// on a little-endian machine; otherwise decodes a copy.
fn view_or_copy<T: PlainFloat>(raw: &[u8], decode: impl Fn(&[u8]) -> T) -> Cow<'_, [T]> {
    let size = std::mem::size_of::<T>();
    debug_assert_eq!(raw.len() % size, 0);
    if cfg!(target_endian = "little") && raw.as_ptr().align_offset(std::mem::align_of::<T>()) == 0 {
        // SAFETY: the pointer is aligned for T (checked above), the range covers exactly
        // raw.len() / size values of T inside `raw`, which outlives the returned slice, and T is
        // f16 (repr(transparent) over u16), f32 or f64, for which every bit pattern is a valid
        // value; on a little-endian machine the in-memory bytes are the little-endian encoding.
        let view =
            unsafe { std::slice::from_raw_parts(raw.as_ptr().cast::<T>(), raw.len() / size) };
        Cow::Borrowed(view)
    } else {
        Cow::Owned(raw.chunks_exact(size).map(decode).collect())
    }
}

/// A C-order little-endian float32 array as `numpy.save` writes it (version 1.0 header).
pub fn write_f32(shape: &[usize], data: &[f32]) -> Result<Vec<u8>, NpyError> {
    let mut out = header_bytes(Dtype::F32, shape, data.len())?;
    out.reserve(data.len() * 4);
    for v in data {
        out.extend_from_slice(&v.to_le_bytes());
    }
    Ok(out)
}

/// The header of a C-order little-endian float32 array of `shape`, for a writer that appends
/// the data itself (plane by plane, say) rather than holding it all as `f32` first.
pub fn f32_header(shape: &[usize]) -> Result<Vec<u8>, NpyError> {
    let elements = shape.iter().product();
    header_bytes(Dtype::F32, shape, elements)
}

/// A C-order little-endian float16 array as `numpy.save` writes it (version 1.0 header).
pub fn write_f16(shape: &[usize], data: &[f16]) -> Result<Vec<u8>, NpyError> {
    let mut out = header_bytes(Dtype::F16, shape, data.len())?;
    out.reserve(data.len() * 2);
    for v in data {
        out.extend_from_slice(&v.to_bits().to_le_bytes());
    }
    Ok(out)
}

/// Magic, version, header length and the padded header dict, as numpy 2.x writes them.
fn header_bytes(dtype: Dtype, shape: &[usize], elements: usize) -> Result<Vec<u8>, NpyError> {
    if shape.len() > MAX_NDIM {
        return Err(NpyError::TooManyDimensions(shape.len()));
    }
    let shape_elements = shape
        .iter()
        .try_fold(1usize, |acc, &d| acc.checked_mul(d))
        .unwrap_or(usize::MAX);
    if shape_elements != elements {
        return Err(NpyError::ShapeMismatch {
            shape_elements,
            data_elements: elements,
        });
    }
    // Python's repr of a tuple: (), (3,), (2, 3).
    let dims: Vec<String> = shape.iter().map(|d| d.to_string()).collect();
    let shape_repr = match dims.len() {
        1 => format!("({},)", dims[0]),
        _ => format!("({})", dims.join(", ")),
    };
    let mut dict = format!(
        "{{'descr': '{}', 'fortran_order': False, 'shape': {shape_repr}, }}",
        dtype.descr()
    );
    if let Some(first) = dims.first() {
        dict.push_str(&" ".repeat(GROWTH_AXIS_MAX_DIGITS.saturating_sub(first.len())));
    }
    // numpy: hlen = len(dict) + 1 (the newline); pad = ALIGN − (10 + hlen) % ALIGN, never 0.
    let hlen = dict.len() + 1;
    let pad = ARRAY_ALIGN - (MAGIC.len() + 2 + 2 + hlen) % ARRAY_ALIGN;
    let total = hlen + pad;
    let (version, len_bytes): ([u8; 2], Vec<u8>) = match u16::try_from(total) {
        Ok(n) => ([1, 0], n.to_le_bytes().to_vec()),
        // Unreachable with MAX_NDIM dimensions, but keep the file valid if it ever happens.
        Err(_) => ([2, 0], (total as u32).to_le_bytes().to_vec()),
    };
    let mut out = Vec::with_capacity(10 + total);
    out.extend_from_slice(MAGIC);
    out.extend_from_slice(&version);
    out.extend_from_slice(&len_bytes);
    out.extend_from_slice(dict.as_bytes());
    out.resize(out.len() + pad, b' ');
    out.push(b'\n');
    Ok(out)
}

/// The three fields of the header dictionary.
struct HeaderDict {
    descr: String,
    fortran_order: bool,
    shape: Vec<usize>,
}

enum Literal {
    Str(String),
    Bool(bool),
    Tuple(Vec<usize>),
}

/// Parses the Python dict literal of an NPY header, e.g.
/// `{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }` followed by padding.
fn parse_dict(text: &str) -> Result<HeaderDict, NpyError> {
    let bad = |m: &str| NpyError::BadHeader(m.to_string());
    let mut p = Parser {
        s: text.as_bytes(),
        i: 0,
    };
    p.ws();
    p.expect(b'{')
        .map_err(|_| bad("the header must be a dictionary '{...}'"))?;
    let (mut descr, mut fortran, mut shape) = (None, None, None);
    loop {
        p.ws();
        if p.eat(b'}') {
            break;
        }
        let key = match p.literal()? {
            Literal::Str(k) => k,
            _ => return Err(bad("dictionary keys must be strings")),
        };
        p.ws();
        p.expect(b':')
            .map_err(|_| bad("expected ':' after a key"))?;
        p.ws();
        let value = p.literal()?;
        let slot_taken = match (key.as_str(), value) {
            ("descr", Literal::Str(v)) => descr.replace(v).is_some(),
            ("fortran_order", Literal::Bool(v)) => fortran.replace(v).is_some(),
            ("shape", Literal::Tuple(v)) => shape.replace(v).is_some(),
            ("descr" | "fortran_order" | "shape", _) => {
                return Err(NpyError::BadHeader(format!("'{key}' has the wrong type")));
            }
            _ => return Err(NpyError::BadHeader(format!("unknown key '{key}'"))),
        };
        if slot_taken {
            return Err(NpyError::BadHeader(format!("'{key}' appears twice")));
        }
        p.ws();
        if !p.eat(b',') {
            p.ws();
            p.expect(b'}').map_err(|_| bad("expected ',' or '}'"))?;
            break;
        }
    }
    p.ws();
    if p.i != p.s.len() {
        return Err(bad("unexpected text after the dictionary"));
    }
    let missing = |k: &str| NpyError::BadHeader(format!("the key '{k}' is missing"));
    let shape: Vec<usize> = shape.ok_or_else(|| missing("shape"))?;
    if shape.len() > MAX_NDIM {
        return Err(NpyError::TooManyDimensions(shape.len()));
    }
    Ok(HeaderDict {
        descr: descr.ok_or_else(|| missing("descr"))?,
        fortran_order: fortran.ok_or_else(|| missing("fortran_order"))?,
        shape,
    })
}

struct Parser<'a> {
    s: &'a [u8],
    i: usize,
}

impl Parser<'_> {
    fn ws(&mut self) {
        while self.i < self.s.len() && matches!(self.s[self.i], b' ' | b'\t' | b'\n' | b'\r') {
            self.i += 1;
        }
    }
    fn eat(&mut self, c: u8) -> bool {
        if self.s.get(self.i) == Some(&c) {
            self.i += 1;
            true
        } else {
            false
        }
    }
    fn expect(&mut self, c: u8) -> Result<(), ()> {
        if self.eat(c) { Ok(()) } else { Err(()) }
    }
    fn literal(&mut self) -> Result<Literal, NpyError> {
        let bad = |m: &str| NpyError::BadHeader(m.to_string());
        match self.s.get(self.i) {
            Some(&q @ (b'\'' | b'"')) => {
                self.i += 1;
                let start = self.i;
                while self.i < self.s.len() && self.s[self.i] != q {
                    if self.s[self.i] == b'\\' {
                        return Err(bad("escapes in header strings are not supported"));
                    }
                    self.i += 1;
                }
                if self.i == self.s.len() {
                    return Err(bad("unterminated string"));
                }
                let v = String::from_utf8_lossy(&self.s[start..self.i]).into_owned();
                self.i += 1;
                Ok(Literal::Str(v))
            }
            Some(b'T') if self.s[self.i..].starts_with(b"True") => {
                self.i += 4;
                Ok(Literal::Bool(true))
            }
            Some(b'F') if self.s[self.i..].starts_with(b"False") => {
                self.i += 5;
                Ok(Literal::Bool(false))
            }
            Some(b'(') => {
                self.i += 1;
                let mut dims = Vec::new();
                loop {
                    self.ws();
                    if self.eat(b')') {
                        break;
                    }
                    if dims.len() >= MAX_NDIM {
                        return Err(NpyError::TooManyDimensions(dims.len() + 1));
                    }
                    dims.push(self.integer()?);
                    self.ws();
                    if self.eat(b',') {
                        continue;
                    }
                    self.ws();
                    if self.eat(b')') {
                        // Python needs a comma in a 1-tuple: (3) is just the number 3.
                        if dims.len() == 1 {
                            return Err(bad("a one-dimensional shape must be written (n,)"));
                        }
                        break;
                    }
                    return Err(bad("expected ',' or ')' in the shape"));
                }
                Ok(Literal::Tuple(dims))
            }
            _ => Err(bad("expected a string, True, False or a shape tuple")),
        }
    }
    fn integer(&mut self) -> Result<usize, NpyError> {
        let start = self.i;
        let mut v: usize = 0;
        while let Some(&c) = self.s.get(self.i) {
            if !c.is_ascii_digit() {
                break;
            }
            v = v
                .checked_mul(10)
                .and_then(|v| v.checked_add(usize::from(c - b'0')))
                .ok_or_else(|| NpyError::BadHeader("a dimension is too large".into()))?;
            self.i += 1;
        }
        if self.i == start {
            return Err(NpyError::BadHeader(
                "dimensions must be non-negative integers".into(),
            ));
        }
        Ok(v)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::Value;

    /// Byte strings written by numpy.save / numpy.lib.format.write_array; see
    /// tests/reference/gen_cost.py (`npy` section).
    const REFERENCE: &str = include_str!(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../tests/reference/gen_cost.json"
    ));

    fn unhex(s: &str) -> Vec<u8> {
        (0..s.len())
            .step_by(2)
            .map(|i| u8::from_str_radix(&s[i..i + 2], 16).unwrap())
            .collect()
    }

    fn vectors() -> Vec<Value> {
        let doc: Value = serde_json::from_str(REFERENCE).unwrap();
        doc["npy"].as_array().unwrap().clone()
    }

    #[test]
    fn reads_and_writes_what_numpy_writes() {
        let mut seen = 0;
        for v in vectors() {
            let name = v["name"].as_str().unwrap();
            let bytes = unhex(v["hex"].as_str().unwrap());
            let shape: Vec<usize> = v["shape"]
                .as_array()
                .unwrap()
                .iter()
                .map(|d| d.as_u64().unwrap() as usize)
                .collect();
            let values: Vec<f64> = v["values"]
                .as_array()
                .unwrap()
                .iter()
                .map(|x| x.as_f64().unwrap())
                .collect();
            let result = read(&bytes, 1 << 20);
            match name {
                "fortran" => assert_eq!(result.unwrap_err(), NpyError::FortranOrder),
                "big_endian" => {
                    assert_eq!(result.unwrap_err(), NpyError::BigEndian(">f4".into()))
                }
                "int32" => {
                    assert_eq!(
                        result.unwrap_err(),
                        NpyError::UnsupportedDtype("<i4".into())
                    )
                }
                _ => {
                    let arr = result.unwrap_or_else(|e| panic!("{name}: {e}"));
                    assert_eq!(arr.header.shape, shape, "{name}");
                    let got: Vec<f64> = match &arr.data {
                        NpyData::F16(d) => d.iter().map(|x| x.to_f64()).collect(),
                        NpyData::F32(d) => d.iter().map(|&x| f64::from(x)).collect(),
                        NpyData::F64(d) => d.to_vec(),
                    };
                    assert_eq!(got, values, "{name}");
                    if v["numpy_save"].as_bool().unwrap() {
                        let written = match &arr.data {
                            NpyData::F32(d) => write_f32(&shape, d).unwrap(),
                            NpyData::F16(d) => write_f16(&shape, d).unwrap(),
                            NpyData::F64(_) => bytes.clone(),
                        };
                        assert_eq!(written, bytes, "{name}: byte-for-byte as numpy.save");
                        assert_eq!(arr.header.data_offset % 64, 0);
                    }
                    seen += 1;
                }
            }
        }
        assert_eq!(seen, 10);
    }

    #[test]
    fn huge_claims_fail_before_allocating() {
        // A header claiming 2 GB (and one claiming 2^64 elements) followed by a few bytes.
        for shape in ["(536870912,)", "(4294967296, 4294967296, 16)"] {
            let mut bytes = header_with(&format!(
                "{{'descr': '<f4', 'fortran_order': False, 'shape': {shape}, }}"
            ));
            bytes.extend_from_slice(&[0; 16]);
            let err = parse_header(&bytes, usize::MAX).unwrap_err();
            assert!(
                matches!(
                    err,
                    NpyError::DataLength { got: 16, .. } | NpyError::TooLarge { .. }
                ),
                "{err}"
            );
            assert!(matches!(
                parse_header(&bytes, 1 << 20).unwrap_err(),
                NpyError::TooLarge { .. }
            ));
        }
        let mut ok = header_with("{'descr': '<f4', 'fortran_order': False, 'shape': (2,), }");
        ok.extend_from_slice(&[0; 8]);
        assert!(parse_header(&ok, 8).is_ok());
        assert!(matches!(
            parse_header(&ok, 7).unwrap_err(),
            NpyError::TooLarge { .. }
        ));
        ok.push(0);
        assert_eq!(
            parse_header(&ok, 100).unwrap_err(),
            NpyError::DataLength {
                expected: 8,
                got: 9
            }
        );
    }

    fn header_with(dict: &str) -> Vec<u8> {
        let mut out = MAGIC.to_vec();
        out.extend_from_slice(&[1, 0]);
        out.extend_from_slice(&(dict.len() as u16 + 1).to_le_bytes());
        out.extend_from_slice(dict.as_bytes());
        out.push(b'\n');
        out
    }

    #[test]
    fn malformed_headers_get_clear_errors() {
        let cases: &[(&[u8], &str)] = &[
            (b"", "truncated"),
            (b"\x93NUM", "truncated"),
            (b"PK\x03\x04zzzzzzzz", "not npy"),
            (b"\x93NUMPY\x04\x00\x10\x00", "version"),
            (b"\x93NUMPY\x01\x00\xff\x00{}", "truncated"),
        ];
        for (bytes, what) in cases {
            let err = parse_header(bytes, 1000).unwrap_err();
            let ok = match *what {
                "truncated" => matches!(err, NpyError::TruncatedHeader { .. }),
                "not npy" => err == NpyError::NotNpy,
                _ => matches!(err, NpyError::UnsupportedVersion { major: 4, minor: 0 }),
            };
            assert!(ok, "{what}: {err}");
        }
        let bad_dicts = [
            "{'descr': '<f4', 'fortran_order': False}",
            "{'descr': '<f4', 'fortran_order': False, 'shape': (3), }",
            "{'descr': '<f4', 'fortran_order': False, 'shape': (-3,), }",
            "{'descr': '<f4', 'fortran_order': 0, 'shape': (3,), }",
            "{'descr': '<f4', 'descr': '<f4', 'fortran_order': False, 'shape': (3,), }",
            "{'descr': '<f4', 'fortran_order': False, 'shape': (3,), 'extra': True}",
            "{'descr': '<f4', 'fortran_order': False, 'shape': (3,), } trailing",
            "['descr']",
            "{'descr': '<f4, 'fortran_order': False, 'shape': (3,)}",
            "{'descr': '<f4', 'fortran_order': False, 'shape': (99999999999999999999999,), }",
        ];
        for d in bad_dicts {
            let mut bytes = header_with(d);
            bytes.extend_from_slice(&[0; 12]);
            assert!(
                matches!(parse_header(&bytes, 1000), Err(NpyError::BadHeader(_))),
                "{d}: {:?}",
                parse_header(&bytes, 1000)
            );
        }
        let too_many = format!(
            "{{'descr': '<f4', 'fortran_order': False, 'shape': ({}), }}",
            "1, ".repeat(40)
        );
        assert_eq!(
            parse_header(&header_with(&too_many), 1000).unwrap_err(),
            NpyError::TooManyDimensions(33)
        );
        // Key order and quotes are free; spaces are allowed.
        let mut loose =
            header_with("{ \"shape\" : ( 1 , 2 ) , 'fortran_order':False,'descr':'<f2' }");
        loose.extend_from_slice(&[0; 4]);
        let h = parse_header(&loose, 1000).unwrap();
        assert_eq!((h.dtype, h.shape.clone()), (Dtype::F16, vec![1, 2]));
        assert_eq!(h.element_count(), 2);
    }

    #[test]
    fn unaligned_input_is_copied_and_views_are_borrowed() {
        let bytes = write_f32(&[3], &[1.0, 2.5, -4.0]).unwrap();
        // Shift the whole file by one byte in a fresh buffer: data no longer 4-aligned.
        let mut shifted = vec![0u8; bytes.len() + 1];
        shifted[1..].copy_from_slice(&bytes);
        for buf in [&bytes[..], &shifted[1..]] {
            let arr = read(buf, 100).unwrap();
            assert_eq!(arr.as_f32().unwrap(), &[1.0, 2.5, -4.0]);
            assert!(matches!(
                arr.as_f16(),
                Err(NpyError::WrongDtype {
                    expected: "float16",
                    found: "float32"
                })
            ));
            let aligned = buf.as_ptr().wrapping_add(64).align_offset(4) == 0;
            assert_eq!(matches!(arr.data, NpyData::F32(Cow::Borrowed(_))), aligned);
        }
        assert_eq!(
            write_f32(&[2, 2], &[0.0; 3]).unwrap_err(),
            NpyError::ShapeMismatch {
                shape_elements: 4,
                data_elements: 3
            }
        );
        let h = write_f16(&[1, 2], &[f16::ONE, f16::NEG_ONE]).unwrap();
        assert_eq!(
            read(&h, 4).unwrap().as_f16().unwrap(),
            &[f16::ONE, f16::NEG_ONE]
        );
    }
}
