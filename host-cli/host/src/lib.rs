//! Library of the `hone` workstation tool. The binary (`host-cli/cli`) stays thin; everything a
//! test may want to call without spawning a process lives here. Text tables, plots, reports and
//! atomic output sets come from `hone_report`; building, running and decoding board firmware
//! from `hone_qemu`.

pub mod checkpoint;
pub mod chips;
pub mod config;
pub mod data;
pub mod demo;
pub mod device;
pub mod drift;
pub mod export;
pub mod fleet;
pub mod inspect;
pub mod limits;
pub mod memplan;
pub mod model;
pub mod onnx;
pub mod pipeline;
pub mod quant;
pub mod ranges;
pub mod scenario;
pub mod sim;
pub mod sweep;
pub mod train;
