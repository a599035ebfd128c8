//! Assembling the records of one run into typed results, including the byte payloads.

use std::collections::BTreeMap;

use crate::decode::LogLine;
use crate::record::{Record, RecordError};
use crate::DeviceError;

/// Protocol version this host understands (the firmware's `record::PROTOCOL`).
pub const PROTOCOL: u64 = 1;

/// What one counter tick means on the board, from the `boot` record.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum TickUnit {
    /// One tick is `num / den` instructions (QEMU with `-icount shift=0`).
    Instructions {
        /// Numerator.
        num: u64,
        /// Denominator.
        den: u64,
    },
    /// One tick is `num / den` core cycles (hardware).
    Cycles {
        /// Numerator.
        num: u64,
        /// Denominator.
        den: u64,
    },
}

/// The `boot` record.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Boot {
    /// Board name the firmware reports.
    pub board: String,
    /// Meaning of one counter tick.
    pub unit: TickUnit,
}

/// The `calib` record: the counter checked against a spin loop of known length.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Calibration {
    /// Extra spin-loop iterations of the long run over the short one.
    pub iterations: u64,
    /// Instructions those iterations retire.
    pub instructions: u64,
    /// Ticks they took.
    pub ticks: u64,
    /// The firmware's verdict on the documented ratio.
    pub ok: bool,
}

impl Calibration {
    /// Measured instructions per tick.
    #[must_use]
    pub fn instructions_per_tick(&self) -> f64 {
        self.instructions as f64 / self.ticks.max(1) as f64
    }
}

/// A `span` record: one measured stretch of work.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Span {
    /// Span name, e.g. `dot_i8`.
    pub name: String,
    /// Units of work (multiply-accumulates for a dot product).
    pub work: u64,
    /// Counter ticks.
    pub ticks: u64,
    /// Ticks converted to instructions or cycles by the firmware.
    pub units: u64,
}

impl Span {
    /// Instructions (or cycles) per unit of work; `None` when the span did no work.
    #[must_use]
    pub fn units_per_work(&self) -> Option<f64> {
        (self.work > 0).then(|| self.units as f64 / self.work as f64)
    }
}

/// A `dot` record: the result of a repeated dot product, for checking on the host.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DotResult {
    /// Product name, `dot_i8` or `dot_i16`.
    pub name: String,
    /// Vector length.
    pub len: u64,
    /// Repetitions summed into `total`.
    pub reps: u64,
    /// Generator seed of the operands.
    pub seed: u64,
    /// Sum of all repetitions.
    pub total: i64,
}

/// A `sensor` record: a summary of raw converter readings (hardware boards).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct SensorSummary {
    /// Sensor name, e.g. `adc_gpio26`.
    pub name: String,
    /// Readings taken.
    pub samples: u64,
    /// Smallest reading.
    pub min: u64,
    /// Largest reading.
    pub max: u64,
    /// Mean reading, rounded down.
    pub mean: u64,
}

/// The `mem` record: static memory and stack figures the firmware read from linker symbols.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Memory {
    /// `.text` bytes.
    pub text: u64,
    /// `.rodata` bytes.
    pub rodata: u64,
    /// `.data` bytes.
    pub data: u64,
    /// `.bss` bytes.
    pub bss: u64,
    /// `.uninit` bytes.
    pub uninit: u64,
    /// RAM taken by statics.
    pub static_ram: u64,
    /// Stack region size.
    pub stack_size: u64,
    /// Deepest stack use seen.
    pub stack_peak: u64,
}

/// A byte payload recovered from `blob-begin` / `blob` / `blob-end` records.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Blob {
    /// Payload id, unique within the run.
    pub id: u64,
    /// Payload name.
    pub name: String,
    /// The bytes, checked against the length, chunk count and CRC-32 the firmware sent.
    pub bytes: Vec<u8>,
}

/// Everything the records of one run say.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Report {
    /// Boot record; `None` if the firmware died before it.
    pub boot: Option<Boot>,
    /// Calibration record.
    pub calibration: Option<Calibration>,
    /// Measured spans in order.
    pub spans: Vec<Span>,
    /// Dot-product results in order.
    pub dots: Vec<DotResult>,
    /// Sensor summaries in order.
    pub sensors: Vec<SensorSummary>,
    /// Memory record.
    pub memory: Option<Memory>,
    /// Completed payloads in order of completion.
    pub blobs: Vec<Blob>,
    /// Texts of `error` records.
    pub errors: Vec<String>,
    /// File and line of a panic.
    pub panic: Option<(String, u64)>,
    /// Program counter of a CPU fault.
    pub fault: Option<u64>,
    /// Code of the `done` record.
    pub done: Option<i64>,
}

