//! JSON parsing as the contract says it: objects where the types have fields.
//!
//! serde's derived `Deserialize` for a struct accepts a JSON array in place of an object and
//! takes the fields by position, so without this module `{"items": [["…id…", 1]]}` would be a
//! goal set and `["point", null, [1, 2], [3, 4]]` a point term. The contract says objects, and a
//! positional body breaks silently the day a field is added or reordered.
//!
//! [`from_slice`] parses like `serde_json::from_slice` with `serde_path_to_error` (one JSON
//! value, nothing but whitespace after it, unknown and duplicate fields refused by the types,
//! numbers exactly as serde_json reads them, the path of the offending value in the error) and
//! in addition refuses an array wherever a struct is expected, at any depth:
//! `terms[0]: expected an object, got an array at line 1 column 40`.
//!
//! How: the JSON deserializer is wrapped in [`Strict`], which hands every request of the type
//! on unchanged (the same `deserialize_*` hint, so serde_json decides as it always does) but
//! with the type's visitor wrapped, and which wraps the nested accessors (sequence, map, enum,
//! variant, `Some`, newtype) in the same way, so the check reaches every depth. A struct asks
//! for `deserialize_struct` (and a struct variant for `struct_variant`); the wrapped visitor
//! refuses `visit_seq` there. The wrapper streams: no `serde_json::Value` is built, so duplicate
//! fields stay refused (a `Value` would keep the last one), errors keep their line and column,
//! and a body costs no more memory than before.
//!
//! Internally tagged enums (`TermDocument`, `#[serde(tag = "kind")]`) do not ask for a struct:
//! serde reads them with `deserialize_any` into its own buffer and takes the tag from the first
//! element when it is given an array. The wrapper recognises that visitor by what it says it
//! expects (`internally tagged enum …`, the text serde puts in its error messages) and refuses
//! the array there too. Adjacently tagged enums ask for a struct; externally tagged ones go
//! through the wrapped variant access.
//!
//! Not reached: what serde deserialises from its own buffer. The fields *inside* an
//! internally tagged or untagged enum's variant, and the fields of a `#[serde(flatten)]`
//! struct, are read from that buffer, not from JSON, so a struct nested there would take an
//! array again. No type of the contract has such a struct: the variants of `TermDocument` hold
//! numbers, strings and arrays of coordinates, and no request type is untagged or flattened.
//! A new type that nests a struct there needs its own check.

use serde::de::{
    self, DeserializeOwned, DeserializeSeed, Deserializer, EnumAccess, Expected, MapAccess,
    SeqAccess, VariantAccess, Visitor,
};
use std::fmt;

/// The message of the refusal, after the path.
pub const ARRAY_FOR_OBJECT: &str = "expected an object, got an array";

/// Why a body does not parse, with the path of the offending value.
#[derive(Debug)]
pub struct Error {
    path: Option<String>,
    inner: serde_json::Error,
    trailing: bool,
}

impl Error {
    /// The JSON path of the offending value (`terms[2].target`); `None` for the body as a whole.
    pub fn path(&self) -> Option<&str> {
        self.path.as_deref()
    }

    /// serde_json's error, with its line and column.
    pub fn inner(&self) -> &serde_json::Error {
        &self.inner
    }

    /// Syntax, end of input, or data (a value of the wrong type or shape).
    pub fn classify(&self) -> serde_json::error::Category {
        self.inner.classify()
    }

    /// True when the JSON value was fine but more than whitespace follows it.
    pub fn is_trailing(&self) -> bool {
        self.trailing
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.trailing {
            return write!(
                f,
                "more than whitespace after the JSON value: {}",
                self.inner
            );
        }
        if let Some(path) = &self.path {
            write!(f, "{path}: ")?;
        }
        write!(f, "{}", self.inner)
    }
}

impl std::error::Error for Error {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        Some(&self.inner)
    }
}

impl From<serde_path_to_error::Error<serde_json::Error>> for Error {
    fn from(e: serde_path_to_error::Error<serde_json::Error>) -> Self {
        // serde_path_to_error writes the root as "." (and "?" for a part it could not name).
        let path = e.path().to_string();
        Error {
            path: (!path.is_empty() && path != ".").then_some(path),
            inner: e.into_inner(),
            trailing: false,
        }
    }
}

/// Parses one JSON value of type `T` from `bytes`, refusing arrays where `T` (or anything in
/// it) expects an object; see the module documentation.
pub fn from_slice<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, Error> {
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let value: T = serde_path_to_error::deserialize(Strict(&mut de))?;
    de.end().map_err(|inner| Error {
        path: None,
        inner,
        trailing: true,
    })?;
    Ok(value)
}

