//! Which primes and which kernels a product's transforms use.
//!
//! Two sets, each exact for every product the planner admits:
//!
//! - [`PrimeSet::Three62`]: three primes just below 2^62 with the portable
//!   lazy 62-bit kernels of [`crate::ntt`]. The bound is proved in
//!   [`crate::arith::primes`].
//! - [`PrimeSet::Four50`]: four primes below 2^50 with one of the kernel
//!   paths of [`crate::ntt50`] (scalar, AVX2 or AVX-512 IFMA). Their
//!   product exceeds 2^199, so coefficients of `m` terms of 64-bit limbs
//!   stay exact while `m * (2^64 - 1)^2` is below it: for every `m` up to
//!   about 2^71, far beyond the 2^32-point limit of these primes
//!   ([`crate::ntt50::primes::coefficient_bound_holds`] checks it exactly,
//!   and a compile-time assertion below checks it at that limit).
//! - [`PrimeSet::Three50`]: the first three of those primes (product about
//!   2^149.9995), exact while the shorter operand has at most 8_385_533
//!   limbs in base 2^64 or 28_534_498 in base 10^19, because the 50-bit
//!   sets transform balanced digits
//!   ([`crate::ntt50::primes::balanced_bound_holds_for_first`]). The
//!   planner takes it whenever the bound holds: a quarter less transform
//!   work and memory.
//!
//! The vector paths make a butterfly three to five times cheaper than the
//! 62-bit scalar one, more than paying for the fourth prime; the 50-bit
//! scalar path is slower than the 62-bit one and is there to be tested
//! against, and for the vector paths to be compared with. So the default is
//! the four-prime set with the best vector path the CPU has, and the
//! three-prime set on a CPU with neither.

use crate::ntt50::{self, Kernel};
use crate::radix::Radix;
use serde::{Deserialize, Serialize};

/// The environment variable that forces a prime set and kernel:
/// `ifma`, `avx2` or `scalar` (four primes below 2^50 with that path) or
/// `wide` (three primes below 2^62).
pub const KERNEL_ENV: &str = ntt50::KERNEL_ENV;

/// The primes and kernels of a product's transforms.
/// The default is what plans written before the choice existed used.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "set", content = "kernel")]
pub enum PrimeSet {
    /// Three primes below 2^62, portable scalar kernels.
    #[default]
    Three62,
    /// Four primes below 2^50 with the given kernel path.
    Four50(Kernel),
    /// The first three of the four primes below 2^50, for products whose
    /// coefficients they hold exactly.
    Three50(Kernel),
}

// Exactness of the four-prime set at its longest transform, for both radixes
// (decimal limbs are smaller than binary ones).
const _: () = assert!(ntt50::primes::coefficient_bound_holds(
    ntt50::primes::MAX_TRANSFORM_LEN as u128,
    u64::MAX
));

/// Why a forced choice was refused.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("{0}")]
pub struct PrimeSetChoiceError(pub String);

impl PrimeSet {
    /// Every set this CPU can run, for tests that cover them all.
    pub fn all_supported() -> Vec<PrimeSet> {
        let kernels = Kernel::ALL.into_iter().filter(|k| k.is_supported());
        std::iter::once(PrimeSet::Three62)
            .chain(kernels.flat_map(|k| [PrimeSet::Four50(k), PrimeSet::Three50(k)]))
            .collect()
    }

    /// The set a product with `terms` limb products per coefficient (the
    /// shorter operand's length) in `radix` takes from this family: three
    /// of the 50-bit primes where they are exact, else four; the 62-bit set
    /// is its own family.
    pub fn fitted(self, terms: u64, radix: Radix) -> PrimeSet {
        match self {
            PrimeSet::Three62 => PrimeSet::Three62,
            PrimeSet::Four50(k) | PrimeSet::Three50(k) => {
                if PrimeSet::Three50(k).exact_for(terms, radix) {
                    PrimeSet::Three50(k)
                } else {
                    PrimeSet::Four50(k)
                }
            }
        }
    }

    /// The kernel path of a 50-bit set (`None` for the 62-bit one).
    pub fn kernel(self) -> Option<Kernel> {
        match self {
            PrimeSet::Three62 => None,
            PrimeSet::Four50(k) | PrimeSet::Three50(k) => Some(k),
        }
    }

