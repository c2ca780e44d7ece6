//! A deserializer adapter that refuses a JSON array where a struct is expected.
//!
//! serde reads a struct from a sequence of its fields in order as well as from a map, so
//! `"c": [null, null]` would be taken as a tolerance `{"units": null, "percent_bp": null}`
//! and `["A-01-01-1", 3]` as a row. Cairn's wire format names every field, so the body
//! readers (`input::json::read`, `http::extract::JsonRows`, a phone's event) wrap their
//! deserializer in [`Objects`]: every struct anywhere in the value must arrive as a JSON
//! object, and an array there is refused with serde's error, so the caller's path names
//! where (`tolerances.c`, `[3]`).
//!
//! What serde buffers before choosing a type (internally tagged or untagged enums,
//! `#[serde(flatten)]`) is read from its buffer and not seen here; no request type uses
//! them for a struct a sender writes.

use serde::de::{
    self, DeserializeSeed, Deserializer, EnumAccess, MapAccess, SeqAccess, VariantAccess, Visitor,
};
use std::fmt;

/// The message of the refusal (the path is added by the caller).
pub const ARRAY_FOR_OBJECT: &str =
    "an array where an object is expected: send the fields by name, as {\"field\": value, …}";

/// Wraps a deserializer so that no struct is read from an array.
pub struct Objects<D>(pub D);

/// Wraps a visitor: `object` says that it is a struct's, which may not take a sequence.
struct Visit<V> {
    inner: V,
    object: bool,
}

impl<V> Visit<V> {
    fn any(inner: V) -> Self {
        Self {
            inner,
            object: false,
        }
    }

    fn object(inner: V) -> Self {
        Self {
            inner,
            object: true,
        }
    }
}

macro_rules! forward_deserialize {
    ($($method:ident),* $(,)?) => {
        $(
            fn $method<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, D::Error> {
                self.0.$method(Visit::any(visitor))
            }
        )*
    };
}

impl<'de, D: Deserializer<'de>> Deserializer<'de> for Objects<D> {
    type Error = D::Error;

    forward_deserialize!(
        deserialize_any,
        deserialize_bool,
        deserialize_i8,
        deserialize_i16,
        deserialize_i32,
        deserialize_i64,
        deserialize_i128,
        deserialize_u8,
        deserialize_u16,
        deserialize_u32,
        deserialize_u64,
        deserialize_u128,
        deserialize_f32,
        deserialize_f64,
        deserialize_char,
        deserialize_str,
        deserialize_string,
        deserialize_bytes,
        deserialize_byte_buf,
        deserialize_option,
        deserialize_unit,
        deserialize_seq,
        deserialize_map,
        deserialize_identifier,
        deserialize_ignored_any,
    );

    fn deserialize_unit_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        visitor: V,
    ) -> Result<V::Value, D::Error> {
        self.0.deserialize_unit_struct(name, Visit::any(visitor))
    }

    fn deserialize_newtype_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        visitor: V,
    ) -> Result<V::Value, D::Error> {
        self.0.deserialize_newtype_struct(name, Visit::any(visitor))
    }

    fn deserialize_tuple<V: Visitor<'de>>(
        self,
        len: usize,
        visitor: V,
    ) -> Result<V::Value, D::Error> {
        self.0.deserialize_tuple(len, Visit::any(visitor))
    }

    fn deserialize_tuple_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        len: usize,
        visitor: V,
    ) -> Result<V::Value, D::Error> {
        self.0
            .deserialize_tuple_struct(name, len, Visit::any(visitor))
    }

    fn deserialize_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        fields: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, D::Error> {
        self.0
            .deserialize_struct(name, fields, Visit::object(visitor))
    }

    fn deserialize_enum<V: Visitor<'de>>(
        self,
        name: &'static str,
        variants: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, D::Error> {
        self.0.deserialize_enum(name, variants, Visit::any(visitor))
    }

    fn is_human_readable(&self) -> bool {
        self.0.is_human_readable()
    }
}