/// [`from_slice`] for a value already parsed (a field kept as `serde_json::Value` and typed
/// later).
pub fn from_value<T: DeserializeOwned>(value: serde_json::Value) -> Result<T, Error> {
    Ok(serde_path_to_error::deserialize(Strict(value))?)
}

/// A deserializer that refuses an array where a struct is expected, and passes everything else
/// to the one it wraps unchanged.
pub struct Strict<D>(pub D);

/// Whether a visitor describes itself as wanting a struct or an internally tagged enum, both of
/// which serde would otherwise fill from an array by position: the visitor's `expecting` text
/// (the one serde puts in its error messages) starts with what serde_derive writes for them.
/// Only the first bytes are formatted, into a buffer on the stack.
fn wants_object<'de, V: Visitor<'de>>(visitor: &V) -> bool {
    const PREFIXES: [&str; 2] = ["struct ", "internally tagged enum "];
    struct Head {
        buf: [u8; 32],
        len: usize,
    }
    impl fmt::Write for Head {
        fn write_str(&mut self, s: &str) -> fmt::Result {
            let n = s.len().min(self.buf.len() - self.len);
            self.buf[self.len..self.len + n].copy_from_slice(&s.as_bytes()[..n]);
            self.len += n;
            // Stop the formatting once the buffer is full.
            if self.len == self.buf.len() {
                Err(fmt::Error)
            } else {
                Ok(())
            }
        }
    }
    let mut head = Head {
        buf: [0; 32],
        len: 0,
    };
    let _ = fmt::write(&mut head, format_args!("{}", visitor as &dyn Expected));
    let head = &head.buf[..head.len];
    PREFIXES.iter().any(|p| head.starts_with(p.as_bytes()))
}

/// The type's visitor, wrapped: `object` when a struct was asked for.
struct Wrap<V> {
    inner: V,
    object: bool,
}

impl<V> Wrap<V> {
    fn any(inner: V) -> Self {
        Wrap {
            inner,
            object: false,
        }
    }
    fn object(inner: V) -> Self {
        Wrap {
            inner,
            object: true,
        }
    }
}

macro_rules! forward_deserialize {
    ($($method:ident)*) => {
        $(
            fn $method<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, Self::Error> {
                self.0.$method(Wrap::any(visitor))
            }
        )*
    };
}

impl<'de, D: Deserializer<'de>> Deserializer<'de> for Strict<D> {
    type Error = D::Error;

    forward_deserialize! {
        deserialize_any deserialize_bool deserialize_i8 deserialize_i16 deserialize_i32
        deserialize_i64 deserialize_i128 deserialize_u8 deserialize_u16 deserialize_u32
        deserialize_u64 deserialize_u128 deserialize_f32 deserialize_f64 deserialize_char
        deserialize_str deserialize_string deserialize_bytes deserialize_byte_buf
        deserialize_option deserialize_unit deserialize_seq deserialize_map
        deserialize_identifier deserialize_ignored_any
    }

    fn deserialize_unit_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        visitor: V,
    ) -> Result<V::Value, Self::Error> {
        self.0.deserialize_unit_struct(name, Wrap::any(visitor))
    }

    fn deserialize_newtype_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        visitor: V,
    ) -> Result<V::Value, Self::Error> {
        self.0.deserialize_newtype_struct(name, Wrap::any(visitor))
    }

    fn deserialize_tuple<V: Visitor<'de>>(
        self,
        len: usize,
        visitor: V,
    ) -> Result<V::Value, Self::Error> {
        self.0.deserialize_tuple(len, Wrap::any(visitor))
    }

    fn deserialize_tuple_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        len: usize,
        visitor: V,
    ) -> Result<V::Value, Self::Error> {
        self.0
            .deserialize_tuple_struct(name, len, Wrap::any(visitor))
    }

    fn deserialize_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        fields: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, Self::Error> {
        self.0
            .deserialize_struct(name, fields, Wrap::object(visitor))
    }

    fn deserialize_enum<V: Visitor<'de>>(
        self,
        name: &'static str,
        variants: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, Self::Error> {
        self.0.deserialize_enum(name, variants, Wrap::any(visitor))
    }

    fn is_human_readable(&self) -> bool {
        self.0.is_human_readable()
    }
}

