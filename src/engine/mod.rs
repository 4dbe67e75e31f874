//! The calculation engine: plain Rust, no browser. Everything Cuvette computes lives
//! here and is tested natively with `cargo test`.
//!
//! **Invariant:** nothing under `src/engine/` imports leptos, web-sys, wasm-bindgen,
//! js-sys, gloo or plotters, and nothing here reads or writes storage or a clock.
//! Callers pass values in (including "now" and the lab's time zone) and get values back.

// Numeric code indexes several arrays in step; index loops read clearer there.
#![allow(clippy::needless_range_loop)]

pub mod acceptance;
pub mod calibration;
pub mod charts;
pub mod lm;
pub mod planning;
pub mod plausible;
pub mod qc;
pub mod qcstats;
pub mod readings;
pub mod results;
pub mod small_lm;
pub mod stability;
pub mod units;
