//! Parsing `hone:` records out of decoded defmt frames.
//!
//! A record is a frame whose format string reads `hone:<kind> key={=type} key={=type} ...`. The
//! parser works on the format string's pieces (literal text and parameters with their declared
//! type) alongside each parameter as the decoder displayed it, so values are matched to keys by
//! position in the format string, never by searching the rendered text.

use std::fmt;

/// Prefix that marks a frame as a record.
pub const RECORD_PREFIX: &str = "hone:";

/// Declared type of a record field, from the `{=type}` parameter.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FieldType {
    /// `u8` to `u64`.
    Unsigned,
    /// `i8` to `i64`.
    Signed,
    /// `bool`.
    Bool,
    /// `str` or `istr`.
    Str,
    /// `[u8]` or `[u8; N]`.
    Bytes,
}

/// One piece of a frame's format string, with the rendered value for parameters.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Piece<'a> {
    /// Literal text between parameters.
    Literal(&'a str),
    /// A parameter: its type, or `None` for a type records never use, and its rendered value.
    Param {
        /// Declared type.
        ty: Option<FieldType>,
        /// The value as the decoder displayed it.
        shown: &'a str,
    },
}

/// A typed field value.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Value {
    /// Unsigned integer.
    Unsigned(u64),
    /// Signed integer.
    Signed(i64),
    /// Boolean.
    Bool(bool),
    /// Text.
    Str(String),
    /// Bytes.
    Bytes(Vec<u8>),
}

/// A parsed record: its kind and its fields in order.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Record {
    /// Record kind, the word after `hone:`.
    pub kind: String,
    /// Fields as `(key, value)` in format-string order.
    pub fields: Vec<(String, Value)>,
}

/// Why a frame that claims to be a record could not be parsed.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RecordError(pub String);

impl fmt::Display for RecordError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for RecordError {}

fn err(msg: impl Into<String>) -> RecordError {
    RecordError(msg.into())
}

/// Parses a list like `[1, 2, 255]` as the decoder shows a `{=[u8]}` parameter.
///
/// # Errors
/// When the text is not a bracketed, comma-separated list of values 0..=255.
pub fn parse_byte_list(shown: &str) -> Result<Vec<u8>, RecordError> {
    let inner = shown
        .strip_prefix('[')
        .and_then(|s| s.strip_suffix(']'))
        .ok_or_else(|| err(format!("byte list not in brackets: {shown:.40}")))?;
    if inner.trim().is_empty() {
        return Ok(Vec::new());
    }
    inner
        .split(',')
        .map(|t| {
            t.trim()
                .parse::<u8>()
                .map_err(|_| err(format!("not a byte: `{}`", t.trim())))
        })
        .collect()
}

fn parse_value(ty: FieldType, shown: &str) -> Result<Value, RecordError> {
    let bad = || err(format!("`{shown:.40}` is not a valid {ty:?} value"));
    Ok(match ty {
        FieldType::Unsigned => Value::Unsigned(shown.parse().map_err(|_| bad())?),
        FieldType::Signed => Value::Signed(shown.parse().map_err(|_| bad())?),
        FieldType::Bool => Value::Bool(shown.parse().map_err(|_| bad())?),
        FieldType::Str => Value::Str(shown.to_owned()),
        FieldType::Bytes => Value::Bytes(parse_byte_list(shown)?),
    })
}