macro_rules! forward_visit {
    ($($method:ident($ty:ty))*) => {
        $(
            fn $method<E: de::Error>(self, v: $ty) -> Result<Self::Value, E> {
                self.inner.$method(v)
            }
        )*
    };
}

impl<'de, V: Visitor<'de>> Visitor<'de> for Wrap<V> {
    type Value = V::Value;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        self.inner.expecting(f)
    }

    forward_visit! {
        visit_bool(bool) visit_i8(i8) visit_i16(i16) visit_i32(i32) visit_i64(i64)
        visit_i128(i128) visit_u8(u8) visit_u16(u16) visit_u32(u32) visit_u64(u64)
        visit_u128(u128) visit_f32(f32) visit_f64(f64) visit_char(char) visit_str(&str)
        visit_borrowed_str(&'de str) visit_string(String) visit_bytes(&[u8])
        visit_borrowed_bytes(&'de [u8]) visit_byte_buf(Vec<u8>)
    }

    fn visit_none<E: de::Error>(self) -> Result<Self::Value, E> {
        self.inner.visit_none()
    }

    fn visit_unit<E: de::Error>(self) -> Result<Self::Value, E> {
        self.inner.visit_unit()
    }

    fn visit_some<D: Deserializer<'de>>(self, d: D) -> Result<Self::Value, D::Error> {
        self.inner.visit_some(Strict(d))
    }

    fn visit_newtype_struct<D: Deserializer<'de>>(self, d: D) -> Result<Self::Value, D::Error> {
        self.inner.visit_newtype_struct(Strict(d))
    }

    fn visit_seq<A: SeqAccess<'de>>(self, seq: A) -> Result<Self::Value, A::Error> {
        if self.object || wants_object(&self.inner) {
            return Err(de::Error::custom(ARRAY_FOR_OBJECT));
        }
        self.inner.visit_seq(Strict(seq))
    }

    fn visit_map<A: MapAccess<'de>>(self, map: A) -> Result<Self::Value, A::Error> {
        self.inner.visit_map(Strict(map))
    }

    fn visit_enum<A: EnumAccess<'de>>(self, data: A) -> Result<Self::Value, A::Error> {
        self.inner.visit_enum(Strict(data))
    }
}

/// A seed whose deserializer is wrapped.
struct Seed<S>(S);

impl<'de, S: DeserializeSeed<'de>> DeserializeSeed<'de> for Seed<S> {
    type Value = S::Value;
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<Self::Value, D::Error> {
        self.0.deserialize(Strict(d))
    }
}

impl<'de, A: SeqAccess<'de>> SeqAccess<'de> for Strict<A> {
    type Error = A::Error;
    fn next_element_seed<T: DeserializeSeed<'de>>(
        &mut self,
        seed: T,
    ) -> Result<Option<T::Value>, Self::Error> {
        self.0.next_element_seed(Seed(seed))
    }
    fn size_hint(&self) -> Option<usize> {
        self.0.size_hint()
    }
}

impl<'de, A: MapAccess<'de>> MapAccess<'de> for Strict<A> {
    type Error = A::Error;
    fn next_key_seed<K: DeserializeSeed<'de>>(
        &mut self,
        seed: K,
    ) -> Result<Option<K::Value>, Self::Error> {
        self.0.next_key_seed(Seed(seed))
    }
    fn next_value_seed<T: DeserializeSeed<'de>>(
        &mut self,
        seed: T,
    ) -> Result<T::Value, Self::Error> {
        self.0.next_value_seed(Seed(seed))
    }
    fn size_hint(&self) -> Option<usize> {
        self.0.size_hint()
    }
}

impl<'de, A: EnumAccess<'de>> EnumAccess<'de> for Strict<A> {
    type Error = A::Error;
    type Variant = Strict<A::Variant>;
    fn variant_seed<T: DeserializeSeed<'de>>(
        self,
        seed: T,
    ) -> Result<(T::Value, Self::Variant), Self::Error> {
        let (value, variant) = self.0.variant_seed(Seed(seed))?;
        Ok((value, Strict(variant)))
    }
}