struct OpenBlob {
    name: String,
    declared: u64,
    bytes: Vec<u8>,
    chunks: u64,
}

impl Report {
    /// The span named `name`.
    #[must_use]
    pub fn span(&self, name: &str) -> Option<&Span> {
        self.spans.iter().find(|s| s.name == name)
    }

    /// The completed payload named `name`.
    #[must_use]
    pub fn blob(&self, name: &str) -> Option<&Blob> {
        self.blobs.iter().find(|b| b.name == name)
    }

    /// Builds the report from decoded log lines, checking the protocol as it goes.
    ///
    /// # Errors
    /// [`DeviceError::Protocol`] when a record lacks a field, comes twice where once is allowed,
    /// carries an unknown protocol version, reports units that disagree with its ticks, or when a
    /// payload is out of order, incomplete, or fails its length, chunk-count or CRC check.
    pub fn from_lines(lines: &[LogLine]) -> Result<Self, DeviceError> {
        let mut report = Self::default();
        let mut open: BTreeMap<u64, OpenBlob> = BTreeMap::new();
        for (i, line) in lines.iter().enumerate() {
            if let Some(record) = &line.record {
                report
                    .apply(record, &mut open)
                    .map_err(|e| DeviceError::Protocol {
                        line: i,
                        detail: format!("{e} (line `{:.120}`)", line.text),
                    })?;
            }
        }
        if let Some((id, blob)) = open.into_iter().next() {
            return Err(DeviceError::Protocol {
                line: lines.len(),
                detail: format!(
                    "payload {id} `{}` never ended ({} of {} bytes arrived)",
                    blob.name,
                    blob.bytes.len(),
                    blob.declared
                ),
            });
        }
        Ok(report)
    }