macro_rules! forward_visit {
    ($($method:ident: $ty:ty),* $(,)?) => {
        $(
            fn $method<E: de::Error>(self, v: $ty) -> Result<V::Value, E> {
                self.inner.$method(v)
            }
        )*
    };
}

impl<'de, V: Visitor<'de>> Visitor<'de> for Visit<V> {
    type Value = V::Value;

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        self.inner.expecting(f)
    }

    forward_visit!(
        visit_bool: bool,
        visit_i8: i8,
        visit_i16: i16,
        visit_i32: i32,
        visit_i64: i64,
        visit_i128: i128,
        visit_u8: u8,
        visit_u16: u16,
        visit_u32: u32,
        visit_u64: u64,
        visit_u128: u128,
        visit_f32: f32,
        visit_f64: f64,
        visit_char: char,
        visit_str: &str,
        visit_borrowed_str: &'de str,
        visit_string: String,
        visit_bytes: &[u8],
        visit_borrowed_bytes: &'de [u8],
        visit_byte_buf: Vec<u8>,
    );

    fn visit_none<E: de::Error>(self) -> Result<V::Value, E> {
        self.inner.visit_none()
    }

    fn visit_unit<E: de::Error>(self) -> Result<V::Value, E> {
        self.inner.visit_unit()
    }

    fn visit_some<D: Deserializer<'de>>(self, d: D) -> Result<V::Value, D::Error> {
        self.inner.visit_some(Objects(d))
    }

    fn visit_newtype_struct<D: Deserializer<'de>>(self, d: D) -> Result<V::Value, D::Error> {
        self.inner.visit_newtype_struct(Objects(d))
    }

    fn visit_seq<A: SeqAccess<'de>>(self, seq: A) -> Result<V::Value, A::Error> {
        if self.object {
            return Err(de::Error::custom(ARRAY_FOR_OBJECT));
        }
        self.inner.visit_seq(Seq(seq))
    }

    fn visit_map<A: MapAccess<'de>>(self, map: A) -> Result<V::Value, A::Error> {
        self.inner.visit_map(Map(map))
    }

    fn visit_enum<A: EnumAccess<'de>>(self, data: A) -> Result<V::Value, A::Error> {
        self.inner.visit_enum(Enum(data))
    }
}

/// Wraps a seed so that what it reads is read through [`Objects`].
struct Seed<S>(S);

impl<'de, S: DeserializeSeed<'de>> DeserializeSeed<'de> for Seed<S> {
    type Value = S::Value;

    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<S::Value, D::Error> {
        self.0.deserialize(Objects(d))
    }
}

struct Seq<A>(A);

impl<'de, A: SeqAccess<'de>> SeqAccess<'de> for Seq<A> {
    type Error = A::Error;

    fn next_element_seed<T: DeserializeSeed<'de>>(
        &mut self,
        seed: T,
    ) -> Result<Option<T::Value>, A::Error> {
        self.0.next_element_seed(Seed(seed))
    }

    fn size_hint(&self) -> Option<usize> {
        self.0.size_hint()
    }
}

struct Map<A>(A);

impl<'de, A: MapAccess<'de>> MapAccess<'de> for Map<A> {
    type Error = A::Error;

    fn next_key_seed<K: DeserializeSeed<'de>>(
        &mut self,
        seed: K,
    ) -> Result<Option<K::Value>, A::Error> {
        self.0.next_key_seed(Seed(seed))
    }

    fn next_value_seed<T: DeserializeSeed<'de>>(&mut self, seed: T) -> Result<T::Value, A::Error> {
        self.0.next_value_seed(Seed(seed))
    }

    fn size_hint(&self) -> Option<usize> {
        self.0.size_hint()
    }
}

struct Enum<A>(A);

impl<'de, A: EnumAccess<'de>> EnumAccess<'de> for Enum<A> {
    type Error = A::Error;
    type Variant = Variant<A::Variant>;

    fn variant_seed<T: DeserializeSeed<'de>>(
        self,
        seed: T,
    ) -> Result<(T::Value, Self::Variant), A::Error> {
        self.0
            .variant_seed(Seed(seed))
            .map(|(value, variant)| (value, Variant(variant)))
    }
}

