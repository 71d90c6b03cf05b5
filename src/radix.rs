//! The two radixes vastmul computes in, and the division by 10^19 that the
//! decimal carry pass needs.

use serde::{Deserialize, Serialize};

/// 10^19, the decimal limb base: the largest power of ten below 2^64.
pub const DEC_BASE: u64 = 10_000_000_000_000_000_000;

/// Decimal digits in one full base-10^19 limb.
pub const DEC_DIGITS_PER_LIMB: usize = 19;

/// Hexadecimal digits in one base-2^64 limb.
pub const HEX_DIGITS_PER_LIMB: usize = 16;

/// The radix of an operand's limbs. Products are computed and written in the
/// operands' own radix, so decimal in, decimal out never converts radix.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Radix {
    /// Limbs in base 2^64 (hexadecimal text, raw limbs, binary containers).
    Binary,
    /// Limbs in base 10^19 (decimal text, decimal containers).
    Decimal,
}

impl Radix {
    /// The largest value a limb may hold.
    pub fn max_limb(self) -> u64 {
        match self {
            Radix::Binary => u64::MAX,
            Radix::Decimal => DEC_BASE - 1,
        }
    }

    /// Half the limb base (2^63 or 5 * 10^18): limbs at or above it become
    /// negative balanced digits (see [`crate::fourstep`]).
    pub fn half_base(self) -> u64 {
        match self {
            Radix::Binary => 1 << 63,
            Radix::Decimal => DEC_BASE / 2,
        }
    }

    /// A short lowercase name used in reports and errors.
    pub fn name(self) -> &'static str {
        match self {
            Radix::Binary => "2^64",
            Radix::Decimal => "10^19",
        }
    }
}