impl<'de, A: VariantAccess<'de>> VariantAccess<'de> for Strict<A> {
    type Error = A::Error;
    fn unit_variant(self) -> Result<(), Self::Error> {
        self.0.unit_variant()
    }
    fn newtype_variant_seed<T: DeserializeSeed<'de>>(
        self,
        seed: T,
    ) -> Result<T::Value, Self::Error> {
        self.0.newtype_variant_seed(Seed(seed))
    }
    fn tuple_variant<V: Visitor<'de>>(
        self,
        len: usize,
        visitor: V,
    ) -> Result<V::Value, Self::Error> {
        self.0.tuple_variant(len, Wrap::any(visitor))
    }
    fn struct_variant<V: Visitor<'de>>(
        self,
        fields: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, Self::Error> {
        self.0.struct_variant(fields, Wrap::object(visitor))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use goalsmith_core::goal::{GoalDocument, TermDocument};
    use serde::Deserialize;
    use serde_json::{Value, json};

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(deny_unknown_fields)]
    struct Plane {
        normal: [f64; 3],
        offset_m: f64,
    }

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(deny_unknown_fields)]
    struct Item {
        goal_id: String,
        revision: i64,
    }

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(deny_unknown_fields)]
    struct Body {
        name: String,
        #[serde(default)]
        plane: Option<Plane>,
        #[serde(default)]
        items: Vec<Item>,
        #[serde(default)]
        raw: Option<Value>,
        #[serde(default)]
        shape: Option<Shape>,
        #[serde(default)]
        tagged: Option<Adjacent>,
        #[serde(default)]
        loose: Option<Loose>,
    }

    /// Externally tagged, every kind of variant.
    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(rename_all = "snake_case", deny_unknown_fields)]
    enum Shape {
        Empty,
        Scaled(f64),
        Pair(f64, f64),
        Circle { r: f64 },
        Plane(Plane),
    }

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(
        tag = "t",
        content = "c",
        rename_all = "snake_case",
        deny_unknown_fields
    )]
    enum Adjacent {
        Circle { r: f64 },
        Scaled(f64),
    }

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(untagged)]
    enum Loose {
        Number(f64),
        Points(Vec<[f64; 2]>),
        Named { label: String },
    }

    fn parse<T: DeserializeOwned>(text: &str) -> Result<T, Error> {
        from_slice(text.as_bytes())
    }

    /// The refusal, its path, and that the message names both.
    fn refused<T: DeserializeOwned + fmt::Debug>(text: &str, path: Option<&str>) {
        let e = match parse::<T>(text) {
            Ok(v) => panic!("{text} was accepted as {v:?}"),
            Err(e) => e,
        };
        assert_eq!(e.path(), path, "{text}: {e}");
        assert_eq!(e.classify(), serde_json::error::Category::Data, "{e}");
        assert!(e.inner().to_string().starts_with(ARRAY_FOR_OBJECT), "{e}");
        let want = match path {
            Some(p) => format!("{p}: {ARRAY_FOR_OBJECT} at line 1 column "),
            None => format!("{ARRAY_FOR_OBJECT} at line 1 column "),
        };
        assert!(e.to_string().starts_with(&want), "{e}");
    }

    const GOAL: &str = r#"{"name": "pot", "frame_id": "f", "terms": [
        {"kind": "point", "label": "small pot", "source": [318, 380], "target": [484.5, 262]},
        {"kind": "region", "source": [1, 2], "polygon": [[0, 0], [10, 0], [10, 10]], "weight": 2},
        {"kind": "mask", "source": [1, 2], "mask_png_base64": "AAAA", "tolerance_px": 3},
        {"kind": "rigid", "sources": [[1, 1], [5, 1]], "targets": [[2, 2], [6, 2]], "allow_scale": true},
        {"kind": "learned", "reward_fit_id": "r", "source": [3, 4]}],
        "cost": {"metric": "huber", "huber_delta_px": 2.5, "steps": "all", "mode": "hit"},
        "note": "first try", "override_safety": false}"#;

    #[test]
    fn objects_parse_exactly_as_serde_json_parses_them() {
        let ours: GoalDocument = parse(GOAL).unwrap();
        let theirs: GoalDocument = serde_json::from_str(GOAL).unwrap();
        assert_eq!(
            serde_json::to_value(&ours).unwrap(),
            serde_json::to_value(&theirs).unwrap()
        );
        assert_eq!(ours.terms.len(), 5);
        assert_eq!(ours.terms[0].kind(), "point");
        let body = r#"{"name": "n", "plane": {"normal": [0, 0, 1], "offset_m": 0.85},
            "items": [{"goal_id": "g", "revision": 3}], "raw": [1, [2, {"a": [3]}]],
            "shape": {"pair": [1, 2]}, "tagged": {"t": "circle", "c": {"r": 2}},
            "loose": [[1, 2], [3, 4]]}"#;
        assert_eq!(
            parse::<Body>(body).unwrap(),
            serde_json::from_str(body).unwrap()
        );
    }

    #[test]
    fn every_enum_representation_still_parses() {
        for (text, want) in [
            (r#""empty""#, Shape::Empty),
            (r#"{"scaled": 2.5}"#, Shape::Scaled(2.5)),
            (r#"{"pair": [1, 2]}"#, Shape::Pair(1.0, 2.0)),
            (r#"{"circle": {"r": 3}}"#, Shape::Circle { r: 3.0 }),
            (
                r#"{"plane": {"normal": [0, 0, 1], "offset_m": 1}}"#,
                Shape::Plane(Plane {
                    normal: [0.0, 0.0, 1.0],
                    offset_m: 1.0,
                }),
            ),
        ] {
            assert_eq!(parse::<Shape>(text).unwrap(), want, "{text}");
        }
        assert_eq!(
            parse::<Adjacent>(r#"{"t": "scaled", "c": 4}"#).unwrap(),
            Adjacent::Scaled(4.0)
        );
        assert_eq!(parse::<Loose>("7").unwrap(), Loose::Number(7.0));
        assert_eq!(
            parse::<Loose>(r#"{"label": "x"}"#).unwrap(),
            Loose::Named { label: "x".into() }
        );
        assert_eq!(
            parse::<Loose>("[[1, 2]]").unwrap(),
            Loose::Points(vec![[1.0, 2.0]])
        );
        // The metric, steps and mode names (externally tagged unit variants) and every term kind
        // (internally tagged) in GOAL parsed above; a bad tag is still named.
        let e = parse::<TermDocument>(r#"{"kind": "spiral", "source": [1, 1]}"#).unwrap_err();
        assert!(e.to_string().contains("unknown variant `spiral`"), "{e}");
    }

    #[test]
    fn arrays_where_objects_belong_are_refused_at_any_depth() {
        // What serde_json alone accepts, by position.
        let positional =
            r#"{"name": "x", "frame_id": "f", "terms": [["point", null, [1, 1], [2, 2]]]}"#;
        let doc: GoalDocument = serde_json::from_str(positional).unwrap();
        assert_eq!(doc.terms[0].kind(), "point");
        refused::<GoalDocument>(positional, Some("terms[0]"));
        refused::<GoalDocument>(
            r#"{"name": "x", "frame_id": "f", "terms": [], "cost": ["squared", null, "all", "expected"]}"#,
            Some("cost"),
        );
        refused::<GoalDocument>(r#"["x", "f", []]"#, None);
        refused::<TermDocument>(r#"["point", null, [1, 1], [2, 2]]"#, None);
        refused::<Body>(
            r#"{"name": "n", "plane": [[0, 0, 1], 0.85]}"#,
            Some("plane"),
        );
        refused::<Body>(
            r#"{"name": "n", "items": [{"goal_id": "g", "revision": 1}, ["g", 2]]}"#,
            Some("items[1]"),
        );
        refused::<Body>(
            r#"{"name": "n", "shape": {"circle": [3]}}"#,
            Some("shape.circle"),
        );
        refused::<Body>(
            r#"{"name": "n", "shape": {"plane": [[0, 0, 1], 1]}}"#,
            Some("shape.plane"),
        );
        refused::<Body>(
            r#"{"name": "n", "tagged": ["circle", {"r": 1}]}"#,
            Some("tagged"),
        );
        refused::<Body>(
            r#"{"name": "n", "tagged": {"t": "circle", "c": [1]}}"#,
            Some("tagged.c"),
        );
        refused::<Vec<Vec<Item>>>(
            r#"[[{"goal_id": "g", "revision": 1}, ["g", 2]]]"#,
            Some("[0][1]"),
        );
    }

    #[test]
    fn arrays_where_arrays_belong_and_values_kept_whole_pass() {
        let b: Body = parse(r#"{"name": "n", "raw": [["g", 2], {"k": []}]}"#).unwrap();
        assert_eq!(b.raw, Some(json!([["g", 2], {"k": []}])));
        let p: Vec<[f64; 2]> = parse("[[1, 2], [3.5, -4]]").unwrap();
        assert_eq!(p, vec![[1.0, 2.0], [3.5, -4.0]]);
        let t: (u8, String, [[f64; 3]; 1]) = parse(r#"[1, "a", [[1, 2, 3]]]"#).unwrap();
        assert_eq!(t, (1, "a".into(), [[1.0, 2.0, 3.0]]));
    }

    #[test]
    fn numbers_are_read_exactly_as_serde_json_reads_them() {
        #[derive(Debug, Deserialize, PartialEq)]
        struct Numbers {
            u: u64,
            i: i64,
            f: Vec<f64>,
            v: Vec<Value>,
        }
        let text = r#"{"u": 18446744073709551615, "i": -9223372036854775808,
            "f": [0.1, 1e-300, 5e-324, 9007199254740993, 1.7976931348623157e308, -0.0, 3],
            "v": [1, -1, 1.0, 18446744073709551615, 0.30000000000000004]}"#;
        let ours: Numbers = parse(text).unwrap();
        let theirs: Numbers = serde_json::from_str(text).unwrap();
        assert_eq!(ours, theirs);
        assert_eq!(ours.u, u64::MAX);
        assert_eq!(ours.i, i64::MIN);
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&ours.f), bits(&theirs.f));
        assert!(ours.v[0].is_u64() && ours.v[1].is_i64() && ours.v[2].is_f64());
        // Out of range is still refused, with the path.
        let e = parse::<Numbers>(r#"{"u": -1, "i": 0, "f": [], "v": []}"#).unwrap_err();
        assert_eq!(e.path(), Some("u"));
    }

    #[test]
    fn the_rules_of_today_hold() {
        // Duplicate fields: the derived type refuses them, which a parse into a Value first
        // would have hidden (a Value keeps the last).
        let e = parse::<Item>(r#"{"goal_id": "a", "goal_id": "b", "revision": 1}"#).unwrap_err();
        assert!(e.to_string().contains("duplicate field `goal_id`"), "{e}");
        // Unknown fields, with the path.
        let e = parse::<Body>(
            r#"{"name": "n", "plane": {"normal": [0, 0, 1], "offset_m": 1, "x": 1}}"#,
        )
        .unwrap_err();
        assert_eq!(e.path(), Some("plane.x"), "{e}");
        assert!(
            e.to_string().starts_with("plane.x: unknown field `x`"),
            "{e}"
        );
        // Whitespace after the value is fine; anything else is not.
        assert!(parse::<Item>("\n {\"goal_id\": \"a\", \"revision\": 1} \r\n\t").is_ok());
        let e = parse::<Item>(r#"{"goal_id": "a", "revision": 1} {}"#).unwrap_err();
        assert!(e.is_trailing(), "{e}");
        assert_eq!(e.path(), None);
        // Syntax errors and the end of input are classified as serde_json does.
        let e = parse::<Item>(r#"{"goal_id": "a", "revision": NaN}"#).unwrap_err();
        assert_eq!(e.classify(), serde_json::error::Category::Syntax);
        assert_eq!(e.path(), Some("revision"));
        let e = parse::<Item>(r#"{"goal_id": "a""#).unwrap_err();
        assert_eq!(e.classify(), serde_json::error::Category::Eof);
        // Wrong types keep serde's words.
        let e = parse::<Item>(r#"{"goal_id": 1, "revision": 1}"#).unwrap_err();
        assert!(
            e.to_string()
                .starts_with("goal_id: invalid type: integer `1`"),
            "{e}"
        );
        let e = parse::<Body>(r#"{"name": "n", "plane": "flat"}"#).unwrap_err();
        assert!(e.to_string().contains("expected struct Plane"), "{e}");
    }

    #[test]
    fn deep_nesting_ends_in_an_error_not_a_crash() {
        // serde_json's recursion limit (128) still applies through the wrapper.
        let deep = format!(
            r#"{{"name": "x", "frame_id": "f", "terms": [{{"kind": "point", "source": {}1{}, "target": [1, 1]}}]}}"#,
            "[".repeat(5000),
            "]".repeat(5000)
        );
        let e = parse::<GoalDocument>(&deep).unwrap_err();
        assert!(e.to_string().contains("recursion limit"), "{e}");
        let e = parse::<Body>(&format!(
            r#"{{"name": "n", "raw": {}{}}}"#,
            "[".repeat(5000),
            "]".repeat(5000)
        ))
        .unwrap_err();
        assert!(e.to_string().contains("recursion limit"), "{e}");
    }

    #[test]
    fn from_value_refuses_the_same() {
        let ok: Plane = from_value(json!({"normal": [0, 0, 1], "offset_m": 2})).unwrap();
        assert_eq!(ok.offset_m, 2.0);
        let e = from_value::<Body>(json!({"name": "n", "items": [["g", 1]]})).unwrap_err();
        assert_eq!(e.path(), Some("items[0]"));
        assert_eq!(e.to_string(), format!("items[0]: {ARRAY_FOR_OBJECT}"));
    }
}
