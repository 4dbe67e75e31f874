//! Cuvette: the bench of a small clinical chemistry lab, in one offline HTML file.
//!
//! `engine` is the plain-Rust calculation core (also used by the `cuvette-calc`
//! command-line calculator); `lab` is the record data; `store` and `ui` are the thin
//! browser shell.

pub mod board;
#[cfg(not(target_arch = "wasm32"))]
pub mod calc;
pub mod corrective;
pub mod demo;
pub mod due;
pub mod engine;
pub mod entry;
pub mod exchange;
pub mod export;
pub mod journal;
pub mod lab;
pub mod mirror;
pub mod period;
pub mod store;
pub mod ui;
pub mod usage;
pub mod verdicts;
pub mod verification;
