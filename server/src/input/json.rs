//! The one reader of JSON request bodies. It refuses what `serde_json` lets
//! through by default: data after the JSON value, and an object that gives
//! one key twice (serde keeps the last, so a sender's first value would be
//! silently dropped). Both are checked in a first pass over the raw text, so
//! bodies kept as `serde_json::Value` (the phone's events) are covered too.
//! The second pass reads the type through [`super::objects::Objects`], so a
//! struct given as an array of its fields is refused where it stands.

use super::objects::Objects;
use serde::de::{self, DeserializeOwned, Deserializer, MapAccess, SeqAccess, Visitor};
use std::collections::HashSet;
use std::fmt;

/// Why a body was refused: where (a path such as `[2].sku`, or `body`) and what.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BodyError {
    pub field: String,
    pub message: String,
}

impl fmt::Display for BodyError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}: {}", self.field, self.message)
    }
}

/// Name given to the whole body when an error has no narrower place.
const WHOLE_BODY: &str = "body";

fn place(path: &serde_path_to_error::Path) -> String {
    match path.to_string() {
        p if p == "." => WHOLE_BODY.to_string(),
        p => p,
    }
}

/// Checks that `bytes` is exactly one JSON value with no key given twice in any object.
pub fn check_shape(bytes: &[u8]) -> Result<(), BodyError> {
    let mut de = serde_json::Deserializer::from_slice(bytes);
    serde_path_to_error::deserialize::<_, UniqueKeys>(&mut de).map_err(|e| {
        let field = place(e.path());
        let inner = e.into_inner();
        let message = if inner.is_syntax() || inner.is_eof() {
            format!("the body is not valid JSON: {inner}")
        } else {
            inner.to_string()
        };
        BodyError { field, message }
    })?;
    de.end().map_err(|e| BodyError {
        field: WHOLE_BODY.to_string(),
        message: format!("there is more after the JSON value ({e}); send one value only"),
    })
}

/// Reads a body strictly (see the module doc) into `T`, naming the field of any error.
pub fn read<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, BodyError> {
    check_shape(bytes)?;
    let mut de = serde_json::Deserializer::from_slice(bytes);
    serde_path_to_error::deserialize(Objects(&mut de)).map_err(|e| BodyError {
        field: place(e.path()),
        message: e.into_inner().to_string(),
    })
}

/// Any JSON value, read only to refuse duplicate keys; it keeps nothing.
struct UniqueKeys;

impl<'de> de::Deserialize<'de> for UniqueKeys {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        d.deserialize_any(UniqueKeys)
    }
}

impl<'de> Visitor<'de> for UniqueKeys {
    type Value = UniqueKeys;

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("a JSON value")
    }

    fn visit_bool<E>(self, _: bool) -> Result<Self, E> {
        Ok(self)
    }
    fn visit_i64<E>(self, _: i64) -> Result<Self, E> {
        Ok(self)
    }
    fn visit_u64<E>(self, _: u64) -> Result<Self, E> {
        Ok(self)
    }
    fn visit_f64<E>(self, _: f64) -> Result<Self, E> {
        Ok(self)
    }
    fn visit_str<E>(self, _: &str) -> Result<Self, E> {
        Ok(self)
    }
    fn visit_unit<E>(self) -> Result<Self, E> {
        Ok(self)
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Self, A::Error> {
        while seq.next_element::<UniqueKeys>()?.is_some() {}
        Ok(self)
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Self, A::Error> {
        let mut seen = HashSet::new();
        while let Some(key) = map.next_key::<String>()? {
            if !seen.insert(key.clone()) {
                return Err(de::Error::custom(format!(
                    "the key \"{key}\" is given twice; give each key once"
                )));
            }
            map.next_value::<UniqueKeys>()?;
        }
        Ok(self)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde::Deserialize;

    #[derive(Debug, Deserialize, PartialEq)]
    #[serde(deny_unknown_fields)]
    struct Row {
        sku: String,
        qty: i64,
    }

    #[test]
    fn a_single_object_is_read() {
        let r: Row = read(br#" {"sku": "A1", "qty": 3} "#).unwrap();
        assert_eq!(r.qty, 3);
    }

    #[test]
    fn data_after_the_value_is_refused_for_the_whole_body() {
        let e = read::<Row>(br#"{"sku": "A1", "qty": 3} {"sku": "B2"}"#).unwrap_err();
        assert_eq!(e.field, "body");
        assert!(e.message.contains("more after the JSON value"), "{e}");
        let e = read::<Row>(br#"{"sku": "A1", "qty": 3}x"#).unwrap_err();
        assert_eq!(e.field, "body");
    }

    #[test]
    fn a_key_given_twice_is_refused_naming_it() {
        let e = read::<Row>(br#"{"sku": "A1", "qty": 3, "qty": 300}"#).unwrap_err();
        assert!(e.message.contains("\"qty\" is given twice"), "{e}");
    }

    #[test]
    fn a_key_given_twice_deep_inside_names_its_place() {
        let body = br#"{"events": [{"a": 1}, {"a": 1, "b": {"c": 1, "c": 2}}]}"#;
        let e = check_shape(body).unwrap_err();
        assert_eq!(e.field, "events[1].b");
        assert!(e.message.contains("\"c\""), "{e}");
    }

    #[test]
    fn the_same_key_in_two_objects_is_fine() {
        check_shape(br#"[{"sku": "A1"}, {"sku": "A1"}]"#).unwrap();
    }

    #[test]
    fn escaped_keys_that_spell_the_same_name_are_the_same_key() {
        assert!(check_shape(br#"{"qty": 1, "q\u0074y": 2}"#).is_err());
    }

    #[test]
    fn a_field_of_the_wrong_type_names_the_field() {
        let e = read::<Row>(br#"{"sku": "A1", "qty": "three"}"#).unwrap_err();
        assert_eq!(e.field, "qty");
    }

    #[test]
    fn a_row_given_as_an_array_of_its_fields_is_refused_naming_it() {
        let e = read::<Row>(br#"["A1", 3]"#).unwrap_err();
        assert_eq!(e.field, "body");
        assert!(
            e.message
                .starts_with(super::super::objects::ARRAY_FOR_OBJECT),
            "{e}"
        );
        let e = read::<Vec<Row>>(br#"[{"sku": "A1", "qty": 3}, ["B2", 4]]"#).unwrap_err();
        assert_eq!(e.field, "[1]");
    }

    #[test]
    fn an_empty_body_is_refused() {
        assert_eq!(read::<Row>(b"").unwrap_err().field, "body");
    }
}
