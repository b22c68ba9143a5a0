//! Nested documents must be JSON objects. serde's derived structs also accept an array
//! of field values in declaration order (`"fix": [null, 0.5]`); a user who sends that
//! has almost certainly made a mistake, and the OpenAPI schema says "object". These
//! helpers, used with `#[serde(deserialize_with = ...)]`, accept objects only and keep
//! serde's error paths.

use serde::de::value::MapAccessDeserializer;
use serde::de::{DeserializeSeed, Deserializer, MapAccess, SeqAccess, Visitor};
use serde::Deserialize;
use std::fmt;
use std::marker::PhantomData;

/// Deserialises `T` from a JSON object only.
struct ObjectSeed<T>(PhantomData<T>);

impl<'de, T: Deserialize<'de>> DeserializeSeed<'de> for ObjectSeed<T> {
    type Value = T;
    fn deserialize<D: Deserializer<'de>>(self, deserializer: D) -> Result<T, D::Error> {
        deserializer.deserialize_map(ObjectVisitor(PhantomData))
    }
}

struct ObjectVisitor<T>(PhantomData<T>);

impl<'de, T: Deserialize<'de>> Visitor<'de> for ObjectVisitor<T> {
    type Value = T;
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("a JSON object")
    }
    fn visit_map<A: MapAccess<'de>>(self, map: A) -> Result<T, A::Error> {
        T::deserialize(MapAccessDeserializer::new(map))
    }
}

struct OptionalObjectVisitor<T>(PhantomData<T>);

impl<'de, T: Deserialize<'de>> Visitor<'de> for OptionalObjectVisitor<T> {
    type Value = Option<T>;
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("a JSON object or null")
    }
    fn visit_none<E: serde::de::Error>(self) -> Result<Option<T>, E> {
        Ok(None)
    }
    fn visit_unit<E: serde::de::Error>(self) -> Result<Option<T>, E> {
        Ok(None)
    }
    fn visit_some<D: Deserializer<'de>>(self, deserializer: D) -> Result<Option<T>, D::Error> {
        ObjectSeed(PhantomData).deserialize(deserializer).map(Some)
    }
}

struct ObjectsVisitor<T>(PhantomData<T>);

impl<'de, T: Deserialize<'de>> Visitor<'de> for ObjectsVisitor<T> {
    type Value = Vec<T>;
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("an array of JSON objects")
    }
    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Vec<T>, A::Error> {
        let mut out = Vec::with_capacity(seq.size_hint().unwrap_or(0).min(4096));
        while let Some(item) = seq.next_element_seed(ObjectSeed(PhantomData))? {
            out.push(item);
        }
        Ok(out)
    }
}

/// A `T` that must be written as a JSON object or `null`.
///
/// # Errors
/// The deserializer's error for anything else.
pub fn optional_object<'de, D: Deserializer<'de>, T: Deserialize<'de>>(d: D) -> Result<Option<T>, D::Error> {
    d.deserialize_option(OptionalObjectVisitor(PhantomData))
}

/// An array whose elements must be JSON objects.
///
/// # Errors
/// The deserializer's error for anything else.
pub fn objects<'de, D: Deserializer<'de>, T: Deserialize<'de>>(d: D) -> Result<Vec<T>, D::Error> {
    d.deserialize_seq(ObjectsVisitor(PhantomData))
}

/// An optional array whose elements must be JSON objects.
///
/// # Errors
/// The deserializer's error for anything else.
pub fn optional_objects<'de, D: Deserializer<'de>, T: Deserialize<'de>>(d: D) -> Result<Option<Vec<T>>, D::Error> {
    struct Optional<T>(PhantomData<T>);
    impl<'de, T: Deserialize<'de>> Visitor<'de> for Optional<T> {
        type Value = Option<Vec<T>>;
        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            f.write_str("an array of JSON objects or null")
        }
        fn visit_none<E: serde::de::Error>(self) -> Result<Self::Value, E> {
            Ok(None)
        }
        fn visit_unit<E: serde::de::Error>(self) -> Result<Self::Value, E> {
            Ok(None)
        }
        fn visit_some<D: Deserializer<'de>>(self, d: D) -> Result<Self::Value, D::Error> {
            objects(d).map(Some)
        }
    }
    d.deserialize_option(Optional(PhantomData))
}

/// An optional id: JSON Schema's `integer` admits a number with a zero fractional part
/// (`5.0`), so the service does too; `null` is absent.
///
/// # Errors
/// serde's error for anything but `null` or a whole number within `i64`.
pub fn optional_whole_number<'de, D: Deserializer<'de>>(d: D) -> Result<Option<i64>, D::Error> {
    #[derive(Deserialize)]
    #[serde(untagged)]
    enum Number {
        Int(i64),
        Float(f64),
    }
    // i64::MIN is -2^63 exactly; 2^63 is the first float past i64::MAX.
    const LIMIT: f64 = 9_223_372_036_854_775_808.0;
    match Option::<Number>::deserialize(d)? {
        None => Ok(None),
        Some(Number::Int(n)) => Ok(Some(n)),
        Some(Number::Float(x)) if x.fract() == 0.0 && (-LIMIT..LIMIT).contains(&x) => Ok(Some(x as i64)),
        Some(Number::Float(x)) => Err(serde::de::Error::custom(format!("must be a whole number, got {x}"))),
    }
}

#[cfg(test)]
mod tests {
    use crate::wire::input::{parse_json, SnapshotDoc};

    #[test]
    fn nested_structs_written_as_arrays_are_refused_with_their_path() {
        let base = r#"{"underlying":"X","as_of":"2026-11-30T15:30:00Z","slices":[{"tau":1,"forward":100,
            "points":[{"strike":90,"vol":0.2},{"strike":100,"vol":0.2},{"strike":110,"vol":0.2}]}]"#;
        let ok = format!("{base}, \"fit\": {{\"fix\": {{\"hurst\": 0.1}}}}}}");
        assert!(parse_json::<SnapshotDoc>(&ok).is_ok());
        let fix_array = format!("{base}, \"fit\": {{\"fix\": [0.1, null, null]}}}}");
        let err = parse_json::<SnapshotDoc>(&fix_array).expect_err("positional struct");
        assert_eq!(err.problems[0].path.to_string(), "fit.fix", "{err}");
        let point_array = base.replace(r#"{"strike":100,"vol":0.2}"#, "[100, 0.2]") + "}";
        let err = parse_json::<SnapshotDoc>(&point_array).expect_err("positional point");
        assert_eq!(err.problems[0].path.to_string(), "slices[0].points[1]", "{err}");
    }
}
