//! # vastmul
//!
//! Exact products of enormous integers stored in files, in decimal or
//! binary, under a memory budget, on all cores. The command line is the
//! main interface (see README.md); this crate is its library half.
//!
//! Limbs are little-endian `u64`s in the operands' own radix: base 2^64
//! ([`Radix::Binary`]) or base 10^19 ([`Radix::Decimal`]), so decimal
//! operands are multiplied without any radix conversion:
//!
//! ```
//! use vastmul::{multiply, Radix};
//!
//! // (10^19 - 1)^2 = 10^38 - 2 * 10^19 + 1, in base-10^19 limbs
//! let nines = [9_999_999_999_999_999_999u64];
//! assert_eq!(multiply(&nines, &nines, Radix::Decimal), vec![1, 9_999_999_999_999_999_998]);
//!
//! // (2^64 - 1)^2 = 2^128 - 2^65 + 1, in base-2^64 limbs
//! assert_eq!(multiply(&[u64::MAX], &[u64::MAX], Radix::Binary), vec![1, u64::MAX - 1]);
//! ```
//!
//! Files go through [`job::multiply_files`]; the plan for a product is a
//! value from [`plan::plan`], carried out by [`engine::execute_to`].

#![warn(missing_docs)]

pub mod error;
pub mod faults;
pub mod format;
pub mod gen;
pub mod info;
pub mod interrupt;
pub mod ooc;
pub mod output;
pub mod packing;
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
pub mod ntt50;
pub mod pieces;
pub mod plan;
pub mod primeset;
pub mod schoolbook;
pub mod storage;
pub mod streamed;
#[cfg(test)]
pub(crate) mod test_oracles;
pub mod wrap;
pub use engine::multiply;
pub mod check;
pub mod demo;
pub mod display;
pub mod job;
pub mod manifest;
pub mod progress;
pub mod residue;
pub mod scratch;
pub mod size;
pub mod state;
pub mod usage;
