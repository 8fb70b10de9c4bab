//! Numbers without a finite value in the JSON outputs. JSON has no infinity and no NaN, and
//! writing them as `null` would make a reader expecting a number refuse the file. They are
//! written as words instead: `"unbounded"` for +infinity (the sensitivity of a pair no circuit
//! tested: no finite error could be told from zero) and `"not-identified"` for a value the
//! data cannot determine (NaN, e.g. the fitted error rate of a kind whose parameters are not
//! identified). CSV files leave such cells empty.
//!
//! Use with `#[serde(with = "special::number")]` (or `special::unbounded`, which reads the
//! `null` of schema-2 files as +infinity) and `#[schemars(with = "special::Number")]`.

use std::fmt;

use schemars::JsonSchema;
use serde::de::{self, Visitor};
use serde::{Deserialize, Deserializer, Serialize, Serializer};

/// The word written for a number without a finite value.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "kebab-case")]
pub enum SpecialWord {
    /// +infinity: no finite bound exists (e.g. a pair no circuit tested).
    Unbounded,
    /// NaN: the data do not determine the value.
    NotIdentified,
}

impl SpecialWord {
    /// The word as written.
    pub fn word(self) -> &'static str {
        match self {
            SpecialWord::Unbounded => "unbounded",
            SpecialWord::NotIdentified => "not-identified",
        }
    }

    /// The word of a value without a finite one; None for a finite value.
    pub fn of(v: f64) -> Option<SpecialWord> {
        if v.is_finite() {
            None
        } else if v == f64::INFINITY {
            Some(SpecialWord::Unbounded)
        } else {
            Some(SpecialWord::NotIdentified)
        }
    }

    /// The value a word stands for.
    pub fn value(self) -> f64 {
        match self {
            SpecialWord::Unbounded => f64::INFINITY,
            SpecialWord::NotIdentified => f64::NAN,
        }
    }
}

/// The schema of a number field that may hold a word: a number, `"unbounded"` or
/// `"not-identified"`. Only described, never built.
#[derive(JsonSchema)]
#[serde(untagged)]
#[allow(dead_code)]
pub enum Number {
    /// A finite number.
    Finite(f64),
    /// A number without a finite value.
    Word(SpecialWord),
}

fn write<S: Serializer>(v: f64, s: S) -> Result<S::Ok, S::Error> {
    match SpecialWord::of(v) {
        None => s.serialize_f64(v),
        Some(w) => s.serialize_str(w.word()),
    }
}

/// Reads a number or a word, and `null` as `null_value` when that is given.
struct NumberVisitor {
    null_value: Option<f64>,
}

impl<'de> Visitor<'de> for NumberVisitor {
    type Value = f64;

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("a number, \"unbounded\" or \"not-identified\"")
    }
    fn visit_f64<E: de::Error>(self, v: f64) -> Result<f64, E> {
        Ok(v)
    }
    fn visit_i64<E: de::Error>(self, v: i64) -> Result<f64, E> {
        Ok(v as f64)
    }
    fn visit_u64<E: de::Error>(self, v: u64) -> Result<f64, E> {
        Ok(v as f64)
    }
    fn visit_str<E: de::Error>(self, v: &str) -> Result<f64, E> {
        match v {
            "unbounded" => Ok(f64::INFINITY),
            "not-identified" => Ok(f64::NAN),
            _ => Err(E::invalid_value(de::Unexpected::Str(v), &self)),
        }
    }
    fn visit_unit<E: de::Error>(self) -> Result<f64, E> {
        self.null_value.ok_or_else(|| E::invalid_type(de::Unexpected::Unit, &self))
    }
    fn visit_none<E: de::Error>(self) -> Result<f64, E> {
        self.visit_unit()
    }
}

/// A number that may be `"unbounded"` or `"not-identified"`; `null` is refused.
pub mod number {
    use super::*;

    /// Writes a finite value as a number, others as their word.
    pub fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
        write(*v, s)
    }

    /// Reads what [`serialize`] writes.
    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        d.deserialize_any(NumberVisitor { null_value: None })
    }
}

/// As [`number`], but `null` (how schema-2 files wrote it) reads as unbounded.
pub mod unbounded {
    use super::*;

    /// Writes a finite value as a number, others as their word.
    pub fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
        write(*v, s)
    }

    /// Reads what [`serialize`] writes, and `null` as +infinity.
    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        d.deserialize_any(NumberVisitor { null_value: Some(f64::INFINITY) })
    }
}

/// A list of numbers, each as [`number`] writes it.
pub mod numbers {
    use super::*;
    use serde::ser::SerializeSeq;

    /// Writes each value as [`number::serialize`] does.
    pub fn serialize<S: Serializer>(v: &[f64], s: S) -> Result<S::Ok, S::Error> {
        struct One(f64);
        impl Serialize for One {
            fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                write(self.0, s)
            }
        }
        let mut seq = s.serialize_seq(Some(v.len()))?;
        for &x in v {
            seq.serialize_element(&One(x))?;
        }
        seq.end()
    }

    /// Reads what [`serialize`] writes.
    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
        struct One(f64);
        impl<'de> Deserialize<'de> for One {
            fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
                super::number::deserialize(d).map(One)
            }
        }
        Ok(Vec::<One>::deserialize(d)?.into_iter().map(|o| o.0).collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Serialize, Deserialize, Debug)]
    struct T {
        #[serde(with = "number")]
        x: f64,
        #[serde(with = "unbounded")]
        y: f64,
    }

    #[derive(Serialize, Deserialize, Debug)]
    struct L {
        #[serde(with = "numbers")]
        v: Vec<f64>,
    }

    #[test]
    fn lists_write_words_too() {
        let s = serde_json::to_string(&L { v: vec![1.0, f64::INFINITY] }).unwrap();
        assert_eq!(s, r#"{"v":[1.0,"unbounded"]}"#);
        let back: L = serde_json::from_str(&s).unwrap();
        assert_eq!(back.v, vec![1.0, f64::INFINITY]);
    }

    #[test]
    fn words_round_trip_and_null_reads_by_field() {
        for (x, y, text) in [
            (1.5, 2.0, r#"{"x":1.5,"y":2.0}"#),
            (f64::NAN, f64::INFINITY, r#"{"x":"not-identified","y":"unbounded"}"#),
        ] {
            let s = serde_json::to_string(&T { x, y }).unwrap();
            assert_eq!(s, text);
            let back: T = serde_json::from_str(&s).unwrap();
            assert!(back.x == x || (x.is_nan() && back.x.is_nan()));
            assert_eq!(back.y, y);
        }
        let old: T = serde_json::from_str(r#"{"x":1,"y":null}"#).unwrap();
        assert!(old.y == f64::INFINITY);
        assert!(serde_json::from_str::<T>(r#"{"x":null,"y":0}"#).is_err());
        let n: T = serde_json::from_str(r#"{"x":3,"y":0}"#).unwrap();
        assert_eq!((n.x, n.y), (3.0, 0.0));
        assert!(serde_json::from_str::<T>(r#"{"x":"inf","y":0}"#).is_err());
    }
}