    /// The fastest set on this CPU: four primes with a vector path when
    /// there is one, else three.
    pub fn detect() -> PrimeSet {
        match Kernel::detect() {
            Kernel::Scalar => PrimeSet::Three62,
            k => PrimeSet::Four50(k),
        }
    }

    /// [`PrimeSet::detect`], unless [`KERNEL_ENV`] forces a set (checked
    /// against what the CPU supports: a forced comparison never silently
    /// measures another path).
    pub fn from_env() -> Result<PrimeSet, PrimeSetChoiceError> {
        PrimeSet::from_choice(std::env::var(KERNEL_ENV).ok().as_deref())
    }

    /// [`PrimeSet::from_env`], or [`PrimeSet::detect`] when the variable
    /// names nothing this CPU runs: for library calls, which have no way to
    /// report it (the command line refuses such a value before it plans).
    pub fn preferred() -> PrimeSet {
        PrimeSet::from_env().unwrap_or_else(|_| PrimeSet::detect())
    }

    /// The set a value of [`KERNEL_ENV`] selects (see there).
    pub fn from_choice(choice: Option<&str>) -> Result<PrimeSet, PrimeSetChoiceError> {
        match choice.map(str::trim) {
            None | Some("") => Ok(PrimeSet::detect()),
            Some(name) if name.eq_ignore_ascii_case("wide") => Ok(PrimeSet::Three62),
            Some(name) => match Kernel::from_choice(Some(name)) {
                Ok(k) => Ok(PrimeSet::Four50(k)),
                Err(ntt50::KernelChoiceError::Unknown(v)) => Err(PrimeSetChoiceError(format!(
                    "{KERNEL_ENV}={v:?} names no kernel; use ifma, avx2, scalar or wide"
                ))),
                Err(e) => Err(PrimeSetChoiceError(e.to_string())),
            },
        }
    }

    /// How many primes the set has.
    pub fn count(self) -> usize {
        match self {
            PrimeSet::Three62 => crate::arith::primes::PRIME_COUNT,
            PrimeSet::Four50(_) => ntt50::primes::PRIMES.len(),
            PrimeSet::Three50(_) => 3,
        }
    }

    /// The primes themselves.
    pub fn primes(self) -> Vec<u64> {
        match self {
            PrimeSet::Three62 => crate::arith::primes::PRIMES
                .iter()
                .map(|p| p.modulus.p)
                .collect(),
            PrimeSet::Four50(_) | PrimeSet::Three50(_) => ntt50::primes::PRIMES[..self.count()]
                .iter()
                .map(|p| p.modulus.p)
                .collect(),
        }
    }

    /// The longest transform the set supports.
    pub fn max_transform_len(self) -> u64 {
        match self {
            PrimeSet::Three62 => crate::arith::primes::MAX_TRANSFORM_LEN,
            PrimeSet::Four50(_) | PrimeSet::Three50(_) => ntt50::primes::MAX_TRANSFORM_LEN,
        }
    }

    /// True when a transform of `len` points exists modulo every prime of
    /// the set: both sets' kernels take `2^k` and `3 * 2^k`, up to the
    /// set's limit.
    pub fn supports_len(self, len: usize) -> bool {
        len as u64 <= self.max_transform_len()
            && match self {
                PrimeSet::Three62 => crate::ntt::supported_len(len),
                PrimeSet::Four50(_) | PrimeSet::Three50(_) => ntt50::supported_len(len),
            }
    }

    /// True when coefficients summing `terms` limb products in `radix` are
    /// recovered exactly.
    pub fn exact_for(self, terms: u64, radix: Radix) -> bool {
        match self {
            PrimeSet::Three62 => {
                crate::arith::primes::coefficient_bound_holds(terms, radix.max_limb())
            }
            PrimeSet::Four50(_) | PrimeSet::Three50(_) => {
                ntt50::primes::balanced_bound_holds_for_first(
                    self.count(),
                    terms as u128,
                    radix.half_base(),
                )
            }
        }
    }