    fn apply(&mut self, r: &Record, open: &mut BTreeMap<u64, OpenBlob>) -> Result<(), RecordError> {
        let e = |m: String| RecordError(m);
        match r.kind.as_str() {
            "boot" => {
                let proto = r.unsigned("proto")?;
                if proto != PROTOCOL {
                    return Err(e(format!(
                        "firmware speaks protocol {proto}, host {PROTOCOL}"
                    )));
                }
                let (num, den) = (r.unsigned("num")?, r.unsigned("den")?);
                if num == 0 || den == 0 {
                    return Err(e(format!("tick ratio {num}/{den} has a zero")));
                }
                let unit = match r.text("unit")? {
                    "insn" => TickUnit::Instructions { num, den },
                    "cycle" => TickUnit::Cycles { num, den },
                    other => return Err(e(format!("unknown tick unit `{other}`"))),
                };
                once(&self.boot, "boot")?;
                self.boot = Some(Boot {
                    board: r.text("board")?.to_owned(),
                    unit,
                });
            }
            "calib" => {
                once(&self.calibration, "calib")?;
                self.calibration = Some(Calibration {
                    iterations: r.unsigned("iters")?,
                    instructions: r.unsigned("insns")?,
                    ticks: r.unsigned("ticks")?,
                    ok: r.boolean("ok")?,
                });
            }
            "span" => {
                let span = Span {
                    name: r.text("name")?.to_owned(),
                    work: r.unsigned("work")?,
                    ticks: r.unsigned("ticks")?,
                    units: r.unsigned("units")?,
                };
                let (num, den) = match self.boot.as_ref().map(|b| b.unit) {
                    Some(TickUnit::Instructions { num, den } | TickUnit::Cycles { num, den }) => {
                        (num, den)
                    }
                    None => return Err(e("span before boot record".into())),
                };
                let expect = u128::from(span.ticks) * u128::from(num) / u128::from(den);
                if u128::from(span.units) != expect {
                    return Err(e(format!(
                        "span `{}`: {} units for {} ticks, expected {expect}",
                        span.name, span.units, span.ticks
                    )));
                }
                self.spans.push(span);
            }
            "dot" => self.dots.push(DotResult {
                name: r.text("name")?.to_owned(),
                len: r.unsigned("len")?,
                reps: r.unsigned("reps")?,
                seed: r.unsigned("seed")?,
                total: r.signed("total")?,
            }),
            "sensor" => self.sensors.push(SensorSummary {
                name: r.text("name")?.to_owned(),
                samples: r.unsigned("samples")?,
                min: r.unsigned("min")?,
                max: r.unsigned("max")?,
                mean: r.unsigned("mean")?,
            }),
            "mem" => {
                once(&self.memory, "mem")?;
                self.memory = Some(Memory {
                    text: r.unsigned("text")?,
                    rodata: r.unsigned("rodata")?,
                    data: r.unsigned("data")?,
                    bss: r.unsigned("bss")?,
                    uninit: r.unsigned("uninit")?,
                    static_ram: r.unsigned("static_ram")?,
                    stack_size: r.unsigned("stack_size")?,
                    stack_peak: r.unsigned("stack_peak")?,
                });
            }
            "blob-begin" => {
                let id = r.unsigned("id")?;
                let declared = r.unsigned("len")?;
                if open.contains_key(&id) || self.blobs.iter().any(|b| b.id == id) {
                    return Err(e(format!("payload id {id} used twice")));
                }
                let capacity = usize::try_from(declared).unwrap_or(0).min(1 << 24);
                open.insert(
                    id,
                    OpenBlob {
                        name: r.text("name")?.to_owned(),
                        declared,
                        bytes: Vec::with_capacity(capacity),
                        chunks: 0,
                    },
                );
            }
            "blob" => {
                let id = r.unsigned("id")?;
                let off = r.unsigned("off")?;
                let data = r.bytes("data")?;
                let blob = open
                    .get_mut(&id)
                    .ok_or_else(|| e(format!("chunk of payload {id}, which is not open")))?;
                if off != blob.bytes.len() as u64 {
                    return Err(e(format!(
                        "payload {id}: chunk at offset {off}, expected {}",
                        blob.bytes.len()
                    )));
                }
                if off + data.len() as u64 > blob.declared {
                    return Err(e(format!(
                        "payload {id}: chunk runs past the declared {} bytes",
                        blob.declared
                    )));
                }
                blob.bytes.extend_from_slice(data);
                blob.chunks += 1;
            }
            "blob-end" => {
                let id = r.unsigned("id")?;
                let blob = open
                    .remove(&id)
                    .ok_or_else(|| e(format!("end of payload {id}, which is not open")))?;
                let (len, chunks, crc) = (
                    r.unsigned("len")?,
                    r.unsigned("chunks")?,
                    r.unsigned("crc")?,
                );
                let got = blob.bytes.len() as u64;
                if len != got || len != blob.declared {
                    return Err(e(format!(
                        "payload {id}: declared {} bytes, firmware sent {len}, host got {got}",
                        blob.declared
                    )));
                }
                if chunks != blob.chunks {
                    return Err(e(format!(
                        "payload {id}: firmware sent {chunks} chunks, host got {}",
                        blob.chunks
                    )));
                }
                let host_crc = u64::from(crc32(&blob.bytes));
                if crc != host_crc {
                    return Err(e(format!(
                        "payload {id}: CRC-32 {crc:#010x} from firmware, {host_crc:#010x} on host"
                    )));
                }
                self.blobs.push(Blob {
                    id,
                    name: blob.name,
                    bytes: blob.bytes,
                });
            }
            "error" => self.errors.push(r.text("what")?.to_owned()),
            "panic" => self.panic = Some((r.text("file")?.to_owned(), r.unsigned("line")?)),
            "fault" => self.fault = Some(r.unsigned("pc")?),
            "done" => {
                once(&self.done, "done")?;
                self.done = Some(r.signed("code")?);
            }
            // Kinds from newer firmware are kept in the log lines but not interpreted.
            _ => {}
        }
        Ok(())
    }
}

fn once<T>(slot: &Option<T>, kind: &str) -> Result<(), RecordError> {
    match slot {
        Some(_) => Err(RecordError(format!("second `{kind}` record"))),
        None => Ok(()),
    }
}

