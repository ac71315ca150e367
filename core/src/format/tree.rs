//! A model file's syntax tree, the same for TOML and JSON.
//!
//! The file is first parsed into a [`Value`] tree (syntax errors carry line and column), then
//! [`super::read`] walks the tree and builds the model, so that every later error can name the
//! element and the key. Parsing into our own tree also lets us reject what the generic parsers
//! accept silently: duplicate keys in JSON objects, and nesting deeper than any model needs.

use serde::de::{self, DeserializeSeed, MapAccess, SeqAccess, Visitor};
use std::fmt;

/// Deepest nesting of arrays and tables accepted; a model needs four levels.
pub const MAX_DEPTH: usize = 32;

/// A key of a table. The keys that every node and link repeats are not copied for each one.
pub type Key = std::borrow::Cow<'static, str>;

pub(crate) fn key(text: &str) -> Key {
    // The keys of node and link entries (a large model has millions of them) are shared.
    match shared_key(text) {
        Some(k) => Key::Borrowed(k),
        None => Key::Owned(text.to_owned()),
    }
}

/// Slots of [`shared_key`]'s table (a power of two, well above the number of element keys).
const KEY_SLOTS: usize = 256;

/// A cheap hash of a key for [`shared_key`]: its length and three of its bytes.
fn key_slot(text: &[u8]) -> usize {
    let n = text.len();
    let (first, last, mid) = match n {
        0 => (0, 0, 0),
        _ => (text[0] as usize, text[n - 1] as usize, text[n / 2] as usize),
    };
    (n.wrapping_mul(131) ^ first.wrapping_mul(31) ^ last.wrapping_mul(7) ^ mid.wrapping_mul(17)) % KEY_SLOTS
}

/// The shared copy of an element key, found with one hash and one comparison (reading a large
/// model looks up some ten keys per element; a binary search over the sorted list took 15 % of
/// the reading time). Keys whose slot is taken by another key are found by a binary search.
fn shared_key(text: &str) -> Option<&'static str> {
    static TABLE: std::sync::OnceLock<[Option<&'static str>; KEY_SLOTS]> = std::sync::OnceLock::new();
    let shared = super::schema::element_keys();
    let table = TABLE.get_or_init(|| {
        let mut table = [None; KEY_SLOTS];
        for &k in shared {
            let slot = &mut table[key_slot(k.as_bytes())];
            if slot.is_none() {
                *slot = Some(k);
            }
        }
        table
    });
    match table[key_slot(text.as_bytes())] {
        Some(k) if k == text => Some(k),
        _ => shared.binary_search(&text).ok().map(|i| shared[i]),
    }
}

/// Reads a table key as a [`Key`].
struct KeySeed;

impl<'de> DeserializeSeed<'de> for KeySeed {
    type Value = Key;
    fn deserialize<D: de::Deserializer<'de>>(self, deserializer: D) -> Result<Key, D::Error> {
        deserializer.deserialize_str(self)
    }
}

impl<'de> Visitor<'de> for KeySeed {
    type Value = Key;
    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a key")
    }
    fn visit_str<E>(self, v: &str) -> Result<Key, E> {
        Ok(key(v))
    }
}

/// One value of a model file.
#[derive(Clone, Debug, PartialEq)]
pub enum Value {
    /// true or false
    Bool(bool),
    /// An integer that fits in i64.
    Int(i64),
    /// A floating-point number (may be NaN or infinite in TOML).
    Float(f64),
    /// A string.
    Str(String),
    /// An array.
    Array(Vec<Value>),
    /// A table or object, keys in file order.
    Table(Vec<(Key, Value)>),
    /// A TOML date or time (never valid in a model).
    Date,
    /// A whole number beyond 64 bits (its approximate value): always refused, naming the key.
    HugeInt(f64),
}

impl Value {
    /// What kind of value this is, for messages ("a string", "a table"...).
    pub fn kind(&self) -> &'static str {
        match self {
            Value::Bool(_) => "a boolean",
            Value::Int(_) | Value::Float(_) => "a number",
            Value::Str(_) => "a string",
            Value::Array(_) => "an array",
            Value::Table(_) => "a table",
            Value::Date => "a date",
            Value::HugeInt(_) => "a whole number too large for 64 bits",
        }
    }
}

