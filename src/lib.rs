//! # vastmul
//!
//! Exact products of enormous integers stored in files.
//!
//! (The user guide is completed in README.md; this crate doc is its library half.)

#![warn(missing_docs)]

pub mod error;
pub mod format;
pub mod gen;
pub mod output;
pub mod radix;
pub mod rng;

pub use error::{Error, Result};
pub use radix::Radix;
