//! Library half of the `hone` workstation tool. The binary stays thin; everything a test may
//! want to call without spawning a process lives here.

pub mod checkpoint;
pub mod chips;
pub mod config;
pub mod data;
pub mod demo;
pub mod device;
pub mod drift;
pub mod export;
pub mod fleet;
pub mod fsutil;
pub mod inspect;
pub mod memplan;
pub mod model;
pub mod onnx;
pub mod pipeline;
pub mod plot;
pub mod quant;
pub mod ranges;
pub mod report;
pub mod scenario;
pub mod sim;
pub mod sweep;
pub mod train;
