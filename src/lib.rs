//! # vastmul
//!
//! Exact products of enormous integers stored in files.
//!
//! (The user guide is completed in README.md; this crate doc is its library half.)

#![warn(missing_docs)]

pub mod error;
pub mod format;
pub mod gen;
pub mod info;
pub mod output;
pub mod radix;
pub mod rng;

pub use error::{Error, Result};
pub use radix::Radix;
pub mod arith;
pub mod carry;
pub mod crt;
pub mod engine;
pub mod fourstep;
pub mod ntt;
pub mod plan;
pub mod schoolbook;
pub mod storage;
#[cfg(test)]
pub(crate) mod test_oracles;
pub use engine::multiply;
pub mod check;
pub mod demo;
pub mod job;
pub mod residue;
pub mod scratch;
pub mod size;