struct Variant<A>(A);

impl<'de, A: VariantAccess<'de>> VariantAccess<'de> for Variant<A> {
    type Error = A::Error;

    fn unit_variant(self) -> Result<(), A::Error> {
        self.0.unit_variant()
    }

    fn newtype_variant_seed<T: DeserializeSeed<'de>>(self, seed: T) -> Result<T::Value, A::Error> {
        self.0.newtype_variant_seed(Seed(seed))
    }

    fn tuple_variant<V: Visitor<'de>>(self, len: usize, visitor: V) -> Result<V::Value, A::Error> {
        self.0.tuple_variant(len, Visit::any(visitor))
    }

    fn struct_variant<V: Visitor<'de>>(
        self,
        fields: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, A::Error> {
        self.0.struct_variant(fields, Visit::object(visitor))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde::Deserialize;

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(deny_unknown_fields)]
    struct Limits {
        units: Option<i64>,
        percent_bp: Option<i64>,
    }

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(deny_unknown_fields)]
    struct Settings {
        a: Limits,
        codes: Vec<String>,
        pair: (i64, i64),
        c: Option<Limits>,
    }

    fn strict<T: for<'de> Deserialize<'de>>(text: &str) -> Result<T, String> {
        let mut de = serde_json::Deserializer::from_str(text);
        serde_path_to_error::deserialize(Objects(&mut de)).map_err(|e| {
            let path = e.path().to_string();
            format!("{path} | {}", e.into_inner())
        })
    }

    const GOOD: &str = r#"{"a": {"units": 3, "percent_bp": null}, "codes": ["X"], "pair": [1, 2],
                          "c": {"units": null, "percent_bp": 200}}"#;

    #[test]
    fn serde_alone_reads_a_struct_from_an_array_of_its_fields() {
        // The hole this module closes: without it the array is taken as the struct.
        let lax: Limits = serde_json::from_str("[null, 5]").unwrap();
        assert_eq!(lax.percent_bp, Some(5));
    }

    #[test]
    fn objects_arrays_tuples_and_options_read_as_before() {
        let s: Settings = strict(GOOD).unwrap();
        assert_eq!(s.a.units, Some(3));
        assert_eq!(s.codes, ["X"]);
        assert_eq!(s.pair, (1, 2));
        assert_eq!(s.c.unwrap().percent_bp, Some(200));
    }

    #[test]
    fn an_array_for_a_nested_struct_is_refused_naming_its_place() {
        let e = strict::<Settings>(&GOOD.replace(
            r#""c": {"units": null, "percent_bp": 200}"#,
            r#""c": [null, null]"#,
        ))
        .unwrap_err();
        assert!(e.starts_with("c | "), "{e}");
        assert!(e.contains(ARRAY_FOR_OBJECT), "{e}");
    }

    #[test]
    fn an_array_for_the_whole_struct_or_a_row_is_refused() {
        assert!(
            strict::<Limits>("[1, 2]")
                .unwrap_err()
                .contains(ARRAY_FOR_OBJECT)
        );
        let e = strict::<Vec<Limits>>(r#"[{"units": 1, "percent_bp": 2}, [1, 2]]"#).unwrap_err();
        assert!(e.starts_with("[1] | "), "{e}");
    }

    #[test]
    fn other_errors_keep_serde_json_s_words() {
        let e = strict::<Limits>(r#"{"units": "three", "percent_bp": null}"#).unwrap_err();
        assert!(e.starts_with("units | invalid type: string"), "{e}");
        let e = strict::<Limits>(r#"{"units": 1, "percent_bp": null, "x": 1}"#).unwrap_err();
        assert!(e.contains("unknown field `x`"), "{e}");
    }

    #[test]
    fn a_value_read_through_it_is_checked_too() {
        let v: serde_json::Value = serde_json::from_str("[1, 2]").unwrap();
        let e = Limits::deserialize(Objects(v)).unwrap_err();
        assert!(e.to_string().contains(ARRAY_FOR_OBJECT), "{e}");
    }
}