    /// True when the set's transforms take the operands as balanced digits
    /// (signed, at most half the radix in size) and its CRT gives signed
    /// coefficients: the 50-bit sets, whose bound this halves.
    pub fn balanced_digits(self) -> bool {
        !matches!(self, PrimeSet::Three62)
    }

    /// A description for the plan's printout.
    pub fn describe(self) -> String {
        match self {
            PrimeSet::Three62 => "3 primes below 2^62, scalar kernels".into(),
            PrimeSet::Four50(k) => format!("4 primes below 2^50, {} kernels", k.name()),
            PrimeSet::Three50(k) => format!("3 primes below 2^50, {} kernels", k.name()),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn choices_parse_and_unsupported_paths_are_refused() {
        assert_eq!(PrimeSet::from_choice(Some("wide")), Ok(PrimeSet::Three62));
        assert_eq!(
            PrimeSet::from_choice(Some(" Scalar ")),
            Ok(PrimeSet::Four50(Kernel::Scalar))
        );
        assert_eq!(PrimeSet::from_choice(None), Ok(PrimeSet::detect()));
        assert_eq!(PrimeSet::from_choice(Some("")), Ok(PrimeSet::detect()));
        let e = PrimeSet::from_choice(Some("sse9")).unwrap_err();
        assert!(e.0.contains("ifma, avx2, scalar or wide"), "{e}");
        for k in [Kernel::Avx2, Kernel::Ifma] {
            let r = PrimeSet::from_choice(Some(k.name()));
            if k.is_supported() {
                assert_eq!(r, Ok(PrimeSet::Four50(k)));
            } else {
                assert!(r.unwrap_err().0.contains("does not support"));
            }
        }
    }

    #[test]
    fn sets_report_their_primes_and_lengths() {
        assert_eq!(PrimeSet::Three62.count(), 3);
        assert_eq!(PrimeSet::Four50(Kernel::Scalar).count(), 4);
        assert_eq!(PrimeSet::Four50(Kernel::Scalar).primes().len(), 4);
        assert!(PrimeSet::Three62.supports_len(3 << 10));
        assert!(PrimeSet::Four50(Kernel::Scalar).supports_len(3 << 10));
        assert!(!PrimeSet::Four50(Kernel::Scalar).supports_len(5 << 10));
        assert!(PrimeSet::Four50(Kernel::Scalar).supports_len(1 << 32));
        assert!(!PrimeSet::Four50(Kernel::Scalar).supports_len(1 << 33));
        // 2^71 terms of 64-bit limbs: about 2^199, at the four primes' edge
        assert!(PrimeSet::Four50(Kernel::Scalar).exact_for(1 << 40, Radix::Binary));
        let json = serde_json::to_string(&PrimeSet::Four50(Kernel::Ifma)).unwrap();
        assert_eq!(json, r#"{"set":"four50","kernel":"ifma"}"#);
        let back: PrimeSet = serde_json::from_str(&json).unwrap();
        assert_eq!(back, PrimeSet::Four50(Kernel::Ifma));
    }

    /// Three of the 50-bit primes exactly where their bound holds: up to
    /// 8_385_533 binary and 28_534_498 decimal limbs in the shorter operand.
    #[test]
    fn three_primes_are_fitted_up_to_their_bound() {
        let four = PrimeSet::Four50(Kernel::Scalar);
        let three = PrimeSet::Three50(Kernel::Scalar);
        assert_eq!(three.count(), 3);
        assert_eq!(three.primes(), four.primes()[..3]);
        for (limit, radix) in [(8_385_533, Radix::Binary), (28_534_498, Radix::Decimal)] {
            assert_eq!(four.fitted(1, radix), three);
            assert_eq!(four.fitted(limit, radix), three);
            assert_eq!(three.fitted(limit + 1, radix), four);
            assert_eq!(four.fitted(limit + 1, radix), four);
        }
        // 2^28-bit operands (2^22 limbs) fit; 2^29-bit ones just miss it.
        assert_eq!(four.fitted(1 << 22, Radix::Binary), three);
        assert_eq!(four.fitted(1 << 23, Radix::Binary), four);
        assert_eq!(
            PrimeSet::Three62.fitted(1, Radix::Binary),
            PrimeSet::Three62
        );
    }
}