/// Parses a frame's pieces into a record.
///
/// Returns `Ok(None)` for frames that are not records (their text does not start with
/// [`RECORD_PREFIX`]): ordinary log lines pass through.
///
/// # Errors
/// When the frame starts with the prefix but does not follow the `key={=type}` shape, uses a
/// type records never use, repeats a key, or a value does not parse as its declared type.
pub fn parse_record(pieces: &[Piece<'_>]) -> Result<Option<Record>, RecordError> {
    let Some(Piece::Literal(first)) = pieces.first() else {
        return Ok(None);
    };
    let Some(after) = first.strip_prefix(RECORD_PREFIX) else {
        return Ok(None);
    };
    let (kind, mut pending) = match after.find(' ') {
        Some(i) => (&after[..i], &after[i..]),
        None => (after, ""),
    };
    if kind.is_empty() || !kind.chars().all(|c| c.is_ascii_lowercase() || c == '-') {
        return Err(err(format!("bad record kind `{kind}`")));
    }
    let mut fields: Vec<(String, Value)> = Vec::new();
    let mut key: Option<&str> = key_of(pending)?;
    for piece in &pieces[1..] {
        match piece {
            Piece::Literal(text) => {
                if key.is_some() {
                    return Err(err(format!("field `{}` has no value", key.unwrap_or(""))));
                }
                pending = text;
                key = key_of(pending)?;
            }
            Piece::Param { ty, shown } => {
                let k = key
                    .take()
                    .ok_or_else(|| err(format!("value `{shown:.40}` has no key")))?;
                let ty =
                    ty.ok_or_else(|| err(format!("field `{k}` has a type records never use")))?;
                if fields.iter().any(|(have, _)| have == k) {
                    return Err(err(format!("field `{k}` repeated")));
                }
                fields.push((k.to_owned(), parse_value(ty, shown)?));
            }
        }
    }
    if let Some(k) = key {
        return Err(err(format!("field `{k}` has no value")));
    }
    Ok(Some(Record {
        kind: kind.to_owned(),
        fields,
    }))
}

/// The key a literal introduces: `" name="` gives `name`; a literal of only spaces gives none.
fn key_of(literal: &str) -> Result<Option<&str>, RecordError> {
    if literal.trim().is_empty() {
        return Ok(None);
    }
    let k = literal
        .strip_prefix(' ')
        .and_then(|s| s.strip_suffix('='))
        .ok_or_else(|| err(format!("expected ` key=`, found `{literal}`")))?;
    if k.is_empty() || !k.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
        return Err(err(format!("bad field name `{k}`")));
    }
    Ok(Some(k))
}

