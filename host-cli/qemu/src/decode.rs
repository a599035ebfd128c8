//! Decoding the defmt frames a firmware wrote to QEMU's stdout.

use std::path::Path;

use defmt_decoder::{DecodeError, Frame, Table};
use defmt_parser::{Fragment, Level, Type};

use crate::record::{parse_record, FieldType, Piece, Record, RECORD_PREFIX};
use crate::DeviceError;

/// One decoded log line.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct LogLine {
    /// Log level (`"INFO"`, `"ERROR"`, ...), or `None` for `println`-style frames.
    pub level: Option<&'static str>,
    /// The message as the decoder renders it.
    pub text: String,
    /// The parsed record, when the line is one.
    pub record: Option<Record>,
}

/// Loads the defmt table from an ELF image.
///
/// # Errors
/// [`DeviceError::DefmtTable`] when the image has no `.defmt` section or its table is unreadable.
pub fn load_table(elf_bytes: &[u8], elf_path: &Path) -> Result<Table, DeviceError> {
    let table_err = |detail: String| DeviceError::DefmtTable {
        path: elf_path.to_owned(),
        detail,
    };
    Table::parse(elf_bytes)
        .map_err(|e| table_err(format!("{e:#}")))?
        .ok_or_else(|| table_err("no `.defmt` section (was it linked with -Tdefmt.x?)".into()))
}

/// Decodes every frame in `stream` (the bytes QEMU wrote to stdout) with `table`.
///
/// # Errors
/// [`DeviceError::Decode`] when a frame is malformed, or the stream ends inside a frame;
/// [`DeviceError::Protocol`] when a `hone:` record is malformed.
pub fn decode_stream(table: &Table, stream: &[u8]) -> Result<Vec<LogLine>, DeviceError> {
    let mut decoder = table.new_stream_decoder();
    decoder.received(stream);
    let mut lines = Vec::new();
    loop {
        match decoder.decode() {
            Ok(frame) => {
                let line = to_line(&frame).map_err(|e| DeviceError::Protocol {
                    line: lines.len(),
                    detail: format!("{e} (line `{}`)", frame.display_message()),
                })?;
                lines.push(line);
            }
            Err(DecodeError::UnexpectedEof) => break,
            Err(DecodeError::Malformed) => {
                return Err(DeviceError::Decode {
                    frames: lines.len(),
                    detail: "malformed frame (does the ELF match the firmware that ran?)".into(),
                })
            }
        }
    }
    // rzCOBS frames end in a zero byte; anything after the last one is a frame cut short.
    let tail = stream.iter().rev().take_while(|&&b| b != 0).count();
    if tail > 0 && stream.len() > tail {
        return Err(DeviceError::Decode {
            frames: lines.len(),
            detail: format!("output ends inside a frame ({tail} bytes after the last frame)"),
        });
    }
    if tail > 0 && lines.is_empty() {
        return Err(DeviceError::Decode {
            frames: 0,
            detail: format!("{tail} bytes of output but no complete frame"),
        });
    }
    Ok(lines)
}

fn level_name(level: Option<Level>) -> Option<&'static str> {
    level.map(|l| match l {
        Level::Trace => "TRACE",
        Level::Debug => "DEBUG",
        Level::Info => "INFO",
        Level::Warn => "WARN",
        Level::Error => "ERROR",
    })
}

fn field_type(ty: &Type) -> Option<FieldType> {
    match ty {
        Type::U8 | Type::U16 | Type::U32 | Type::U64 => Some(FieldType::Unsigned),
        Type::I8 | Type::I16 | Type::I32 | Type::I64 => Some(FieldType::Signed),
        Type::Bool => Some(FieldType::Bool),
        Type::Str | Type::IStr => Some(FieldType::Str),
        Type::U8Slice | Type::U8Array(_) => Some(FieldType::Bytes),
        _ => None,
    }
}

fn to_line(frame: &Frame<'_>) -> Result<LogLine, crate::record::RecordError> {
    let fragments = frame.fragments();
    let shown: Vec<String> = frame.display_fragments().collect();
    let record = if shown.len() == fragments.len() {
        let pieces: Vec<Piece<'_>> = fragments
            .iter()
            .zip(&shown)
            .map(|(f, s)| match f {
                Fragment::Literal(text) => Piece::Literal(text.as_ref()),
                Fragment::Parameter(p) => Piece::Param {
                    ty: field_type(&p.ty),
                    shown: s,
                },
            })
            .collect();
        parse_record(&pieces)?
    } else if frame
        .display_message()
        .to_string()
        .starts_with(RECORD_PREFIX)
    {
        return Err(crate::record::RecordError(
            "the decoder could not render every field".into(),
        ));
    } else {
        None
    };
    Ok(LogLine {
        level: level_name(frame.level()),
        text: frame.display_message().to_string(),
        record,
    })
}
