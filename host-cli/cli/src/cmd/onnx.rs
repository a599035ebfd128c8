//! `hone onnx …`: arguments of the ONNX import and export commands, turned into calls of
//! [`hone_host::onnx`].

use std::path::PathBuf;

use anyhow::{bail, Context, Result};
use clap::{Args, Subcommand};
use hone_host::model::FloatModel;
use hone_host::onnx::{self, ImportOptions, Precision};

/// Model exchange with the ONNX standard.
#[derive(Subcommand)]
pub enum OnnxCmd {
    /// Read an ONNX model and write hone's float model (JSON).
    ///
    /// Dense (Gemm, MatMul+Add), Conv, pooling, ReLU, LeakyReLU, tanh, sigmoid and Clip
    /// layers, a leading standardization (the input scaling) and a final Softmax (the
    /// cross-entropy loss). Anything else is refused, naming the node (exit status 2).
    Import(ImportArgs),
    /// Write a float model, or a model blob with a unit's checkpoint (dequantized), as ONNX.
    Export(ExportArgs),
}

#[derive(Args)]
pub struct Names {
    /// Input feature names, comma-separated, in input order (default: from the file's
    /// metadata written by `hone onnx export`).
    #[arg(long, value_delimiter = ',')]
    features: Option<Vec<String>>,
    /// Output names (regression targets or class names), comma-separated, in output order.
    #[arg(long, value_delimiter = ',')]
    outputs: Option<Vec<String>>,
}

#[derive(Args)]
pub struct ImportArgs {
    /// The ONNX file.
    file: PathBuf,
    /// Where to write the float model (JSON).
    #[arg(long)]
    out: PathBuf,
    #[command(flatten)]
    names: Names,
}

#[derive(Args)]
pub struct ExportArgs {
    /// Float model (JSON) to export.
    #[arg(long, conflicts_with = "blob", required_unless_present = "blob")]
    model: Option<PathBuf>,
    /// Model blob to export, dequantized.
    #[arg(long)]
    blob: Option<PathBuf>,
    /// A unit's checkpoint over the model blob: its calibrated values replace the blob's.
    #[arg(long, requires = "blob")]
    checkpoint: Option<PathBuf>,
    /// Where to write the ONNX file.
    #[arg(long)]
    out: PathBuf,
    /// Write `float` (32-bit) tensors instead of `double`, for tools that expect them.
    #[arg(long)]
    float32: bool,
    #[command(flatten)]
    names: Names,
}

fn read(p: &PathBuf) -> Result<Vec<u8>> {
    std::fs::read(p).with_context(|| p.display().to_string())
}

/// Runs one `hone onnx` command; returns the lines to print.
pub fn run(cmd: OnnxCmd) -> Result<String> {
    match cmd {
        OnnxCmd::Import(a) => {
            let opts = ImportOptions {
                features: a.names.features,
                outputs: a.names.outputs,
            };
            let m = onnx::import_file(&a.file, &opts)?;
            m.save(&a.out)?;
            let kinds: Vec<&str> = m
                .layers
                .iter()
                .map(|l| hone_host::config::kind_name(l.kind))
                .collect();
            Ok(format!(
                "imported {}: input {} × {}, layers {}, loss {:?}, {} scaled channels\nwrote {}",
                a.file.display(),
                m.input.channels,
                m.input.len,
                kinds.join(" → "),
                m.loss,
                m.scaling.len(),
                a.out.display()
            ))
        }
        OnnxCmd::Export(a) => {
            let m = match (&a.model, &a.blob) {
                (Some(path), None) => {
                    let mut m = FloatModel::load(path)?;
                    if let Some(f) = a.names.features {
                        m.features = f;
                    }
                    if let Some(o) = a.names.outputs {
                        m.outputs = o;
                    }
                    m
                }
                (None, Some(blob)) => {
                    let bytes = read(blob)?;
                    let ck = a.checkpoint.as_ref().map(read).transpose()?;
                    let shown = blob.display().to_string();
                    let ck_shown = a.checkpoint.as_ref().map(|p| p.display().to_string());
                    onnx::from_blobs(
                        (&shown, &bytes),
                        ck_shown.as_deref().zip(ck.as_deref()),
                        a.names.features,
                        a.names.outputs,
                    )?
                }
                _ => bail!("give --model, or --blob (with --checkpoint for a unit)"),
            };
            let precision = if a.float32 {
                Precision::F32
            } else {
                Precision::F64
            };
            onnx::export_file(&m, precision, &a.out)?;
            Ok(format!(
                "wrote {} (ONNX opset {}, {} tensors)",
                a.out.display(),
                onnx::OPSET,
                if a.float32 { "float" } else { "double" }
            ))
        }
    }
}