/// Initial capacity of a table's entries: the most keys a node or link of a written model has.
const TABLE_CAPACITY: usize = 10;

/// Tables with more keys than this check duplicates with a hash set.
const SCAN_LIMIT: usize = 32;

const TOML_DATETIME_KEY: &str = "$__toml_private_datetime";

/// Parses one value into a [`Value`] at nesting `depth` (0: the whole file).
pub(crate) struct Seed {
    pub(crate) depth: usize,
}

impl<'de> DeserializeSeed<'de> for Seed {
    type Value = Value;
    fn deserialize<D: de::Deserializer<'de>>(self, deserializer: D) -> Result<Value, D::Error> {
        deserializer.deserialize_any(self)
    }
}

impl<'de> Visitor<'de> for Seed {
    type Value = Value;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a model value")
    }

    fn visit_bool<E>(self, v: bool) -> Result<Value, E> {
        Ok(Value::Bool(v))
    }
    fn visit_i64<E>(self, v: i64) -> Result<Value, E> {
        Ok(Value::Int(v))
    }
    fn visit_u64<E>(self, v: u64) -> Result<Value, E> {
        Ok(i64::try_from(v).map(Value::Int).unwrap_or(Value::Float(v as f64)))
    }
    fn visit_i128<E>(self, v: i128) -> Result<Value, E> {
        Ok(i64::try_from(v).map(Value::Int).unwrap_or(Value::HugeInt(v as f64)))
    }
    fn visit_u128<E>(self, v: u128) -> Result<Value, E> {
        Ok(i64::try_from(v).map(Value::Int).unwrap_or(Value::HugeInt(v as f64)))
    }
    fn visit_f64<E>(self, v: f64) -> Result<Value, E> {
        Ok(Value::Float(v))
    }
    fn visit_str<E>(self, v: &str) -> Result<Value, E> {
        Ok(Value::Str(v.to_owned()))
    }
    fn visit_string<E>(self, v: String) -> Result<Value, E> {
        Ok(Value::Str(v))
    }
    fn visit_unit<E: de::Error>(self) -> Result<Value, E> {
        Err(E::custom("null is not a valid value in a model; leave the key out instead"))
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Value, A::Error> {
        if self.depth >= MAX_DEPTH {
            return Err(de::Error::custom(format!("nesting deeper than {MAX_DEPTH} levels")));
        }
        let mut items = Vec::new();
        while let Some(v) = seq.next_element_seed(Seed { depth: self.depth + 1 })? {
            items.push(v);
        }
        Ok(Value::Array(items))
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Value, A::Error> {
        if self.depth >= MAX_DEPTH {
            return Err(de::Error::custom(format!("nesting deeper than {MAX_DEPTH} levels")));
        }
        // Room for the keys of the largest element table at once: one allocation per node or
        // link instead of three growing ones.
        let mut entries: Vec<(Key, Value)> = Vec::with_capacity(TABLE_CAPACITY);
        // Duplicate keys: a scan while the table is small, a hash set beyond that, so that a
        // table with very many keys is not quadratic.
        let mut seen: Option<std::collections::HashSet<Key>> = None;
        while let Some(key) = map.next_key_seed(KeySeed)? {
            if key == TOML_DATETIME_KEY {
                let _: de::IgnoredAny = map.next_value()?;
                return Ok(Value::Date);
            }
            let duplicate = match &mut seen {
                Some(set) => !set.insert(key.clone()),
                None => entries.iter().any(|(k, _)| *k == key),
            };
            if duplicate {
                return Err(de::Error::custom(format!("duplicate key '{key}'")));
            }
            if seen.is_none() && entries.len() >= SCAN_LIMIT {
                seen = Some(entries.iter().map(|(k, _)| k.clone()).chain(std::iter::once(key.clone())).collect());
            }
            let value = map.next_value_seed(Seed { depth: self.depth + 1 })?;
            entries.push((key, value));
        }
        Ok(Value::Table(entries))
    }
}

/// A syntax error with its position (1-based line and column) when known.
#[derive(Clone, Debug, PartialEq)]
pub struct SyntaxError {
    /// What the parser said.
    pub message: String,
    /// Line and column, 1-based.
    pub position: Option<(usize, usize)>,
}

/// Line and column (1-based, columns in characters) of a byte offset.
pub fn line_column(text: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(text.len());
    let before = &text[..text.floor_char_boundary_compat(offset)];
    let line = before.matches('\n').count() + 1;
    let col = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
    (line, col)
}

trait FloorCharBoundary {
    fn floor_char_boundary_compat(&self, index: usize) -> usize;
}

impl FloorCharBoundary for str {
    fn floor_char_boundary_compat(&self, mut index: usize) -> usize {
        while index > 0 && !self.is_char_boundary(index) {
            index -= 1;
        }
        index
    }
}

/// Parses TOML text into a value tree.
pub fn parse_toml(text: &str) -> Result<Value, SyntaxError> {
    let to_err = |e: toml::de::Error| SyntaxError {
        message: e.message().trim().to_owned(),
        position: e.span().map(|s| line_column(text, s.start)),
    };
    let de = toml::Deserializer::parse(text).map_err(to_err)?;
    Seed { depth: 0 }.deserialize(de).map_err(to_err)
}

/// Parses JSON text into a value tree.
pub fn parse_json(text: &str) -> Result<Value, SyntaxError> {
    let to_err = |e: serde_json::Error| {
        let message = e.to_string();
        // serde_json appends " at line L column C"; the position is reported separately.
        let message = match message.rfind(" at line ") {
            Some(i) => message[..i].to_owned(),
            None => message,
        };
        SyntaxError { message, position: (e.line() > 0).then(|| (e.line(), e.column())) }
    };
    let mut de = serde_json::Deserializer::from_str(text);
    let value = Seed { depth: 0 }.deserialize(&mut de).map_err(to_err)?;
    de.end().map_err(to_err)?;
    Ok(value)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The hashed lookup of shared keys finds every element key as itself (also those whose
    /// slot another key took) and nothing else.
    #[test]
    fn shared_keys_are_found_by_hash_or_search() {
        for &k in super::super::schema::element_keys() {
            assert_eq!(shared_key(k), Some(k));
            assert!(matches!(key(k), Key::Borrowed(b) if b == k));
        }
        for other in ["", "ids", "Id", "elevation ", "diametre", "x1", "statu"] {
            assert_eq!(shared_key(other), None, "{other:?}");
        }
    }

    #[test]
    fn json_duplicate_keys_are_rejected() {
        let e = parse_json("{\"a\": 1,\n \"a\": 2}").unwrap_err();
        assert!(e.message.contains("duplicate key 'a'"), "{e:?}");
        assert_eq!(e.position.map(|p| p.0), Some(2));
    }

    #[test]
    fn duplicate_keys_in_a_large_table_are_found_quickly() {
        // 200 000 distinct keys, then a repeat of an early one: linear time, not quadratic.
        let mut text = String::from("{");
        for i in 0..200_000 {
            text.push_str(&format!("\"k{i}\": {i}, "));
        }
        text.push_str("\"k17\": 0}");
        let e = parse_json(&text).unwrap_err();
        assert!(e.message.contains("duplicate key 'k17'"), "{e:?}");
        let ok = text.replacen("\"k17\": 0}", "\"last\": 0}", 1);
        match parse_json(&ok).unwrap() {
            Value::Table(entries) => assert_eq!(entries.len(), 200_001),
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn deep_nesting_is_rejected_not_overflowed() {
        let text = format!("{}{}", "[".repeat(100_000), "]".repeat(100_000));
        assert!(parse_json(&text).is_err());
        let text = format!("a = {}{}", "[".repeat(100_000), "]".repeat(100_000));
        assert!(parse_toml(&text).is_err());
    }

    #[test]
    fn toml_positions() {
        let e = parse_toml("a = 1\nb = = 2\n").unwrap_err();
        assert_eq!(e.position.map(|p| p.0), Some(2), "{e:?}");
    }
}