/// CRC-32/ISO-HDLC, the checksum the firmware sends with each payload.
#[must_use]
pub fn crc32(bytes: &[u8]) -> u32 {
    crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC).checksum(bytes)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::record::Value;

    fn line(kind: &str, fields: Vec<(&str, Value)>) -> LogLine {
        LogLine {
            level: Some("INFO"),
            text: format!("hone:{kind}"),
            record: Some(Record {
                kind: kind.into(),
                fields: fields.into_iter().map(|(k, v)| (k.to_owned(), v)).collect(),
            }),
        }
    }

    fn u(v: u64) -> Value {
        Value::Unsigned(v)
    }

    fn boot() -> LogLine {
        line(
            "boot",
            vec![
                ("proto", u(1)),
                ("board", Value::Str("b".into())),
                ("unit", Value::Str("insn".into())),
                ("num", u(125)),
                ("den", u(2)),
            ],
        )
    }

    fn blob_lines(payload: &[u8], chunk: usize, crc: u32) -> Vec<LogLine> {
        let mut out = vec![line(
            "blob-begin",
            vec![
                ("id", u(7)),
                ("name", Value::Str("w".into())),
                ("len", u(payload.len() as u64)),
            ],
        )];
        for (i, c) in payload.chunks(chunk).enumerate() {
            out.push(line(
                "blob",
                vec![
                    ("id", u(7)),
                    ("off", u((i * chunk) as u64)),
                    ("data", Value::Bytes(c.to_vec())),
                ],
            ));
        }
        out.push(line(
            "blob-end",
            vec![
                ("id", u(7)),
                ("len", u(payload.len() as u64)),
                ("chunks", u(payload.len().div_ceil(chunk) as u64)),
                ("crc", u(u64::from(crc))),
            ],
        ));
        out
    }

    #[test]
    fn crc32_matches_the_standard_check_value() {
        // The catalogue check value of CRC-32/ISO-HDLC.
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
    }

    #[test]
    fn payload_is_reassembled_and_checked() {
        let payload: Vec<u8> = (0..1000u32).map(|i| (i * 7 % 251) as u8).collect();
        let mut lines = vec![boot()];
        lines.extend(blob_lines(&payload, 256, crc32(&payload)));
        let r = Report::from_lines(&lines).unwrap();
        assert_eq!(r.blob("w").unwrap().bytes, payload);
        assert_eq!(r.blob("w").unwrap().id, 7);
    }

    #[test]
    fn payload_faults_are_caught() {
        let payload: Vec<u8> = (0..600u32).map(|i| i as u8).collect();
        // bad CRC
        let lines = blob_lines(&payload, 256, crc32(&payload) ^ 1);
        let msg = Report::from_lines(&lines).unwrap_err().to_string();
        assert!(msg.contains("CRC"), "{msg}");
        // chunks swapped
        let mut lines = blob_lines(&payload, 256, crc32(&payload));
        lines.swap(1, 2);
        let msg = Report::from_lines(&lines).unwrap_err().to_string();
        assert!(msg.contains("offset"), "{msg}");
        // chunk lost
        let mut lines = blob_lines(&payload, 256, crc32(&payload));
        lines.remove(2);
        assert!(Report::from_lines(&lines).is_err());
        // never ended
        let mut lines = blob_lines(&payload, 256, crc32(&payload));
        lines.pop();
        let msg = Report::from_lines(&lines).unwrap_err().to_string();
        assert!(msg.contains("never ended"), "{msg}");
    }

    #[test]
    fn spans_must_agree_with_the_tick_ratio() {
        let span = |units| {
            line(
                "span",
                vec![
                    ("name", Value::Str("s".into())),
                    ("work", u(10)),
                    ("ticks", u(3)),
                    ("units", u(units)),
                ],
            )
        };
        // 3 ticks at 125/2 instructions per tick: 187 (rounded down).
        let r = Report::from_lines(&[boot(), span(187)]).unwrap();
        assert_eq!(r.span("s").unwrap().units_per_work(), Some(18.7));
        assert!(Report::from_lines(&[boot(), span(188)]).is_err());
        assert!(Report::from_lines(&[span(187)]).is_err());
    }

    #[test]
    fn boot_checks_protocol_and_unit() {
        let mut b = boot();
        if let Some(r) = &mut b.record {
            r.fields[0].1 = u(99);
        }
        let msg = Report::from_lines(&[b]).unwrap_err().to_string();
        assert!(msg.contains("protocol 99"), "{msg}");
        assert!(Report::from_lines(&[boot(), boot()]).is_err());
        let r = Report::from_lines(&[boot()]).unwrap();
        assert_eq!(
            r.boot.unwrap().unit,
            TickUnit::Instructions { num: 125, den: 2 }
        );
    }
}
