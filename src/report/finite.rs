//! Finding a non-finite number anywhere in a serializable value, by
//! serializing it into nothing: JSON would silently write NaN and infinities
//! as null, so a report is checked before it leaves the engine.

use serde::ser::{self, Serialize};

/// The path of the first number that is NaN or infinite, e.g.
/// `candidates[1].fidelity.logit_mse`; `None` when every number is finite.
pub fn first_non_finite<T: Serialize>(value: &T) -> Option<String> {
    let mut walk = Walk::default();
    match value.serialize(&mut walk) {
        Err(Found(path)) => Some(path),
        Ok(()) => None,
    }
}

#[derive(Default)]
struct Walk {
    path: Vec<String>,
}

#[derive(Debug)]
struct Found(String);

impl std::fmt::Display for Found {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "a non-finite number at {}", self.0)
    }
}

impl std::error::Error for Found {}

impl ser::Error for Found {
    fn custom<M: std::fmt::Display>(msg: M) -> Self {
        Found(msg.to_string())
    }
}

impl Walk {
    fn float(&self, v: f64) -> Result<(), Found> {
        if v.is_finite() {
            return Ok(());
        }
        let mut path = String::new();
        for part in &self.path {
            if !part.starts_with('[') && !path.is_empty() {
                path.push('.');
            }
            path.push_str(part);
        }
        Err(Found(if path.is_empty() {
            "the top".into()
        } else {
            path
        }))
    }

    fn nested<T: Serialize + ?Sized>(&mut self, part: String, v: &T) -> Result<(), Found> {
        self.path.push(part);
        let r = v.serialize(&mut *self);
        self.path.pop();
        r
    }
}

/// Elements of sequences, counted for the path.
struct Seq<'a> {
    walk: &'a mut Walk,
    index: usize,
}

impl Seq<'_> {
    fn element<T: Serialize + ?Sized>(&mut self, v: &T) -> Result<(), Found> {
        let part = format!("[{}]", self.index);
        self.index += 1;
        self.walk.nested(part, v)
    }
}

macro_rules! seq_like {
    ($($trait:ident :: $method:ident),*) => {
        $(
            impl ser::$trait for Seq<'_> {
                type Ok = ();
                type Error = Found;
                fn $method<T: Serialize + ?Sized>(&mut self, v: &T) -> Result<(), Found> {
                    self.element(v)
                }
                fn end(self) -> Result<(), Found> {
                    Ok(())
                }
            }
        )*
    };
}

seq_like!(
    SerializeSeq::serialize_element,
    SerializeTuple::serialize_element,
    SerializeTupleStruct::serialize_field,
    SerializeTupleVariant::serialize_field
);

impl ser::SerializeMap for Seq<'_> {
    type Ok = ();
    type Error = Found;
    fn serialize_key<T: Serialize + ?Sized>(&mut self, k: &T) -> Result<(), Found> {
        k.serialize(&mut *self.walk)
    }
    fn serialize_value<T: Serialize + ?Sized>(&mut self, v: &T) -> Result<(), Found> {
        self.element(v)
    }
    fn end(self) -> Result<(), Found> {
        Ok(())
    }
}

macro_rules! struct_like {
    ($($trait:ident),*) => {
        $(
            impl ser::$trait for Seq<'_> {
                type Ok = ();
                type Error = Found;
                fn serialize_field<T: Serialize + ?Sized>(
                    &mut self,
                    key: &'static str,
                    v: &T,
                ) -> Result<(), Found> {
                    self.walk.nested(key.to_string(), v)
                }
                fn end(self) -> Result<(), Found> {
                    Ok(())
                }
            }
        )*
    };
}

struct_like!(SerializeStruct, SerializeStructVariant);

impl<'a> ser::Serializer for &'a mut Walk {
    type Ok = ();
    type Error = Found;
    type SerializeSeq = Seq<'a>;
    type SerializeTuple = Seq<'a>;
    type SerializeTupleStruct = Seq<'a>;
    type SerializeTupleVariant = Seq<'a>;
    type SerializeMap = Seq<'a>;
    type SerializeStruct = Seq<'a>;
    type SerializeStructVariant = Seq<'a>;

    fn serialize_f32(self, v: f32) -> Result<(), Found> {
        self.float(v as f64)
    }
    fn serialize_f64(self, v: f64) -> Result<(), Found> {
        self.float(v)
    }
    fn serialize_bool(self, _: bool) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_i8(self, _: i8) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_i16(self, _: i16) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_i32(self, _: i32) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_i64(self, _: i64) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_u8(self, _: u8) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_u16(self, _: u16) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_u32(self, _: u32) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_u64(self, _: u64) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_char(self, _: char) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_str(self, _: &str) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_bytes(self, _: &[u8]) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_none(self) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_some<T: Serialize + ?Sized>(self, v: &T) -> Result<(), Found> {
        v.serialize(self)
    }
    fn serialize_unit(self) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_unit_struct(self, _: &'static str) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_unit_variant(self, _: &'static str, _: u32, _: &'static str) -> Result<(), Found> {
        Ok(())
    }
    fn serialize_newtype_struct<T: Serialize + ?Sized>(
        self,
        _: &'static str,
        v: &T,
    ) -> Result<(), Found> {
        v.serialize(self)
    }
    fn serialize_newtype_variant<T: Serialize + ?Sized>(
        self,
        _: &'static str,
        _: u32,
        variant: &'static str,
        v: &T,
    ) -> Result<(), Found> {
        self.nested(variant.to_string(), v)
    }
    fn serialize_seq(self, _: Option<usize>) -> Result<Seq<'a>, Found> {
        Ok(Seq {
            walk: self,
            index: 0,
        })
    }
    fn serialize_tuple(self, _: usize) -> Result<Seq<'a>, Found> {
        self.serialize_seq(None)
    }
    fn serialize_tuple_struct(self, _: &'static str, _: usize) -> Result<Seq<'a>, Found> {
        self.serialize_seq(None)
    }
    fn serialize_tuple_variant(
        self,
        _: &'static str,
        _: u32,
        _: &'static str,
        _: usize,
    ) -> Result<Seq<'a>, Found> {
        self.serialize_seq(None)
    }
    fn serialize_map(self, _: Option<usize>) -> Result<Seq<'a>, Found> {
        self.serialize_seq(None)
    }
    fn serialize_struct(self, _: &'static str, _: usize) -> Result<Seq<'a>, Found> {
        self.serialize_seq(None)
    }
    fn serialize_struct_variant(
        self,
        _: &'static str,
        _: u32,
        _: &'static str,
        _: usize,
    ) -> Result<Seq<'a>, Found> {
        self.serialize_seq(None)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(serde::Serialize)]
    struct Inner {
        ok: f64,
        bad: Option<f64>,
    }

    #[derive(serde::Serialize)]
    struct Outer {
        rows: Vec<Inner>,
        pair: [f64; 2],
    }

    #[test]
    fn the_first_non_finite_number_is_named_by_its_path() {
        let mut v = Outer {
            rows: vec![
                Inner { ok: 1.0, bad: None },
                Inner {
                    ok: 2.0,
                    bad: Some(f64::NAN),
                },
            ],
            pair: [0.0, f64::INFINITY],
        };
        assert_eq!(first_non_finite(&v).as_deref(), Some("rows[1].bad"));
        v.rows[1].bad = Some(3.0);
        assert_eq!(first_non_finite(&v).as_deref(), Some("pair[1]"));
        v.pair[1] = 4.0;
        assert_eq!(first_non_finite(&v), None);
    }
}