impl Record {
    fn get(&self, key: &str) -> Result<&Value, RecordError> {
        self.fields
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, v)| v)
            .ok_or_else(|| err(format!("`{}` record lacks field `{key}`", self.kind)))
    }

    fn wrong(&self, key: &str, want: &str) -> RecordError {
        err(format!("`{}` field `{key}` is not {want}", self.kind))
    }

    /// Unsigned field `key`.
    ///
    /// # Errors
    /// When the field is missing or has another type.
    pub fn unsigned(&self, key: &str) -> Result<u64, RecordError> {
        match self.get(key)? {
            Value::Unsigned(v) => Ok(*v),
            _ => Err(self.wrong(key, "unsigned")),
        }
    }

    /// Signed field `key`.
    ///
    /// # Errors
    /// When the field is missing or has another type.
    pub fn signed(&self, key: &str) -> Result<i64, RecordError> {
        match self.get(key)? {
            Value::Signed(v) => Ok(*v),
            _ => Err(self.wrong(key, "signed")),
        }
    }

    /// Boolean field `key`.
    ///
    /// # Errors
    /// When the field is missing or has another type.
    pub fn boolean(&self, key: &str) -> Result<bool, RecordError> {
        match self.get(key)? {
            Value::Bool(v) => Ok(*v),
            _ => Err(self.wrong(key, "a bool")),
        }
    }

    /// Text field `key`.
    ///
    /// # Errors
    /// When the field is missing or has another type.
    pub fn text(&self, key: &str) -> Result<&str, RecordError> {
        match self.get(key)? {
            Value::Str(v) => Ok(v),
            _ => Err(self.wrong(key, "text")),
        }
    }

    /// Byte field `key`.
    ///
    /// # Errors
    /// When the field is missing or has another type.
    pub fn bytes(&self, key: &str) -> Result<&[u8], RecordError> {
        match self.get(key)? {
            Value::Bytes(v) => Ok(v),
            _ => Err(self.wrong(key, "bytes")),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(ty: FieldType, shown: &str) -> Piece<'_> {
        Piece::Param {
            ty: Some(ty),
            shown,
        }
    }

    #[test]
    fn parses_typed_fields_in_order() {
        let pieces = [
            Piece::Literal("hone:span name="),
            p(FieldType::Str, "dot_i8"),
            Piece::Literal(" work="),
            p(FieldType::Unsigned, "32000"),
            Piece::Literal(" total="),
            p(FieldType::Signed, "-17"),
            Piece::Literal(" ok="),
            p(FieldType::Bool, "true"),
        ];
        let r = parse_record(&pieces).unwrap().unwrap();
        assert_eq!(r.kind, "span");
        assert_eq!(r.text("name").unwrap(), "dot_i8");
        assert_eq!(r.unsigned("work").unwrap(), 32000);
        assert_eq!(r.signed("total").unwrap(), -17);
        assert!(r.boolean("ok").unwrap());
        assert!(r.unsigned("name").is_err());
        assert!(r.unsigned("missing").is_err());
        let keys: Vec<&str> = r.fields.iter().map(|(k, _)| k.as_str()).collect();
        assert_eq!(keys, ["name", "work", "total", "ok"]);
    }

    #[test]
    fn byte_values_with_spaces_stay_one_field() {
        let pieces = [
            Piece::Literal("hone:blob id="),
            p(FieldType::Unsigned, "0"),
            Piece::Literal(" data="),
            p(FieldType::Bytes, "[0, 1, 255, 16]"),
        ];
        let r = parse_record(&pieces).unwrap().unwrap();
        assert_eq!(r.bytes("data").unwrap(), &[0, 1, 255, 16]);
        assert_eq!(parse_byte_list("[]").unwrap(), Vec::<u8>::new());
        assert!(parse_byte_list("[256]").is_err());
        assert!(parse_byte_list("1, 2").is_err());
        assert!(parse_byte_list("[1,, 2]").is_err());
    }

    #[test]
    fn ordinary_lines_are_not_records() {
        assert_eq!(parse_record(&[Piece::Literal("hello")]).unwrap(), None);
        assert_eq!(
            parse_record(&[Piece::Literal("x="), p(FieldType::Unsigned, "1")]).unwrap(),
            None
        );
        assert_eq!(parse_record(&[]).unwrap(), None);
        let bare = parse_record(&[Piece::Literal("hone:mark")])
            .unwrap()
            .unwrap();
        assert_eq!(bare.kind, "mark");
        assert!(bare.fields.is_empty());
    }

    #[test]
    fn malformed_records_are_errors() {
        // value without key
        let e = parse_record(&[Piece::Literal("hone:x "), p(FieldType::Unsigned, "1")]);
        assert!(e.is_err());
        // key without value
        assert!(parse_record(&[Piece::Literal("hone:x a=")]).is_err());
        // value that does not parse as its type
        let e = parse_record(&[Piece::Literal("hone:x a="), p(FieldType::Unsigned, "-3")]);
        assert!(e.unwrap_err().0.contains("-3"));
        // repeated key
        let e = parse_record(&[
            Piece::Literal("hone:x a="),
            p(FieldType::Unsigned, "1"),
            Piece::Literal(" a="),
            p(FieldType::Unsigned, "2"),
        ]);
        assert!(e.unwrap_err().0.contains("repeated"));
        // a type records never use
        let e = parse_record(&[
            Piece::Literal("hone:x a="),
            Piece::Param {
                ty: None,
                shown: "1.5",
            },
        ]);
        assert!(e.is_err());
        // literal that is not ` key=`
        let e = parse_record(&[
            Piece::Literal("hone:x a="),
            p(FieldType::Unsigned, "1"),
            Piece::Literal(", b="),
            p(FieldType::Unsigned, "2"),
        ]);
        assert!(e.is_err());
        assert!(parse_record(&[Piece::Literal("hone:Bad")]).is_err());
    }
}
